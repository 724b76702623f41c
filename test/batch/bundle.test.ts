import { mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import { pathToFileURL } from "node:url";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { evaluateTask, type SpecTask } from "../../src/batch/evaluate.js";
import type { BatchInput } from "../../src/batch/paths.js";
import { runBatch } from "../../src/batch/run.js";
import type { BatchRow } from "../../src/batch/types.js";
import { parseVaryOption, variantsOf } from "../../src/batch/vary.js";
import { check, loadSpecMeasurements } from "../../src/check.js";
import { summarizeCheck } from "../../src/report/summary.js";
import { specJsonSchema } from "../../src/spec/index.js";
import { ROOT } from "../helpers/run.js";
import { exampleSpecs, tinySpec } from "./generate.js";
import { bundleWorker } from "../../scripts/bundle-worker.mjs";

// The single-file worker that `npm run build` makes from tsc's dist/batch/worker.js (run npm run build, or
// tsc, first): it must answer every kind of row as the worker's own code does when run in this process.
// The bundle goes inside the project, where its on-demand loads of the yaml and zod packages resolve.
let dir: string;
let bundle: string;

beforeAll(async () => {
  dir = mkdtempSync(join(ROOT, "dist", ".bundle-test-"));
  bundle = join(dir, "worker.js");
  await bundleWorker(join(ROOT, "dist", "batch", "worker.js"), bundle);
}, 120_000);
afterAll(() => rmSync(dir, { recursive: true, force: true }));

function write(name: string, text: string): string {
  const path = join(dir, name);
  writeFileSync(path, text);
  return path;
}

/** The rows the worker's code gives in this process, from the sources (worker.ts's judge). */
async function expectedRows(tasks: readonly SpecTask[]): Promise<BatchRow[]> {
  const rows: BatchRow[] = [];
  for (const [index, task] of tasks.entries()) {
    const result = await evaluateTask(task, {
      readText: (file) => readFileSync(file, "utf8"),
      schema: specJsonSchema,
      judge: async (spec) => summarizeCheck(check(spec, {}, await loadSpecMeasurements(spec))),
    });
    const head = { index, file: task.file, variant: task.variant?.name ?? null };
    rows.push(result.status === "ok" ? { ...head, status: "ok", summary: result.summary } : { ...head, status: "error", error: result.error });
  }
  return rows;
}

describe("the bundled batch worker", () => {
  test("is one file that imports only Node's built-in modules", () => {
    const text = readFileSync(bundle, "utf8");
    const imports = [...text.matchAll(/^import .* from "([^"]+)";$/gm)].map((m) => m[1]!);
    expect(imports.length).toBeGreaterThan(0);
    expect(imports.filter((name) => !name.startsWith("node:"))).toEqual([]);
    expect(text).not.toMatch(/\bimport\(/);
  });

  test("gives the rows of the worker's own code: checks, bad specs, YAML the fast reader refuses, variants, missing files", async () => {
    const files = [
      ...exampleSpecs().map(({ name, text }) => write(`${name}.yaml`, text)),
      // an unknown key: validated by the zod schema, loaded on demand
      write("misspelt.yaml", tinySpec("misspelt").replace("  batch: 8", "  bacth: 8")),
      // an anchor and an alias: parsed by the yaml library, loaded on demand
      write("anchored.yaml", tinySpec("anchored").replace("input: { features: 16 }", "input: &in { features: 16 }\nx-copy: *in")),
      join(dir, "missing.yaml"),
    ];
    const inputs = files.map((path): BatchInput => ({ kind: "file", path, argument: path }));
    const plain = await runBatch(inputs, [], { workerUrl: pathToFileURL(bundle), workers: 2 });
    expect(plain).toEqual(await expectedRows(files.map((file) => ({ file, variant: null }))));
    expect(plain.map((row) => row.status)).toEqual([...exampleSpecs().map(() => "ok"), "error", "ok", "error"]);

    // a variant adds a key the file leaves to its default: the JSON Schema, built from zod on demand
    const variants = variantsOf([parseVaryOption("precision.activations=bfloat16,binary16")]);
    const tiny = write("tiny.yaml", tinySpec("tiny"));
    const varied = await runBatch([{ kind: "file", path: tiny, argument: tiny }], variants, { workerUrl: pathToFileURL(bundle), workers: 1 });
    expect(varied).toEqual(await expectedRows(variants.map((variant) => ({ file: tiny, variant }))));
    expect(varied.map((row) => row.status)).toEqual(["ok", "ok"]);
  });
});
