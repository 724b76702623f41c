// Check every network spec in a folder and print the ones that are at risk or fail.
// Usage: node examples/at-risk.mjs [folder]     (the folder defaults to ./specs)
// Exit code 1 when some spec is at risk or fails, 2 when some file is not a valid spec.
import { readdir } from "node:fs/promises";
import { join } from "node:path";
import { check, CheckInputError, formatSpecIssue, loadSpec, positionIssues } from "headroom";

const folder = process.argv[2] ?? "specs";
const files = (await readdir(folder)).filter((name) => /\.ya?ml$/.test(name)).sort();

let atRisk = 0;
let invalid = 0;
for (const name of files) {
  const loaded = await loadSpec(join(folder, name));
  if (!loaded.ok) {
    invalid += 1;
    console.log(`${name}: not a valid spec: ${formatSpecIssue(loaded.issues[0])}`);
    continue;
  }
  let result;
  try {
    result = check(loaded.spec);
  } catch (error) {
    if (!(error instanceof CheckInputError)) throw error;
    invalid += 1;
    // the issues name spec paths; the loaded file positions them (file:line:column)
    const positioned = positionIssues(loaded.locate, error.issues);
    console.log(`${name}: the network cannot be built: ${positioned.map(formatSpecIssue).join("; ")}`);
    continue;
  }
  if (result.verdict === "fits") continue;
  atRisk += 1;
  const formats = result.formats.filter((f) => f.verdict !== "fits").map((f) => `${f.format} ${f.verdict}`);
  console.log(`${result.spec.name}: ${result.verdict} (${formats.join(", ")})`);
  for (const reason of result.formats.flatMap((f) => f.reasons).slice(0, 2)) console.log(`  ${reason}`);
}
console.log(`${atRisk} of ${files.length} specs at risk or failing; ${invalid} invalid. Predictions are estimates: confirm with a short run.`);
process.exitCode = invalid > 0 ? 2 : atRisk > 0 ? 1 : 0;
