/**
 * The worker side of the pool: answer each task message with its outcome.
 * A worker script is one call: `serveTasks(task => evaluate(task))`.
 */
import { parentPort } from "node:worker_threads";
import type { FromWorker, ToWorker } from "./pool.js";

/**
 * Serve tasks from the pool until the pool ends this thread. A task that throws answers with its
 * message; the worker keeps serving. Throws a TypeError when not called inside a worker thread.
 */
export function serveTasks<T, R>(handle: (task: T) => R | Promise<R>): void {
  const port = parentPort;
  if (!port) throw new TypeError("serveTasks must run inside a worker thread");
  port.on("message", async ({ id, task }: ToWorker<T>) => {
    let reply: FromWorker<R>;
    try {
      reply = { id, ok: true, value: await handle(task) };
    } catch (error) {
      reply = { id, ok: false, error: error instanceof Error ? error.message : String(error) };
    }
    port.postMessage(reply);
  });
}
