/**
 * The worker side of the pool: answer each chunk of tasks with one message of outcomes.
 * A worker script is one call: `serveTasks(task => evaluate(task))`.
 */
import { parentPort } from "node:worker_threads";
import type { FromWorker, TaskReply, ToWorker } from "./pool.js";

/**
 * Serve tasks from the pool until the pool ends this thread. Tasks run one at a time, in the order
 * they came, even when `handle` is asynchronous; before each, the task's id goes into the pool's
 * shared cell, so the pool knows which task a dying worker was running. A task that throws answers
 * with its message; the worker keeps serving. Throws a TypeError when not called inside a worker thread.
 */
export function serveTasks<T, R>(handle: (task: T) => R | Promise<R>): void {
  const port = parentPort;
  if (!port) throw new TypeError("serveTasks must run inside a worker thread");
  let running: Int32Array | undefined;
  const queue: { id: number; task: T }[][] = [];
  let busy = false;
  const drain = async (): Promise<void> => {
    busy = true;
    let chunk: { id: number; task: T }[] | undefined;
    while ((chunk = queue.shift()) !== undefined) {
      const replies: TaskReply<R>[] = [];
      for (const { id, task } of chunk) {
        if (running) Atomics.store(running, 0, id + 1);
        try {
          replies.push({ id, ok: true, value: await handle(task) });
        } catch (error) {
          replies.push({ id, ok: false, error: error instanceof Error ? error.message : String(error) });
        }
        if (running) Atomics.store(running, 0, 0);
      }
      port.postMessage({ replies } satisfies FromWorker<R>);
    }
    busy = false;
  };
  port.on("message", (message: ToWorker<T>) => {
    if ("running" in message) {
      running = message.running;
      return;
    }
    queue.push(message.tasks);
    if (!busy) void drain();
  });
}
