#!/usr/bin/env node
/**
 * Whether two builds give the same results: every example spec under several format options and input scales, and the
 * 1,000-layer spec at four weight growths and four input scales, checked by both builds and compared as JSON:
 *   node bench/compare/outputs.mjs BASE_DIST NEW_DIST
 * Prints the count that differ and, for each, the largest relative difference of a number and the text that differs
 * (a verdict, a finding, a sentence). Exit code 1 when any differs. A speed change should leave all identical.
 */
import { readdirSync, readFileSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { loadBuild } from "./measure.mjs";
import { mlpSpec } from "./specs.mjs";

const [baseDist, newDist] = process.argv.slice(2);
if (newDist === undefined) {
  console.error("usage: node bench/compare/outputs.mjs BASE_DIST NEW_DIST");
  process.exit(2);
}
const builds = [await loadBuild(baseDist), await loadBuild(newDist)];
const specsDir = join(dirname(resolve(baseDist)), "specs");

// format options a user passes (the plan's formats, others in their place, every format's numbers, a static scale)
const OPTIONS = [{}, { formats: ["bfloat16"] }, { formats: ["e4m3"] }, { formats: ["e5m2"] }, { formats: ["binary16", "bfloat16"], everyFormat: true }, { lossScale: 1024 }];
const cases = [];
for (const name of readdirSync(specsDir).filter((n) => /\.ya?ml$/.test(n)).sort()) {
  const text = readFileSync(join(specsDir, name), "utf8");
  const spec = (b) => {
    const parsed = b.parseSpec(text, name);
    if (!parsed.ok) throw new Error(`${name} does not load`);
    return parsed.spec;
  };
  OPTIONS.forEach((o, i) => cases.push({ label: `${name} options ${JSON.stringify(o)}`, run: (b) => b.check(spec(b), o) }));
  for (const scale of [0.25, 4]) {
    cases.push({ label: `${name} input scale ×${scale}`, run: (b) => { const s = spec(b); s.input.scale = (s.input.scale ?? 1) * scale; return b.check(s); } });
  }
}
for (const growth of [1.1, 1, 1.02, 0.98]) {
  for (const scale of [1, 1 + 2 ** -20, 64, 1 / 64]) {
    cases.push({ label: `mlp-1000 growth ${growth} input scale ${scale}`, run: (b) => { const s = mlpSpec(scale); s.training.horizon.weightGrowth = growth; return b.check(s); } });
  }
}

const outcome = (b, c) => {
  try {
    return JSON.stringify(c.run(b));
  } catch (error) {
    return JSON.stringify({ error: String(error) });
  }
};
// the largest relative difference between numbers at the same place, and the places whose text or shape differs
function differences(a, b, path, out) {
  if (typeof a === "number" && typeof b === "number") {
    if (a !== b && !(Number.isNaN(a) && Number.isNaN(b))) out.relative = Math.max(out.relative, Math.abs(a - b) / Math.max(Math.abs(a), Math.abs(b)));
  } else if (a !== null && b !== null && typeof a === "object" && typeof b === "object") {
    for (const key of new Set([...Object.keys(a), ...Object.keys(b)])) differences(a[key], b[key], `${path}.${key}`, out);
  } else if (a !== b && out.text.length < 3) out.text.push(`${path}: ${JSON.stringify(a)} -> ${JSON.stringify(b)}`.slice(0, 240));
  return out;
}
let differing = 0;
for (const c of cases) {
  const [a, b] = builds.map((build) => outcome(build, c));
  if (a === b) continue;
  differing++;
  const d = differences(JSON.parse(a), JSON.parse(b), "", { relative: 0, text: [] });
  console.log(`differs: ${c.label}: numbers up to ${d.relative.toExponential(2)} relative${d.text.length ? "; " + d.text.join("; ") : ""}`);
}
console.log(`${cases.length} outputs, ${differing} differ`);
process.exit(differing > 0 ? 1 : 0);
