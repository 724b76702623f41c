/**
 * The batch worker thread: read, vary, validate and check one spec per message, answering with a
 * row. Built to dist/batch/worker.js, which the pool starts (Node 20 cannot start a worker from .ts).
 */
import { readFileSync } from "node:fs";
import { workerData } from "node:worker_threads";
import { check, loadSpecMeasurements } from "../check.js";
import type { CheckOptions } from "../risk/index.js";
import { specJsonSchema } from "../spec/index.js";
import { evaluateTask } from "./evaluate.js";
import { serveTasks } from "./serve.js";
import { summarizeCheck } from "../report/summary.js";

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

serveTasks((task: Parameters<typeof evaluateTask>[0]) =>
  evaluateTask(task, {
    readText: (file) => readFileSync(file, "utf8"),
    schema: lazySchema,
    // a spec's measured weights and statistics count here too (their read problems are reported by `headroom check`)
    judge: async (spec) => summarizeCheck(check(spec, options, await loadSpecMeasurements(spec))),
  }),
);
