/**
 * Batch throughput: 1,000 specs generated from the examples (renamed, five batch sizes, and repeated
 * blocks cut to two repeats so a run takes minutes, not hours), checked by the worker pool with one
 * worker per core and with a single worker, in the same run. Needs the build (the pool starts
 * dist/batch/worker.js). Prints specs per second and the pool's speed-up.
 *
 * For measurement only, the same batch also runs on a bench worker whose judge is nothing (it loads
 * what the real worker loads, in the same form: one bundled file after `npm run build`, the separate
 * modules after tsc alone; then it reads, parses and validates each spec and answers a fixed row):
 * the pipeline's own ceiling in specs per second, whatever check() costs.
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { availableParallelism, loadavg, tmpdir } from "node:os";
import { join } from "node:path";
import { Worker } from "node:worker_threads";
import { afterAll, beforeAll, bench, describe } from "vitest";
import type { BatchInput } from "../src/batch/paths.js";
import { runBatch } from "../src/batch/run.js";
import { exampleSpecs, generatedSpec, writeSpecs } from "../test/batch/generate.js";
import { specJsonSchema } from "../src/spec/index.js";
import { bundleWorker } from "../scripts/bundle-worker.mjs";

const COUNT = 1000;
const WORKER = new URL("../dist/batch/worker.js", import.meta.url);
const dir = mkdtempSync(join(tmpdir(), "headroom-bench-"));
const dist = (path: string): string => JSON.stringify(new URL(`../dist/${path}`, import.meta.url).href);
// the real worker's imports and task handling, with check() replaced by a fixed row (check and the summary
// are exported, so a bundle keeps their code as the real worker's does; they are never called)
const NO_CHECK_SOURCE = join(dir, "no-check-worker.mjs");
writeFileSync(
  NO_CHECK_SOURCE,
  `import { readFileSync } from "node:fs";
export { check, loadSpecMeasurements } from ${dist("check.js")};
export { summarizeCheck } from ${dist("report/summary.js")};
import { serveTasks } from ${dist("batch/serve.js")};
import { evaluateTask } from ${dist("batch/evaluate.js")};
serveTasks((task) => evaluateTask(task, {
  readText: (file) => readFileSync(file, "utf8"),
  judge: (spec) => ({ name: spec.name, verdict: "fits", formats: [{ format: spec.precision.activations, verdict: "fits" }], lossScale: { status: "not-evaluated" }, worst: null }),
}));
`,
);
// the real worker is one file once `npm run build` has bundled it (no relative imports left)
const realWorkerBundled = !/^import .* from "\.\.?\//m.test(readFileSync(WORKER, "utf8"));
const NO_CHECK_WORKER = new URL(`file://${realWorkerBundled ? join(dir, "no-check-worker.bundle.mjs") : NO_CHECK_SOURCE}`);
if (realWorkerBundled) await bundleWorker(NO_CHECK_SOURCE, join(dir, "no-check-worker.bundle.mjs"));
// generated before any timing starts
const examples = exampleSpecs();
const schema = specJsonSchema();
const inputs: BatchInput[] = writeSpecs(dir, COUNT, (i) => generatedSpec(i, examples, schema).replace(/times: \d+/g, "times: 2")).map(
  (path): BatchInput => ({ kind: "file", path, argument: path }),
);
const seconds: Record<string, number[]> = {};
// processor time of the whole process (main thread and workers): steadier than wall time on shared cores
const cpuSeconds: Record<string, number[]> = {};

async function timedBatch(label: string, workers: number, workerUrl = WORKER): Promise<void> {
  const started = performance.now();
  const cpu = process.cpuUsage();
  const rows = await runBatch(inputs, [], { workerUrl, workers });
  const elapsed = (performance.now() - started) / 1000;
  const used = process.cpuUsage(cpu);
  (cpuSeconds[label] ??= []).push((used.user + used.system) / 1e6);
  const failed = rows.filter((row) => row.status === "error");
  if (rows.length !== COUNT || failed.length > 0) {
    throw new Error(`${label}: ${failed.length} of ${rows.length} rows failed, e.g. ${JSON.stringify(failed[0])}`);
  }
  (seconds[label] ??= []).push(elapsed);
}

/**
 * How much parallel CPU the machine gives right now: the same fixed loop on one thread, then on two at
 * once. 2.0 means two idle cores; 1.0 means other processes hold one of them. The pool cannot beat it.
 */
