/**
 * The batch worker thread: read, vary, validate and check one spec per message, answering with a
 * row. Built to dist/batch/worker.js, which the pool starts (Node 20 cannot start a worker from .ts).
 */
import { readFileSync } from "node:fs";
import { workerData } from "node:worker_threads";
import type { Measurements } from "../measure/index.js";
import type { CheckOptions } from "../risk/index.js";
import { specJsonSchema } from "../spec/index.js";
import { evaluateTask } from "./evaluate.js";
import { checkMeasuredSpec } from "./measured.js";
import { serveTasks } from "./serve.js";

/** What the pool hands each batch worker. */
export interface BatchWorkerData {
  /** check options (e.g. the plan) */
  check?: CheckOptions;
  /** the spec's JSON Schema, for --vary: built once by the caller instead of once per worker */
  schema?: Record<string, unknown>;
}

const data = (workerData ?? {}) as BatchWorkerData;
const options: CheckOptions = data.check ?? {};
let schema: Record<string, unknown> | undefined = data.schema;
// otherwise built on the first task with a variant: most batches have none, and building it loads zod (~0.2 s)
const lazySchema = (): Record<string, unknown> => (schema ??= specJsonSchema());

// the variants of a spec come to a worker one after another and share their measured data, read once: a weight file
// may be a whole checkpoint; the readings of earlier specs are let go after a few
const measuredCache = new Map<string, Promise<Measurements>>();
const MEASURED_KEPT = 8;

serveTasks((task: Parameters<typeof evaluateTask>[0]) =>
  evaluateTask(task, {
    readText: (file) => readFileSync(file),
    schema: lazySchema,
    // a spec's measured weights and statistics count here too
    judge: (spec) => {
      if (measuredCache.size >= MEASURED_KEPT) measuredCache.clear();
      return checkMeasuredSpec(spec, options, measuredCache);
    },
  }),
);
