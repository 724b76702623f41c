#!/usr/bin/env node
// Regenerates test/golden/check/: for every example spec in specs/, the `headroom check --json` result
// (<name>.json) and the terminal output without colour (<name>.txt). Run `npm run golden` (it builds first).
// Golden files are made only by this script, never by hand; review the diff before committing.
import { readdir, mkdir, writeFile, rename } from "node:fs/promises";
import { fileURLToPath } from "node:url";
import { join } from "node:path";
import { loadSpec } from "../dist/spec/index.js";
import { check } from "../dist/check.js";
import { renderCheckJson } from "../dist/report/check-json.js";
import { renderCheckText } from "../dist/report/check-text.js";

const root = fileURLToPath(new URL("..", import.meta.url));
const specsDir = join(root, "specs");
const goldenDir = join(root, "test", "golden", "check");

async function writeWhole(path, text) {
  const temporary = `${path}.tmp-${process.pid}`;
  await writeFile(temporary, text);
  await rename(temporary, path);
}

process.chdir(root);
await mkdir(goldenDir, { recursive: true });
const files = (await readdir(specsDir)).filter((name) => /\.ya?ml$/.test(name)).sort();
let failures = 0;
for (const file of files) {
  // paths relative to the project root, as the CLI test passes them
  const loaded = await loadSpec(join("specs", file).replaceAll("\\", "/"));
  if (!loaded.ok) {
    failures++;
    console.error(`${file}: the spec does not load: ${loaded.issues.map((i) => i.message).join("; ")}`);
    continue;
  }
  const result = check(loaded.spec);
  const name = file.replace(/\.ya?ml$/, "");
  await writeWhole(join(goldenDir, `${name}.json`), renderCheckJson(result));
  await writeWhole(join(goldenDir, `${name}.txt`), renderCheckText(result, { width: 100 }));
  console.log(`${name}: ${result.formats.map((f) => `${f.format} ${f.verdict}`).join(", ")}`);
}
process.exitCode = failures > 0 ? 1 : 0;

// keep the README's example output in step with the golden text of the bundled example it shows
const README_EXAMPLE = "cnn-batchnorm";
const readmePath = join(root, "README.md");
const { readFile } = await import("node:fs/promises");
const readme = await readFile(readmePath, "utf8");
const start = "<!-- check-example:start -->";
const end = "<!-- check-example:end -->";
const from = readme.indexOf(start);
const to = readme.indexOf(end);
if (from >= 0 && to > from) {
  const text = await readFile(join(goldenDir, `${README_EXAMPLE}.txt`), "utf8");
  const block = `${start}\n\`\`\`text\n$ headroom check specs/${README_EXAMPLE}.yaml\n${text}\`\`\`\n`;
  await writeWhole(readmePath, readme.slice(0, from) + block + readme.slice(to));
  console.log(`README.md: example output of ${README_EXAMPLE} updated`);
}
