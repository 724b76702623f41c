import { describe, expect, test } from "vitest";
import { availableParallelism } from "node:os";
import { Worker } from "node:worker_threads";
import { poolWorkers, runPool, type TaskOutcome } from "../../src/batch/pool.js";

// The pool starts real worker threads; the fixture imports serveTasks from dist/ (npm run build first).
const WORKER = new URL("./fixtures/test-worker.mjs", import.meta.url);
const BROKEN = new URL("./fixtures/broken-worker.mjs", import.meta.url);

type Task = { kind: "square" | "throw" | "exit" | "wait" | "later" | "limits"; n: number; ms?: number };

describe("runPool", () => {
  test("returns outcomes in input order even when later tasks finish first", async () => {
    // the first task of each worker is slow, so later tasks settle before it
    const tasks: Task[] = [
      { kind: "wait", n: 0, ms: 150 },
      { kind: "wait", n: 1, ms: 150 },
      ...Array.from({ length: 20 }, (_, i): Task => ({ kind: "square", n: i + 2 })),
    ];
    const finishOrder: number[] = [];
    const outcomes = await runPool<Task, { n: number }>(WORKER, tasks, {
      workers: 2,
      inFlight: 1,
      onSettled: (index) => finishOrder.push(index),
    });
    expect(outcomes.map((o) => (o.ok ? o.value.n : -1))).toEqual(tasks.map((t) => t.n));
    expect(finishOrder).toHaveLength(tasks.length);
    expect(new Set(finishOrder).size).toBe(tasks.length);
  });

  test("a task that throws fails alone; the rest succeed", async () => {
    const tasks: Task[] = Array.from({ length: 10 }, (_, i): Task => ({ kind: i === 4 ? "throw" : "square", n: i }));
    const outcomes = await runPool<Task, { square: number }>(WORKER, tasks, { workers: 2 });
    expect(outcomes[4]).toEqual({ ok: false, error: "task 4 refused" });
    outcomes.forEach((o, i) => {
      if (i !== 4) expect(o).toMatchObject({ ok: true, value: { square: i * i } });
    });
  });

  test("a worker that dies fails only the task it was running and is replaced", async () => {
    const tasks: Task[] = Array.from({ length: 12 }, (_, i): Task => ({ kind: i === 3 || i === 8 ? "exit" : "square", n: i }));
    const outcomes = await runPool<Task, { square: number }>(WORKER, tasks, { workers: 2, inFlight: 3 });
    expect(outcomes).toHaveLength(12);
    for (const i of [3, 8]) {
      const o = outcomes[i]!;
      expect(o.ok).toBe(false);
      if (!o.ok) expect(o.error).toMatch(/^worker stopped: exited with code 7/);
    }
    outcomes.forEach((o, i) => {
      if (i !== 3 && i !== 8) expect(o).toEqual({ ok: true, value: { n: i, square: i * i, offset: 0 } });
    });
  });

  test("in chunks, a dying worker fails only its running task; the rest of its chunk is run again", async () => {
    const tasks: Task[] = Array.from({ length: 100 }, (_, i): Task => ({ kind: i === 10 || i === 61 ? "exit" : "square", n: i }));
    const settledAt: number[] = [];
    const outcomes = await runPool<Task, { square: number }>(WORKER, tasks, { workers: 2, chunk: 6, onSettled: (i) => settledAt.push(i) });
    expect(settledAt.sort((a, b) => a - b)).toEqual(tasks.map((_, i) => i));
    outcomes.forEach((o, i) => {
      if (i === 10 || i === 61) expect(o).toEqual({ ok: false, error: "worker stopped: exited with code 7" });
      else expect(o).toEqual({ ok: true, value: { n: i, square: i * i, offset: 0 } });
    });
  });

  test("a worker runs asynchronous tasks one at a time, in the order sent", async () => {
    // later tasks wait less: run at once, they would finish in reverse order
    const tasks: Task[] = Array.from({ length: 6 }, (_, i): Task => ({ kind: "later", n: i, ms: 60 - 10 * i }));
    const outcomes = await runPool<Task, { n: number; at: number }>(WORKER, tasks, { workers: 1, chunk: 3, inFlight: 2 });
    const times = outcomes.map((o) => (o.ok ? o.value.at : NaN));
    for (let i = 1; i < times.length; i++) expect(times[i]!).toBeGreaterThanOrEqual(times[i - 1]!);
  });

  test("passes workerData to every worker", async () => {
    const outcomes = await runPool<Task, { offset: number }>(WORKER, [{ kind: "square", n: 1 }], { workerData: { offset: 5 } });
    expect(outcomes).toEqual([{ ok: true, value: { n: 1, square: 1, offset: 5 } }]);
  });

  test("gives every worker the young generation asked for, and V8's own size when none is asked", async () => {
    // Node's Worker resourceLimits: a worker reads its own limits from node:worker_threads
    const tasks: Task[] = Array.from({ length: 4 }, (_, i): Task => ({ kind: "limits", n: i }));
    const sized = await runPool<Task, { young: number }>(WORKER, tasks, { workers: 2, chunk: 1, youngGenerationMb: 192 });
    expect(sized).toEqual(tasks.map(() => ({ ok: true, value: { young: 192 } })));
    const plain = await runPool<Task, { young: number }>(WORKER, tasks.slice(0, 1), { workers: 1 });
    // what a worker started with no limits reports (Node 20 on 64-bit: 48, three 16 MB semi-spaces)
    const v8Default = await new Promise((resolve) => {
      const worker = new Worker("require('node:worker_threads').parentPort.postMessage(require('node:worker_threads').resourceLimits.maxYoungGenerationSizeMb)", { eval: true });
      worker.once("message", (young) => void worker.terminate().then(() => resolve(young)));
    });
    expect(plain).toEqual([{ ok: true, value: { young: v8Default } }]);
    await expect(runPool(WORKER, tasks, { youngGenerationMb: 0 })).rejects.toThrow(RangeError);
  });

  test("a worker script that cannot start fails every task instead of crashing or looping", async () => {
    const tasks: Task[] = Array.from({ length: 30 }, (_, i): Task => ({ kind: "square", n: i }));
    const outcomes: TaskOutcome<unknown>[] = await runPool(BROKEN, tasks, { workers: 2 });
    expect(outcomes).toHaveLength(30);
    for (const o of outcomes) {
      expect(o.ok).toBe(false);
      if (!o.ok) expect(o.error).toContain("this worker cannot start");
    }
  });

  test("no tasks: no workers, an empty list", async () => {
    expect(await runPool(BROKEN, [])).toEqual([]);
  });

  test("refuses a pool size that is not a positive integer", async () => {
    await expect(runPool(WORKER, [1], { workers: 0 })).rejects.toThrow(RangeError);
    await expect(runPool(WORKER, [1], { workers: 1.5 })).rejects.toThrow(RangeError);
    await expect(runPool(WORKER, [1], { chunk: 0 })).rejects.toThrow(RangeError);
  });
});

describe("poolWorkers: the one count of a pool's workers (runPool starts them, runBatch tunes V8 for them)", () => {
  test("the count asked for, by default one per core Node says the process may use, never more than the tasks", () => {
    // os.availableParallelism() is Node's count of usable cores (Node.js documentation, os module)
    expect(poolWorkers(undefined, 1_000_000)).toBe(Math.max(1, availableParallelism()));
    expect(poolWorkers(4, 10)).toBe(4);
    expect(poolWorkers(4, 3)).toBe(3);
    expect(poolWorkers(undefined, 1)).toBe(1);
  });

  test("a count that is not a positive integer is refused", () => {
    expect(() => poolWorkers(0, 5)).toThrow(/workers must be a positive integer: 0/);
    expect(() => poolWorkers(2.5, 5)).toThrow(RangeError);
  });
});
