#!/usr/bin/env node
/**
 * What a fresh check of the 1,000-layer spec allocates and how many young collections it runs, two builds alternating:
 *   node bench/compare/check-memory.mjs BASE_DIST NEW_DIST [--rounds 4] [--calls 30] [--growth 1.1]
 * A check's result stays alive while it is made, so each young collection (a scavenge) copies the part made so far,
 * and what survives two is copied again into the old generation: fewer megabytes allocated mean fewer scavenges per
 * check, and fewer kept alive make each cheaper. Each round runs each build twice in fresh processes: once with V8's
 * sampling heap profiler (objects later collected included; sampled every 4 KiB, so totals over many calls are what
 * count), once plain, counting the minor collections and their pauses (perf_hooks "gc" entries). Both numbers move
 * far less from minute to minute than processor time does; read them beside check-time.mjs, not in its place.
 */
import { Session } from "node:inspector/promises";
import { constants, PerformanceObserver } from "node:perf_hooks";
import { fileURLToPath } from "node:url";
import { alternating, child, loadBuild, options, WARM_UP_CHECKS } from "./measure.mjs";
import { mlpVariant } from "./specs.mjs";

const self = fileURLToPath(import.meta.url);
const argv = process.argv.slice(2);

function variants(calls, growth, round) {
  const variant = (i) => mlpVariant(i, round, growth);
  return { warm: Array.from({ length: WARM_UP_CHECKS }, (_, i) => variant(500 + i)), specs: Array.from({ length: calls }, (_, i) => variant(i + 1)) };
}

// the sampled profile's bytes, summed over its call tree
function sampledBytes(node) {
  let total = node.selfSize;
  for (const c of node.children) total += sampledBytes(c);
  return total;
}

if (argv[0] === "--allocation" || argv[0] === "--collections") {
  const [mode, dist, calls, growth, round] = argv;
  const { check } = await loadBuild(dist);
  const { warm, specs } = variants(Number(calls), Number(growth), Number(round));
  for (const spec of warm) check(spec);
  if (mode === "--allocation") {
    const session = new Session();
    session.connect();
    await session.post("HeapProfiler.enable");
    await session.post("HeapProfiler.startSampling", {
      samplingInterval: 4096,
      includeObjectsCollectedByMajorGC: true,
      includeObjectsCollectedByMinorGC: true,
    });
    for (const spec of specs) check(spec);
    const { profile } = await session.post("HeapProfiler.stopSampling");
    session.disconnect();
    console.log(JSON.stringify({ mb: sampledBytes(profile.head) / specs.length / 1e6 }));
  } else {
    let scavenges = 0;
    let pauseMs = 0;
    const observer = new PerformanceObserver((list) => {
      for (const entry of list.getEntries()) {
        if (entry.detail?.kind === constants.NODE_PERFORMANCE_GC_MINOR) {
          scavenges += 1;
          pauseMs += entry.duration;
        }
      }
    });
    observer.observe({ entryTypes: ["gc"] });
    for (const spec of specs) check(spec);
    // the observer's entries arrive on the event loop: let it run once before reading them
    await new Promise((done) => setTimeout(done, 50));
    observer.disconnect();
    console.log(JSON.stringify({ scavenges: (scavenges * 100) / specs.length, pauseMs: pauseMs / specs.length }));
  }
} else {
  const { positional, options: o } = options(argv, { rounds: 4, calls: 30, growth: 1.1 });
  if (positional.length !== 2) {
    console.error("usage: node bench/compare/check-memory.mjs BASE_DIST NEW_DIST [--rounds 4] [--calls 30] [--growth 1.1]");
    process.exit(2);
  }
  const runs = alternating(o.rounds, positional, (dist, r) => {
    const args = [dist, String(o.calls), String(o.growth), String(r)];
    return { ...child(self, ["--allocation", ...args]), ...child(self, ["--collections", ...args]) };
  });
  const mean = (xs, key) => xs.reduce((a, b) => a + b[key], 0) / xs.length;
  const show = (xs, key, digits) => xs.map((x) => x[key].toFixed(digits)).join(" / ");
  console.log(`1,000-layer check, weight growth ${o.growth}, per fresh check (${o.calls} per round, ${o.rounds} rounds):`);
  for (const [key, label, digits] of [
    ["mb", "MB allocated", 2],
    ["scavenges", "scavenges per 100 checks", 0],
    ["pauseMs", "ms of scavenge pause", 2],
  ]) {
    console.log(`  ${label}: base ${show(runs.base, key, digits)}; new ${show(runs.new, key, digits)}; new/base ${(mean(runs.new, key) / mean(runs.base, key)).toFixed(3)}`);
  }
}
