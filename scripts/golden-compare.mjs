#!/usr/bin/env node
// Regenerates test/golden/compare/: for every example spec in specs/, the `headroom compare --json` result.
// Run `npm run golden` (it builds first). Golden files are made only by this script, never by hand.
import { readdir, mkdir, writeFile, rename } from "node:fs/promises";
import { fileURLToPath } from "node:url";
import { join } from "node:path";
import { loadSpec } from "../dist/spec/index.js";
import { comparePlans } from "../dist/compare.js";
import { renderCompareJson } from "../dist/report/compare-text.js";

const root = fileURLToPath(new URL("..", import.meta.url));
const goldenDir = join(root, "test", "golden", "compare");

async function writeWhole(path, text) {
  const temporary = `${path}.tmp-${process.pid}`;
  await writeFile(temporary, text);
  await rename(temporary, path);
}

process.chdir(root);
await mkdir(goldenDir, { recursive: true });
const files = (await readdir(join(root, "specs"))).filter((name) => /\.ya?ml$/.test(name)).sort();
let failures = 0;
for (const file of files) {
  const loaded = await loadSpec(join("specs", file).replaceAll("\\", "/"));
  if (!loaded.ok) {
    failures++;
    console.error(`${file}: the spec does not load`);
    continue;
  }
  const comparison = comparePlans(loaded.spec);
  const name = file.replace(/\.ya?ml$/, "");
  await writeWhole(join(goldenDir, `${name}.json`), renderCompareJson(comparison));
  console.log(`${name}: ${comparison.outcomes.map((o) => `${o.plan.name} ${o.verdict}`).join(", ")}`);
}
process.exitCode = failures > 0 ? 1 : 0;
