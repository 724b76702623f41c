/**
 * A small pool of worker threads that runs a list of tasks and returns their outcomes in input
 * order, whatever order they finish in. A task that throws, or a worker that dies, gives a failed
 * outcome for that task only; the pool replaces the worker and carries on.
 *
 * Tasks travel in chunks, and a worker answers a whole chunk in one message: every message wakes the
 * other thread, and on a machine with as many workers as cores each wake-up of the main thread takes
 * a core from a worker. Each worker writes the task it is running into a shared cell, so a worker
 * that dies still names the task that killed it without a message per task.
 *
 * Node 20 cannot start a worker from a .ts file, so the caller passes the URL of a built .js worker
 * that calls {@link serveTasks} (src/batch/worker.ts, built to dist/batch/worker.js).
 */
import { availableParallelism } from "node:os";
import { Worker } from "node:worker_threads";

/** The result of one task: its value, or why it failed. */
export type TaskOutcome<R> = { ok: true; value: R } | { ok: false; error: string };

/** Options of {@link runPool}. */
export interface PoolOptions {
  /** worker threads (default os.availableParallelism(), never more than the tasks) */
  workers?: number;
  /** passed to every worker as `workerData` (structured-cloned once per worker) */
  workerData?: unknown;
  /** chunks sent ahead to each worker, so it never waits for the next message (default 2) */
  inFlight?: number;
  /** the most tasks in one chunk (default 8); chunks shrink near the end so the workers finish together */
  chunk?: number;
  /** called as each task settles, in finishing order (for progress bars) */
  onSettled?: (index: number, outcome: TaskOutcome<unknown>) => void;
  /** each worker's young generation in MB (Worker `resourceLimits.maxYoungGenerationSizeMb`); default V8's */
  youngGenerationMb?: number;
}

/** Messages between the pool and a worker: first the shared cell, then chunks of tasks. */
export type ToWorker<T> = { running: Int32Array } | { tasks: { id: number; task: T }[] };
/** The answer to one task. */
export type TaskReply<R> = { id: number; ok: true; value: R } | { id: number; ok: false; error: string };
/** A worker's message: the answers to one chunk, in the chunk's order. */
export type FromWorker<R> = { replies: TaskReply<R>[] };

/** The default pool size: one worker per core the process may use. */
export function defaultWorkers(): number {
  return Math.max(1, availableParallelism());
}

/** The size of the next chunk: a share of the tasks not yet sent, so the last chunks are small, within 1..most. */
function chunkSize(left: number, workers: number, most: number): number {
  return Math.max(1, Math.min(most, Math.floor(left / (4 * workers))));
}

function positiveInteger(name: string, value: number): number {
  if (!Number.isInteger(value) || value < 1) throw new RangeError(`${name} must be a positive integer: ${value}`);
  return value;
}

/**
 * The workers a pool starts for `tasks` tasks: `workers` (default {@link defaultWorkers}), never more than the tasks.
 * Throws RangeError when `workers` is not a positive integer.
 */
export function poolWorkers(workers: number | undefined, tasks: number): number {
  return Math.min(positiveInteger("workers", workers ?? defaultWorkers()), tasks);
}

/**
 * Run `tasks` on a pool of workers started from `workerUrl`; outcomes come back in input order.
 * Never rejects because of a task or a worker; it rejects only for a bad argument (RangeError).
 */
