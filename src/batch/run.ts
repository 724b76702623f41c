/**
 * A whole batch: expanded inputs × variants → tasks → the worker pool → rows in input order.
 */
import type { BatchInput } from "./paths.js";
import { poolWorkers, runPool, type TaskOutcome } from "./pool.js";
import { batchYoungGenerationMb, tuneTieringForBatch } from "./tiering.js";
import type { SpecTask, TaskResult } from "./evaluate.js";
import { oneProblem, type BatchRow } from "./types.js";
import type { Variant } from "./vary.js";

/** Options of {@link runBatch}. */
export interface RunBatchOptions {
  /** the built worker script (dist/batch/worker.js); default: the one next to this module */
  workerUrl?: URL;
  /** worker threads (default: one per core) */
  workers?: number;
  /** passed to each worker (e.g. check options) */
  workerData?: unknown;
  /** called once per finished row, in finishing order */
  onRow?: (done: number, total: number) => void;
}

// each worker's young generation, unless the user sized V8's (src/batch/tiering.ts)
function youngGeneration(): { youngGenerationMb?: number } {
  const mb = batchYoungGenerationMb(process.execArgv, process.env.NODE_OPTIONS);
  return mb === undefined ? {} : { youngGenerationMb: mb };
}

/** The default worker: dist/batch/worker.js, next to this module once built. */
export const DEFAULT_WORKER_URL = new URL("./worker.js", import.meta.url);

/**
 * The tasks of a batch: each file once, or once per variant when there are variants; argument
 * errors stay in place as rows. Rows are numbered in this order.
 */
export function planBatch(inputs: readonly BatchInput[], variants: readonly Variant[]): ({ task: SpecTask } | { row: BatchRow })[] {
  const plan: ({ task: SpecTask } | { row: BatchRow })[] = [];
  for (const input of inputs) {
    if (input.kind === "error") {
      plan.push({
        row: {
          index: plan.length,
          file: input.argument,
          variant: null,
          status: "error",
          error: { ...oneProblem("input", input.message, { file: input.argument }), argument: true },
        },
      });
      continue;
    }
    if (variants.length === 0) plan.push({ task: { file: input.path, variant: null } });
    else for (const variant of variants) plan.push({ task: { file: input.path, variant } });
  }
  return plan;
}

/**
 * Evaluate a batch on a pool of worker threads. Rows come back in input order whatever order they
 * finish in; a worker that fails gives an internal-error row for its task and the batch goes on.
 */
export async function runBatch(inputs: readonly BatchInput[], variants: readonly Variant[], options: RunBatchOptions = {}): Promise<BatchRow[]> {
  const plan = planBatch(inputs, variants);
  const tasks: SpecTask[] = [];
  const taskRow: number[] = [];
  plan.forEach((entry, index) => {
    if ("task" in entry) {
      tasks.push(entry.task);
      taskRow.push(index);
    }
  });
  let done = plan.length - tasks.length;
  if (done > 0) options.onRow?.(done, plan.length);
  // before the workers start: their isolates take V8's flags as they stand
  const untune = tasks.length > 0 ? tuneTieringForBatch(poolWorkers(options.workers, tasks.length)) : () => {};
  let outcomes: TaskOutcome<TaskResult>[];
  try {
    outcomes = await runPool<SpecTask, TaskResult>(options.workerUrl ?? DEFAULT_WORKER_URL, tasks, {
      ...(options.workers !== undefined ? { workers: options.workers } : {}),
      workerData: options.workerData,
      ...youngGeneration(),
      onSettled: () => {
        done += 1;
        options.onRow?.(done, plan.length);
      },
    });
  } finally {
    untune();
  }
  const rows: BatchRow[] = plan.map((entry, index) =>
    "row" in entry ? entry.row : { index, file: entry.task.file, variant: entry.task.variant?.name ?? null, status: "error", error: oneProblem("internal", "not evaluated", { file: entry.task.file }) },
  );
  outcomes.forEach((outcome, i) => {
    const index = taskRow[i]!;
    const task = tasks[i]!;
    const file = task.file;
    const variant = task.variant?.name ?? null;
    // written out, not `{ ...head, status }`: on Node 20 a literal that adds keys after a spread costs microseconds
    if (!outcome.ok) {
      rows[index] = { index, file, variant, status: "error", error: oneProblem("internal", `${task.file}: ${outcome.error}`, { file }) };
    } else if (outcome.value.status === "ok") {
      const warnings = outcome.value.warnings;
      rows[index] =
        warnings === undefined
          ? { index, file, variant, status: "ok", summary: outcome.value.summary }
          : { index, file, variant, status: "ok", summary: outcome.value.summary, warnings };
    } else {
      rows[index] = { index, file, variant, status: "error", error: outcome.value.error };
    }
  });
  return rows;
}
