#!/usr/bin/env node
/**
 * Processor time per check of each example spec (specs/ of the base build's project), the same call repeated, two
 * builds alternating:
 *   node bench/compare/examples-time.mjs BASE_DIST NEW_DIST [--rounds 4] [--calls 21]
 * Prints each example's milliseconds per check per round and NEW/BASE of the sums.
 */
import { readdirSync, readFileSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { alternating, child, loadBuild, options, threadMs } from "./measure.mjs";

const self = fileURLToPath(import.meta.url);
const argv = process.argv.slice(2);
if (argv[0] === "--round") {
  const [, dist, calls, specsDir] = argv;
  const { check, parseSpec } = await loadBuild(dist);
  const out = {};
  for (const name of readdirSync(specsDir).filter((n) => /\.ya?ml$/.test(n)).sort()) {
    const parsed = parseSpec(readFileSync(join(specsDir, name), "utf8"), name);
    if (!parsed.ok) throw new Error(`${name} does not load in ${dist}`);
    check(parsed.spec);
    const start = threadMs();
    for (let i = 0; i < Number(calls); i++) check(parsed.spec);
    out[name] = (threadMs() - start) / Number(calls);
  }
  console.log(JSON.stringify(out));
} else {
  const { positional, options: o } = options(argv, { rounds: 4, calls: 21 });
  if (positional.length !== 2) {
    console.error("usage: node bench/compare/examples-time.mjs BASE_DIST NEW_DIST [--rounds 4] [--calls 21]");
    process.exit(2);
  }
  const specsDir = join(dirname(resolve(positional[0])), "specs");
  const runs = alternating(o.rounds, positional, (dist) => child(self, ["--round", dist, String(o.calls), specsDir]));
  console.log(`examples, ms of processor time per check (${o.calls} repeated calls per round), base -> new:`);
  for (const name of Object.keys(runs.base[0])) {
    const a = runs.base.map((r) => r[name]);
    const b = runs.new.map((r) => r[name]);
    const ratio = b.reduce((s, x) => s + x, 0) / a.reduce((s, x) => s + x, 0);
    console.log(`  ${name.padEnd(28)} ${a.map((x) => x.toFixed(1)).join(" / ")} -> ${b.map((x) => x.toFixed(1)).join(" / ")}  new/base ${ratio.toFixed(2)}`);
  }
}
