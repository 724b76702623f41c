/**
 * A small pool of worker threads that runs a list of tasks and returns their outcomes in input
 * order, whatever order they finish in. A task that throws, or a worker that dies, gives a failed
 * outcome for that task only; the pool replaces the worker and carries on.
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
  /** tasks sent ahead to each worker, so it never waits for the next message (default 2) */
  inFlight?: number;
  /** called as each task settles, in finishing order (for progress bars) */
  onSettled?: (index: number, outcome: TaskOutcome<unknown>) => void;
}

/** Messages between the pool and a worker. */
export type ToWorker<T> = { id: number; task: T };
export type FromWorker<R> = { id: number; ok: true; value: R } | { id: number; ok: false; error: string };

/** The default pool size: one worker per core the process may use. */
export function defaultWorkers(): number {
  return Math.max(1, availableParallelism());
}

/**
 * Run `tasks` on a pool of workers started from `workerUrl`; outcomes come back in input order.
 * Never rejects because of a task or a worker; it rejects only for a bad argument (RangeError).
 */
export async function runPool<T, R>(workerUrl: URL, tasks: readonly T[], options: PoolOptions = {}): Promise<TaskOutcome<R>[]> {
  const size = options.workers ?? defaultWorkers();
  if (!Number.isInteger(size) || size < 1) throw new RangeError(`workers must be a positive integer: ${size}`);
  const inFlight = options.inFlight ?? 2;
  if (!Number.isInteger(inFlight) || inFlight < 1) throw new RangeError(`inFlight must be a positive integer: ${inFlight}`);
  const outcomes: (TaskOutcome<R> | undefined)[] = new Array(tasks.length);
  if (tasks.length === 0) return [];

  let next = 0; // the next task not yet sent
  const requeued: number[] = []; // tasks sent to a worker that died before running them
  let settled = 0;
  let failedStarts = 0; // workers in a row that died before finishing any task
  let startError: string | undefined;

  return new Promise<TaskOutcome<R>[]>((resolve) => {
    const live = new Set<Worker>();
    const settle = (index: number, outcome: TaskOutcome<R>): void => {
      if (outcomes[index] !== undefined) return;
      outcomes[index] = outcome;
      settled += 1;
      options.onSettled?.(index, outcome);
      if (settled === tasks.length) {
        for (const worker of live) void worker.terminate();
        live.clear();
        resolve(outcomes as TaskOutcome<R>[]);
      }
    };
    const takeTask = (): number | undefined => {
      if (requeued.length > 0) return requeued.shift();
      return next < tasks.length ? next++ : undefined;
    };
    const remaining = (): boolean => requeued.length > 0 || next < tasks.length;

    const start = (): void => {
      const worker = new Worker(workerUrl, { workerData: options.workerData });
      live.add(worker);
      const pending: number[] = []; // task indices sent to this worker, oldest first
      let finishedAny = false;
      let gone = false;
      const feed = (): void => {
        while (pending.length < inFlight) {
          const index = takeTask();
          if (index === undefined) break;
          pending.push(index);
          worker.postMessage({ id: index, task: tasks[index] as T } satisfies ToWorker<T>);
        }
      };
      const die = (reason: string): void => {
        if (gone) return;
        gone = true;
        live.delete(worker);
        void worker.terminate();
        // a worker runs its tasks one after another: the oldest pending task is the one that killed it
        const culprit = pending.shift();
        requeued.unshift(...pending);
        if (finishedAny) failedStarts = 0;
        else {
          failedStarts += 1;
          startError = reason;
        }
        if (culprit !== undefined) settle(culprit, { ok: false, error: `worker stopped: ${reason}` });
        if (failedStarts >= 2) {
          // the worker script itself cannot start: running it again would fail the same way
          let index: number | undefined;
          while ((index = takeTask()) !== undefined) settle(index, { ok: false, error: `worker could not start: ${startError}` });
          return;
        }
        if (remaining() && settled < tasks.length) start();
      };
      worker.on("message", (message: FromWorker<R>) => {
        const at = pending.indexOf(message.id);
        if (at >= 0) pending.splice(at, 1);
        finishedAny = true;
        failedStarts = 0;
        settle(message.id, message.ok ? { ok: true, value: message.value } : { ok: false, error: message.error });
        feed();
      });
      worker.on("error", (error: unknown) => die(error instanceof Error ? error.message : String(error)));
      worker.on("messageerror", (error: unknown) => die(`a message could not be read: ${String(error)}`));
      worker.on("exit", (code) => {
        if (!gone && settled < tasks.length) die(`exited with code ${code}`);
      });
      feed();
    };

    for (let i = 0; i < Math.min(size, tasks.length); i++) start();
  });
}