async function parallelCapacity(): Promise<number> {
  const code = "let x = 0; for (let i = 0; i < 3e8; i++) x += i % 7; require('node:worker_threads').parentPort.postMessage(x);";
  const spin = (threads: number): Promise<number> => {
    const started = performance.now();
    return Promise.all(
      Array.from({ length: threads }, () => new Promise((resolve) => new Worker(code, { eval: true }).once("message", resolve))),
    ).then(() => performance.now() - started);
  };
  const one = await spin(1);
  const two = await spin(2);
  return (2 * one) / two;
}

let capacityBefore = NaN;
let loadBefore = "";
// the one-minute load average: other sessions share these cores, and the figures move with it
const load = (): string => loadavg()[0]!.toFixed(1);
beforeAll(async () => {
  loadBefore = load();
  capacityBefore = await parallelCapacity();
});

const POOL = `pool of ${availableParallelism()} workers`;
const NO_CHECK_POOL = `${POOL}, check replaced by nothing`;
const NO_CHECK_ONE = "one worker, check replaced by nothing";
// as few timed passes as the runner allows (it makes three): the output counts them
const options = { time: 0, iterations: 1, warmupIterations: 0, warmupTime: 0 };

describe(`check ${COUNT} generated specs`, () => {
  bench(POOL, () => timedBatch(POOL, availableParallelism()), options);
  bench("one worker", () => timedBatch("one worker", 1), options);
  bench(NO_CHECK_POOL, () => timedBatch(NO_CHECK_POOL, availableParallelism(), NO_CHECK_WORKER), options);
  bench(NO_CHECK_ONE, () => timedBatch(NO_CHECK_ONE, 1, NO_CHECK_WORKER), options);
});

afterAll(async () => {
  const capacityAfter = await parallelCapacity();
  const rates = (label: string): { best: number; mean: number } => {
    const times = seconds[label] ?? [];
    return { best: COUNT / Math.min(...times), mean: COUNT / (times.reduce((a, b) => a + b, 0) / times.length) };
  };
  const cpuMs = (label: string): string => {
    const times = cpuSeconds[label] ?? [];
    return ((1000 * times.reduce((a, b) => a + b, 0)) / times.length / COUNT).toFixed(2);
  };
  const line = (pool: string, one: string): string => {
    const [p, o] = [rates(pool), rates(one)];
    return (
      `${pool} ${p.mean.toFixed(1)}; ${p.best.toFixed(1)} specs/s over ${seconds[pool]?.length ?? 0} passes, ${one} ${o.mean.toFixed(1)}; ${o.best.toFixed(1)} specs/s over ${seconds[one]?.length ?? 0}, ` +
      `speed-up ${(p.mean / o.mean).toFixed(2)}x; ${(p.best / o.best).toFixed(2)}x; ` +
      `processor ms per spec (all threads) ${cpuMs(pool)} and ${cpuMs(one)}`
    );
  };
  console.log(
    `\nbatch throughput (mean; best):\n  ${line(POOL, "one worker")} (goal: 500 specs/s and 1.6x)\n` +
      `  measurement only: ${line(NO_CHECK_POOL, NO_CHECK_ONE)}\n` +
      `  parallel CPU available (two spinning threads against one): ${capacityBefore.toFixed(2)}x before, ${capacityAfter.toFixed(2)}x after; ` +
      `load average ${loadBefore} before, ${load()} after\n`,
  );
  rmSync(dir, { recursive: true, force: true });
});
