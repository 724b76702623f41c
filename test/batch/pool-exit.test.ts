import { describe, expect, test, vi } from "vitest";

// Worker threads counted from construction to their "exit" event: the pool must not resolve while one is still
// alive, since its caller then puts back V8's process-wide flags (src/batch/tiering.ts), which node:v8 documents
// as undefined behaviour while another isolate runs
const { alive } = vi.hoisted(() => ({ alive: { now: 0 } }));
vi.mock("node:worker_threads", async (original) => {
  const threads = await original<typeof import("node:worker_threads")>();
  class CountedWorker extends threads.Worker {
    constructor(...args: ConstructorParameters<typeof threads.Worker>) {
      super(...args);
      alive.now += 1;
      this.once("exit", () => (alive.now -= 1));
    }
  }
  return { ...threads, Worker: CountedWorker };
});

import { runPool } from "../../src/batch/pool.js";

// the fixture imports serveTasks from dist/ (npm run build first)
const WORKER = new URL("./fixtures/test-worker.mjs", import.meta.url);
type Task = { kind: "square" | "exit"; n: number };

describe("runPool ends its workers before it resolves", () => {
  test("after the last task, no worker thread is left", async () => {
    const tasks: Task[] = Array.from({ length: 40 }, (_, i): Task => ({ kind: "square", n: i }));
    const outcomes = await runPool<Task, { square: number }>(WORKER, tasks, { workers: 2 });
    expect(alive.now).toBe(0);
    expect(outcomes.every((o) => o.ok)).toBe(true);
  });

  test("workers that died and were replaced are gone too", async () => {
    const tasks: Task[] = Array.from({ length: 30 }, (_, i): Task => ({ kind: i % 10 === 5 ? "exit" : "square", n: i }));
    const outcomes = await runPool<Task, { square: number }>(WORKER, tasks, { workers: 2 });
    expect(outcomes.filter((o) => !o.ok)).toHaveLength(3);
    expect(alive.now).toBe(0);
  });
});
