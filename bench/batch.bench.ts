/**
 * Batch throughput: 1,000 specs generated from the examples (renamed, five batch sizes, and repeated
 * blocks cut to two repeats so a run takes minutes, not hours), checked by the worker pool with one
 * worker per core and with a single worker, in the same run. Needs the build (the pool starts
 * dist/batch/worker.js). Prints specs per second and the pool's speed-up.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { availableParallelism, tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, bench, describe } from "vitest";
import type { BatchInput } from "../src/batch/paths.js";
import { runBatch } from "../src/batch/run.js";
import { exampleSpecs, generatedSpec, writeSpecs } from "../test/batch/generate.js";
import { specJsonSchema } from "../src/spec/index.js";

const COUNT = 1000;
const WORKER = new URL("../dist/batch/worker.js", import.meta.url);
const dir = mkdtempSync(join(tmpdir(), "headroom-bench-"));
// generated before any timing starts
const examples = exampleSpecs();
const schema = specJsonSchema();
const inputs: BatchInput[] = writeSpecs(dir, COUNT, (i) => generatedSpec(i, examples, schema).replace(/times: \d+/g, "times: 2")).map(
  (path): BatchInput => ({ kind: "file", path, argument: path }),
);
const seconds: Record<string, number[]> = {};

async function timedBatch(label: string, workers: number): Promise<void> {
  const started = performance.now();
  const rows = await runBatch(inputs, [], { workerUrl: WORKER, workers });
  const elapsed = (performance.now() - started) / 1000;
  const failed = rows.filter((row) => row.status === "error");
  if (rows.length !== COUNT || failed.length > 0) {
    throw new Error(`${label}: ${failed.length} of ${rows.length} rows failed, e.g. ${JSON.stringify(failed[0])}`);
  }
  (seconds[label] ??= []).push(elapsed);
}

const POOL = `pool of ${availableParallelism()} workers`;
// one timed pass each: a pass takes tens of seconds, so a second would not sharpen the figure much
const options = { time: 0, iterations: 1, warmupIterations: 0, warmupTime: 0 };

describe(`check ${COUNT} generated specs`, () => {
  bench(POOL, () => timedBatch(POOL, availableParallelism()), options);
  bench("one worker", () => timedBatch("one worker", 1), options);
});

afterAll(() => {
  const rate = (label: string): number => {
    const times = seconds[label] ?? [];
    const best = Math.min(...times);
    return COUNT / best;
  };
  const pool = rate(POOL);
  const one = rate("one worker");
  console.log(
    `\nbatch throughput (best of ${seconds[POOL]?.length ?? 0} runs): ${POOL} ${pool.toFixed(0)} specs/s, ` +
      `one worker ${one.toFixed(0)} specs/s, speed-up ${(pool / one).toFixed(2)}x (goal: 500 specs/s and 1.6x)\n`,
  );
  rmSync(dir, { recursive: true, force: true });
});
