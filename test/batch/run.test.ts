import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, test } from "vitest";
import { evaluateTask, issuesError } from "../../src/batch/evaluate.js";
import { parseVaryOption, variantsOf } from "../../src/batch/vary.js";
import { planBatch, runBatch } from "../../src/batch/run.js";
import type { BatchInput } from "../../src/batch/paths.js";
import { specJsonSchema } from "../../src/spec/index.js";
import { check } from "../../src/check.js";
import { summarizeCheck } from "../../src/report/summary.js";

const WORKER = new URL("./fixtures/fake-judge-worker.mjs", import.meta.url);
const dir = mkdtempSync(join(tmpdir(), "headroom-run-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

// an invented spec: a small classifier on made-up sensor readings
const spec = (name: string, batch: number | string) => `name: ${name}
input: { features: 16 }
training:
  batch: ${batch}
  loss: { kind: cross-entropy, classes: 4 }
precision: { activations: binary16 }
layers:
  - { type: dense, width: 32 }
  - relu
  - { type: dense, width: 4 }
`;

function write(name: string, text: string): string {
  const path = join(dir, name);
  writeFileSync(path, text);
  return path;
}

describe("evaluateTask", () => {
  const judge = (s: { name: string }) => ({ name: s.name, verdict: "fits" as const, formats: [], lossScale: { status: "not-evaluated" as const }, worst: null });
  const hooks = { readText: (f: string) => (f === "a.yaml" ? spec("a", 8) : f === "bad.yaml" ? spec("bad", "-2") : (() => { throw Object.assign(new Error("x"), { code: "ENOENT" }); })()), judge, schema: specJsonSchema() };

  test("a valid spec gives its summary", async () => {
    expect(await evaluateTask({ file: "a.yaml", variant: null }, hooks)).toMatchObject({ status: "ok", summary: { name: "a" } });
  });
  test("an invalid spec gives an input error at its line and column", async () => {
    const result = await evaluateTask({ file: "bad.yaml", variant: null }, hooks);
    expect(result).toMatchObject({ status: "error", error: { kind: "input", position: { file: "bad.yaml", line: 4, column: 10 } } });
    if (result.status === "error") expect(result.error.message).toMatch(/^bad\.yaml:4:10: training\.batch: /);
  });
  test("a missing file, a wrong extension and an unknown --vary key are input errors", async () => {
    expect(await evaluateTask({ file: "gone.yaml", variant: null }, hooks)).toMatchObject({ error: { kind: "input", message: "gone.yaml: no such file" } });
    expect(await evaluateTask({ file: "notes.txt", variant: null }, hooks)).toMatchObject({ error: { kind: "input" } });
    const [variant] = variantsOf([parseVaryOption("training.bacth=4")]);
    expect(await evaluateTask({ file: "a.yaml", variant: variant! }, hooks)).toMatchObject({
      error: { kind: "input", message: 'a.yaml: --vary training.bacth: the spec has no key training.bacth (did you mean "training.batch"?)' },
    });
  });
  test("a judge failure is an internal error, a RangeError without spec paths too (exit code 3, as the CLI's commands count it)", async () => {
    const boom = await evaluateTask({ file: "a.yaml", variant: null }, { ...hooks, judge: () => { throw new Error("bug"); } });
    expect(boom).toMatchObject({ error: { kind: "internal", message: "a.yaml: bug" } });
    // a spec's own problems carry spec paths (next test); an offset out of bounds inside headroom is headroom's failure
    const range = await evaluateTask({ file: "a.yaml", variant: null }, { ...hooks, judge: () => { throw new RangeError("offset is out of bounds"); } });
    expect(range).toMatchObject({ error: { kind: "internal", message: "a.yaml: offset is out of bounds" } });
  });
  test("a plan option the spec lacks is an input error naming the spec's plans, not an internal one", async () => {
    // the judge as the batch worker runs it: check() itself, asked for a plan this spec does not have
    const result = await evaluateTask({ file: "a.yaml", variant: null }, { ...hooks, judge: (s) => summarizeCheck(check(s, { plan: "mixed-bfloat16" })) });
    expect(result).toMatchObject({
      status: "error",
      error: { kind: "input", message: 'a.yaml: no plan named "mixed-bfloat16" in the spec; its plans: planned', position: { file: "a.yaml" } },
    });
  });
  test("a judge error naming spec paths becomes a positioned input error", async () => {
    const graphError = Object.assign(new RangeError("cannot build"), { issues: [{ path: ["layers", 2, "width"], message: "must equal the classes, 4" }] });
    const result = await evaluateTask({ file: "a.yaml", variant: null }, { ...hooks, judge: () => { throw graphError; } });
    expect(result).toMatchObject({ error: { kind: "input", message: "a.yaml:10:27: layers[2].width: must equal the classes, 4", position: { line: 10, column: 27 } } });
  });
  test("a spec that loads with a warning keeps it on its row, at the line of the user's file, a variant's too", async () => {
    // an untrained classifier's cross-entropy is about ln(classes) (uniform predictions): 2 is not below ln(4) = 1.39
    const text = spec("w", 8).replace("  loss:", "  horizon: { steps: 100, final-loss: 2 }\n  loss:");
    const warnedHooks = { ...hooks, readText: () => text };
    const plain = await evaluateTask({ file: "w.yaml", variant: null }, warnedHooks);
    expect(plain).toMatchObject({ status: "ok", warnings: [expect.stringMatching(/^w\.yaml:5:\d+: training\.horizon\.final-loss: the final loss 2 is not below the starting loss ln\(4\)/)] });
    // a variant that adds a key above it keeps the user's line numbers
    const [variant] = variantsOf([parseVaryOption("training.workers=2")]);
    const varied = await evaluateTask({ file: "w.yaml", variant: variant! }, warnedHooks);
    expect(varied.status === "ok" && varied.warnings?.[0]).toMatch(/^w\.yaml:5:\d+: training\.horizon\.final-loss/);
    // none for a spec without warnings
    expect(await evaluateTask({ file: "a.yaml", variant: null }, hooks)).not.toHaveProperty("warnings");
  });
  test("issuesError counts the other problems", () => {
    const error = issuesError([
      { file: "f.yaml", line: 2, column: 3, path: "a", message: "m1" },
      { file: "f.yaml", line: 5, column: 1, path: "b", message: "m2" },
    ]);
    expect(error.message).toBe("f.yaml:2:3: a: m1 (and 1 more problem)");
  });
});

describe("runBatch (worker threads; run npm run build first)", () => {
  test("rows in input order, argument errors in place, variants as rows, worker failures as rows", async () => {
    const files = [
      write("one.yaml", spec("one", 8)),
      write("two.yaml", spec("two", 500)),
      write("broken.yaml", spec("broken", "lots")),
      write("explode.yaml", spec("explode", 8)),
      write("crash.yaml", spec("crash", 8)),
      write("three.yaml", spec("three", 9)),
    ];
    const inputs: BatchInput[] = [
      ...files.slice(0, 3).map((path): BatchInput => ({ kind: "file", path, argument: path })),
      { kind: "error", argument: "missing/*.yaml", message: "missing/*.yaml: no file matches this pattern" },
      ...files.slice(3).map((path): BatchInput => ({ kind: "file", path, argument: path })),
    ];
    const progress: number[] = [];
    const rows = await runBatch(inputs, [], { workerUrl: WORKER, workers: 2, onRow: (done) => progress.push(done) });
    expect(rows.map((r) => r.index)).toEqual([0, 1, 2, 3, 4, 5, 6]);
    expect(rows.map((r) => (r.status === "ok" ? r.summary.verdict : r.error.kind))).toEqual([
      "fits",
      "at-risk",
      "input",
      "input",
      "internal",
      "internal",
      "fits",
    ]);
    const broken = rows[2]!;
    expect(broken.status === "error" && broken.error.position).toEqual({ file: files[2], line: 4, column: 10 });
    // the pattern that matched nothing is marked as an argument, not a spec: the count line keeps it apart
    expect(rows.map((r) => r.status === "error" && r.error.argument === true)).toEqual([false, false, false, true, false, false, false]);
    const crashed = rows[5]!;
    expect(crashed.status === "error" && crashed.error.message).toMatch(/worker stopped: exited with code 9/);
    // every error row lists its problems, one or more, in one shape (README, batch --jsonl): a pattern that matches
    // nothing and a failure inside headroom are their own one entry
    for (const row of rows) {
      if (row.status !== "error") continue;
      expect(row.error.issues.length, row.file).toBeGreaterThan(0);
      expect(row.error.issues[0]!.message, row.file).toBe(row.error.message.replace(/ \(and \d+ more problems?\)$/, ""));
    }
    expect(rows[3]!.status === "error" && rows[3]!.error.issues).toEqual([
      { message: "missing/*.yaml: no file matches this pattern", position: { file: "missing/*.yaml" } },
    ]);
    expect(progress.at(-1)).toBe(7);
  });

  test("each file once per variant, named by its values", async () => {
    const file = write("sweep.yaml", spec("sweep", 8));
    const variants = variantsOf([parseVaryOption("training.batch=50,150"), parseVaryOption("precision.activations=bfloat16,binary16")]);
    const rows = await runBatch([{ kind: "file", path: file, argument: file }], variants, { workerUrl: WORKER, workers: 2 });
    expect(rows.map((r) => r.variant)).toEqual([
      "training.batch=50,precision.activations=bfloat16",
      "training.batch=50,precision.activations=binary16",
      "training.batch=150,precision.activations=bfloat16",
      "training.batch=150,precision.activations=binary16",
    ]);
    expect(rows.map((r) => (r.status === "ok" ? `${r.summary.verdict}:${r.summary.formats[0]!.format}` : "error"))).toEqual([
      "fits:bfloat16",
      "fits:binary16",
      "at-risk:bfloat16",
      "at-risk:binary16",
    ]);
  });

  test("planBatch numbers rows in input order", () => {
    const plan = planBatch(
      [
        { kind: "file", path: "a.yaml", argument: "a.yaml" },
        { kind: "error", argument: "x", message: "x: no such file or folder" },
      ],
      variantsOf([parseVaryOption("training.batch=1,2")]),
    );
    expect(plan.map((p) => ("task" in p ? p.task.variant?.name : p.row.index))).toEqual(["training.batch=1", "training.batch=2", 2]);
  });
});
