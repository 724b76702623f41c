#!/usr/bin/env node
/**
 * Time per fresh check of the 1,000-layer spec, two builds loaded into one process and called in turn:
 *   node bench/compare/check-interleaved.mjs BASE_DIST NEW_DIST [--rounds 4] [--calls 60] [--growth 1.1] [--json 1]
 * Each round is one process: both builds are warmed with WARM_UP_CHECKS checks each (measure.mjs), then each variant
 * no earlier call has seen (input scale moved by 2^-20) is checked by both builds one after the other, the order of
 * the two swapped from variant to variant. Each call's wall time (performance.now) and thread processor time are
 * added to its build's sums; the ratio NEW/BASE of the sums is printed per round and over all rounds. `--json 1` times
 * each check together with JSON.stringify of its result, as `headroom check --json` does: a result may work out some of
 * its fields when first read (src/risk/tensor-check.ts), and this is the measure that still counts them.
 *
 * Why beside check-time.mjs: there each build runs in processes of its own, a few seconds apart, and this machine's
 * speed moves by ±20–30% from minute to minute, so gains under ~5% stay unresolved after many rounds. Here both builds
 * meet the same seconds, call by call (two copies of one build read 0.988 and 1.025, Dec 2026). What it cannot
 * separate: the two builds share one heap, so a collection made necessary by one build's garbage may fall in the
 * other's call, which pulls differences in allocation towards 1 (check-memory.mjs measures those apart). Thread time
 * advances in the kernel's ticks (4 ms here): summed over many calls it samples fairly; wall time also counts other
 * processes' turns on the core, alike for both builds on average.
 */
import { performance } from "node:perf_hooks";
import { fileURLToPath } from "node:url";
import { child, loadBuild, options, threadMs, WARM_UP_CHECKS } from "./measure.mjs";
import { mlpVariant } from "./specs.mjs";

const self = fileURLToPath(import.meta.url);
const argv = process.argv.slice(2);
if (argv[0] === "--round") {
  const [, baseDist, newDist, calls, growth, round, json] = argv;
  const serialise = json === "1";
  const builds = [(await loadBuild(baseDist)).check, (await loadBuild(newDist)).check];
  const variant = (i) => mlpVariant(i, Number(round), Number(growth));
  for (let i = 0; i < WARM_UP_CHECKS; i++) for (const check of builds) check(variant(500 + i));
  const wall = [0, 0];
  const thread = [0, 0];
  for (let i = 0; i < Number(calls); i++) {
    // each build gets a spec object of its own (a check may read a spec's fields lazily), made outside the timing
    const specs = [variant(i + 1), variant(i + 1)];
    for (const b of i % 2 === 0 ? [0, 1] : [1, 0]) {
      const w = performance.now();
      const t = threadMs();
      const result = builds[b](specs[b]);
      if (serialise && JSON.stringify(result).length === 0) throw new Error("an empty result");
      thread[b] += threadMs() - t;
      wall[b] += performance.now() - w;
    }
  }
  const n = Number(calls);
  console.log(JSON.stringify({ wall: wall.map((x) => x / n), thread: thread.map((x) => x / n) }));
} else {
  const { positional, options: o } = options(argv, { rounds: 4, calls: 60, growth: 1.1, json: 0 });
  if (positional.length !== 2) {
    console.error("usage: node bench/compare/check-interleaved.mjs BASE_DIST NEW_DIST [--rounds 4] [--calls 60] [--growth 1.1] [--json 1]");
    process.exit(2);
  }
  const sums = { wall: [0, 0], thread: [0, 0] };
  const what = o.json === 1 ? "check and JSON.stringify of its result" : "check";
  console.log(`1,000-layer ${what}, weight growth ${o.growth}, both builds in one process, ms per fresh check (${o.calls} each per round):`);
  for (let r = 0; r < o.rounds; r++) {
    const out = child(self, ["--round", positional[0], positional[1], String(o.calls), String(o.growth), String(r), String(o.json)]);
    for (const m of ["wall", "thread"]) for (const b of [0, 1]) sums[m][b] += out[m][b];
    const row = (m) => `${m} base ${out[m][0].toFixed(1)} new ${out[m][1].toFixed(1)} (${(out[m][1] / out[m][0]).toFixed(3)})`;
    console.log(`  round ${r + 1}: ${row("wall")}; ${row("thread")}`);
  }
  for (const m of ["wall", "thread"]) console.log(`  new/base ${m} ${(sums[m][1] / sums[m][0]).toFixed(3)} (summed over ${o.rounds} rounds)`);
}
