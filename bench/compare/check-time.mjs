#!/usr/bin/env node
/**
 * Processor time per fresh check of the 1,000-layer spec, two builds alternating in the same minutes:
 *   node bench/compare/check-time.mjs BASE_DIST NEW_DIST [--rounds 8] [--calls 15] [--growth 1.1]
 * Each round runs each build in its own process: WARM_UP_CHECKS warm-up checks (measure.mjs), then `calls` variants
 * no earlier call has seen (input scale moved by 2^-20 each), their thread processor time summed and divided.
 * `--growth 1` checks the network with weights that do not grow over the horizon, whose loss-scale pick is weighed
 * (check.bench.ts says why).
 * Prints each round's milliseconds per check and the ratio NEW/BASE of the sums. This machine's speed moves by
 * ±20–30% from minute to minute: read the ratio over many rounds, not one round's figures.
 */
import { fileURLToPath } from "node:url";
import { alternating, child, loadBuild, options, threadMs, WARM_UP_CHECKS } from "./measure.mjs";
import { mlpVariant } from "./specs.mjs";

const self = fileURLToPath(import.meta.url);
const argv = process.argv.slice(2);
if (argv[0] === "--round") {
  const [, dist, calls, growth, round] = argv;
  const { check } = await loadBuild(dist);
  const variant = (i) => mlpVariant(i, Number(round), Number(growth));
  for (let i = 0; i < WARM_UP_CHECKS; i++) check(variant(500 + i));
  const specs = Array.from({ length: Number(calls) }, (_, i) => variant(i + 1));
  const start = threadMs();
  for (const spec of specs) check(spec);
  console.log(JSON.stringify({ ms: (threadMs() - start) / specs.length }));
} else {
  const { positional, options: o } = options(argv, { rounds: 8, calls: 15, growth: 1.1 });
  if (positional.length !== 2) {
    console.error("usage: node bench/compare/check-time.mjs BASE_DIST NEW_DIST [--rounds 8] [--calls 15] [--growth 1.1]");
    process.exit(2);
  }
  const runs = alternating(o.rounds, positional, (dist, r) => child(self, ["--round", dist, String(o.calls), String(o.growth), String(r)]).ms);
  const sum = (xs) => xs.reduce((a, b) => a + b, 0);
  console.log(`1,000-layer check, weight growth ${o.growth}, ms of processor time per fresh check (${o.calls} per round):`);
  console.log(`  base ${runs.base.map((x) => x.toFixed(1)).join(" / ")}`);
  console.log(`  new  ${runs.new.map((x) => x.toFixed(1)).join(" / ")}`);
  console.log(`  new/base ${(sum(runs.new) / sum(runs.base)).toFixed(3)} (summed over ${o.rounds} rounds)`);
}