export async function runPool<T, R>(workerUrl: URL, tasks: readonly T[], options: PoolOptions = {}): Promise<TaskOutcome<R>[]> {
  const workers = poolWorkers(options.workers, tasks.length);
  const inFlight = positiveInteger("inFlight", options.inFlight ?? 2);
  const most = positiveInteger("chunk", options.chunk ?? 8);
  const young = options.youngGenerationMb === undefined ? undefined : positiveInteger("youngGenerationMb", options.youngGenerationMb);
  const workerOptions = young === undefined ? { workerData: options.workerData } : { workerData: options.workerData, resourceLimits: { maxYoungGenerationSizeMb: young } };
  const outcomes: (TaskOutcome<R> | undefined)[] = new Array(tasks.length);
  if (tasks.length === 0) return [];

  let next = 0; // the next task not yet sent
  const requeued: number[] = []; // tasks sent to a worker that died before answering them
  let settled = 0;
  let failedStarts = 0; // workers in a row that died before finishing any task
  let startError: string | undefined;

  return new Promise<TaskOutcome<R>[]>((resolve) => {
    const live = new Set<Worker>();
    // Every worker is gone before the pool resolves: the caller may then change V8's process-wide flags
    // (src/batch/tiering.ts), which V8 does not support while another isolate runs or compiles (node:v8
    // setFlagsFromString: "behavior is undefined" once the VM has started; a pool run crashed that way once)
    const exits: Promise<number>[] = [];
    const settle = (index: number, outcome: TaskOutcome<R>): void => {
      if (outcomes[index] !== undefined) return;
      outcomes[index] = outcome;
      settled += 1;
      options.onSettled?.(index, outcome);
      if (settled === tasks.length) {
        for (const worker of live) exits.push(worker.terminate());
        live.clear();
        void Promise.allSettled(exits).then(() => resolve(outcomes as TaskOutcome<R>[]));
      }
    };
    const takeTask = (): number | undefined => {
      if (requeued.length > 0) return requeued.shift();
      return next < tasks.length ? next++ : undefined;
    };
    const remaining = (): boolean => requeued.length > 0 || next < tasks.length;

    const start = (): void => {
      const worker = new Worker(workerUrl, workerOptions);
      live.add(worker);
      // the id + 1 of the task the worker is running, 0 between tasks (written by serveTasks)
      const running = new Int32Array(new SharedArrayBuffer(4));
      worker.postMessage({ running } satisfies ToWorker<T>);
      const pending: number[][] = []; // chunks sent to this worker and not answered, oldest first
      let finishedAny = false;
      let gone = false;
      const feed = (): void => {
        while (pending.length < inFlight) {
          const chunk: number[] = [];
          const count = chunkSize(requeued.length + tasks.length - next, workers, most);
          let index: number | undefined;
          while (chunk.length < count && (index = takeTask()) !== undefined) chunk.push(index);
          if (chunk.length === 0) break;
          pending.push(chunk);
          worker.postMessage({ tasks: chunk.map((id) => ({ id, task: tasks[id] as T })) } satisfies ToWorker<T>);
        }
      };
      const die = (reason: string): void => {
        if (gone) return;
        gone = true;
        live.delete(worker);
        exits.push(worker.terminate());
        const culprit = Atomics.load(running, 0) - 1;
        requeued.unshift(...pending.flat().filter((index) => index !== culprit));
        pending.length = 0;
        if (finishedAny) failedStarts = 0;
        else {
          failedStarts += 1;
          startError = reason;
        }
        if (culprit >= 0) settle(culprit, { ok: false, error: `worker stopped: ${reason}` });
        if (failedStarts >= 2) {
          // the worker script itself cannot start: running it again would fail the same way
          let index: number | undefined;
          while ((index = takeTask()) !== undefined) settle(index, { ok: false, error: `worker could not start: ${startError}` });
          return;
        }
        if (remaining() && settled < tasks.length) start();
      };
      worker.on("message", ({ replies }: FromWorker<R>) => {
        pending.shift();
        finishedAny = true;
        failedStarts = 0;
        for (const reply of replies) settle(reply.id, reply.ok ? { ok: true, value: reply.value } : { ok: false, error: reply.error });
        if (!gone && settled < tasks.length) feed();
      });
      worker.on("error", (error: unknown) => die(error instanceof Error ? error.message : String(error)));
      worker.on("messageerror", (error: unknown) => die(`a message could not be read: ${String(error)}`));
      worker.on("exit", (code) => {
        if (!gone && settled < tasks.length) die(`exited with code ${code}`);
      });
      feed();
    };

    for (let i = 0; i < workers; i++) start();
  });
}
