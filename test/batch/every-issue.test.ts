import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, test } from "vitest";
import { evaluateTask } from "../../src/batch/evaluate.js";
import { parseVaryOption, variantsOf } from "../../src/batch/vary.js";
import type { BatchRow } from "../../src/batch/types.js";
import { BATCH_CSV_HEADER, renderBatchCsv, renderBatchJsonl, renderBatchMarkdown, renderBatchText } from "../../src/report/batch.js";
import { specJsonSchema } from "../../src/spec/index.js";
import { runCli } from "../helpers/run.js";
import { parseRfc4180 } from "../report/rfc4180.js";

// An invented spec (a tide-gauge classifier) with three problems; each position is counted by hand in this text
// (1-based lines and columns, as YAML 1.2.2 §6.1 counts characters on a line).
const BROKEN = [
  "name: gauge",
  "input: { features: 8 }",
  "training:",
  "  batch: -8", //                              line 4, the value at column 10
  "  loss: { kind: cross-entropy, classes: 4 }",
  "precision: { activations: binary32 }",
  "layers:",
  "  - { type: dense, width: 0 }", //             line 8, the value at column 27
  "  - relu",
  "  - { type: dense, widht: 4 }", //             line 10, the key at column 20
  "",
].join("\n");
const PROBLEMS = [
  { line: 4, column: 10, path: "training.batch" },
  { line: 8, column: 27, path: "layers[0].width" },
  { line: 10, column: 20, path: "layers[2].widht" },
];

const dir = mkdtempSync(join(tmpdir(), "headroom-every-issue-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
const broken = join(dir, "gauge.yaml");
writeFileSync(broken, BROKEN);
const fine = join(dir, "fine.yaml");
writeFileSync(fine, BROKEN.replace("batch: -8", "batch: 8").replace("width: 0", "width: 16").replace("widht", "width"));

const judge = (s: { name: string }) => ({ name: s.name, verdict: "fits" as const, formats: [], lossScale: { status: "not-evaluated" as const }, worst: null });
const hooks = { readText: () => BROKEN, judge, schema: specJsonSchema() };

describe("a batch row carries every problem of its spec, each at its file:line:column", () => {
  test("evaluateTask: the first in the message with a count, all three in issues, in the file's order", async () => {
    const result = await evaluateTask({ file: "gauge.yaml", variant: null }, hooks);
    expect(result.status).toBe("error");
    if (result.status !== "error") return;
    expect(result.error.message).toMatch(/^gauge\.yaml:4:10: training\.batch: .* \(and 2 more problems\)$/);
    expect(result.error.issues?.map((issue) => issue.position)).toEqual(PROBLEMS.map(({ line, column }) => ({ file: "gauge.yaml", line, column })));
    for (const [i, issue] of (result.error.issues ?? []).entries()) {
      const { line, column, path } = PROBLEMS[i]!;
      expect(issue.message.startsWith(`gauge.yaml:${line}:${column}: ${path}: `)).toBe(true);
    }
  });

  test("a variant that adds a line above them keeps every problem at the line of the user's file", async () => {
    // training.workers is left to its default in the file, so the variant writes a new key into the training block
    const [variant] = variantsOf([parseVaryOption("training.workers=2")]);
    const result = await evaluateTask({ file: "gauge.yaml", variant: variant! }, hooks);
    expect(result.status === "error" && result.error.issues?.map((issue) => issue.position.line)).toEqual(PROBLEMS.map((p) => p.line));
  });

  const rowOf = async (): Promise<BatchRow> => {
    const result = await evaluateTask({ file: "gauge.yaml", variant: null }, hooks);
    if (result.status !== "error") throw new Error("expected an error");
    return { index: 0, file: "gauge.yaml", variant: null, status: "error", error: result.error };
  };

  test("text and Markdown list every problem under the table, one line each; the table keeps one line per row", async () => {
    const rows = [await rowOf()];
    const text = renderBatchText(rows);
    const listed = PROBLEMS.map(({ line, column, path }) => `  gauge.yaml:${line}:${column}: ${path}: `);
    for (const start of listed) expect(text.split("\n").filter((l) => l.startsWith(start))).toHaveLength(1);
    expect(text).not.toContain("more problems");
    expect(text.split("\n").filter((l) => /^1 {2}gauge\.yaml\s+error$/.test(l))).toHaveLength(1);
    const md = renderBatchMarkdown(rows);
    for (const { line, column } of PROBLEMS) expect(md).toContain(`gauge.yaml:${line}:${column}: `);
  });

  test("JSON Lines has them under error.issues; CSV in the column after the loss scales (columns added later come after it), one line each", async () => {
    const rows = [await rowOf()];
    const json = JSON.parse(renderBatchJsonl(rows)) as { error: { issues: { position: { line: number } }[] } };
    expect(json.error.issues.map((issue) => issue.position.line)).toEqual([4, 8, 10]);
    const records = parseRfc4180(renderBatchCsv(rows));
    const header = records[0]!;
    const after = header.indexOf("loss_scales");
    expect(header.slice(after, after + 3)).toEqual(["loss_scales", "error_issues", "worst_scope"]);
    // the judged loss scale's columns, added later still, come after them all
    expect(header.slice(after + 3)).toEqual(["judged_loss_scale", "judged_loss_scale_origin", "judged_loss_scale_position", "judged_loss_scale_binades_outside"]);
    const cell = records[1]![BATCH_CSV_HEADER.indexOf("error_issues")]!;
    expect(cell.split("\n").map((l) => l.split(":").slice(1, 3).join(":"))).toEqual(["4:10", "8:27", "10:20"]);
    // the first problem keeps its columns
    expect(records[1]![BATCH_CSV_HEADER.indexOf("error_line")]).toBe("4");
  });
});

describe("a spec with one problem", () => {
  test("its row has the same shape as a row of several (issues with its one problem); the CSV's last column holds its one line", async () => {
    const one = BROKEN.replace("batch: -8", "batch: 8").replace("width: 0", "width: 16");
    const result = await evaluateTask({ file: "gauge.yaml", variant: null }, { ...hooks, readText: () => one });
    const message = 'gauge.yaml:10:20: layers[2].widht: unknown key "widht" (did you mean "width"?)';
    const position = { file: "gauge.yaml", line: 10, column: 20 };
    expect(result.status === "error" && result.error).toEqual({ kind: "input", message, position, issues: [{ message, position }] });
    if (result.status !== "error") return;
    const records = parseRfc4180(renderBatchCsv([{ index: 0, file: "gauge.yaml", variant: null, status: "error", error: result.error }]));
    expect(records[1]![BATCH_CSV_HEADER.indexOf("error_issues")]).toBe(result.error.message);
  });
});

describe("the CLI (run npm run build first)", () => {
  test("batch: every problem of the bad file under the table; the good file is still checked", () => {
    const run = runCli(["batch", broken, fine]);
    expect(run.status).toBe(2);
    for (const { line, column, path } of PROBLEMS) expect(run.stdout).toContain(`\n  ${broken}:${line}:${column}: ${path}: `);
    expect(run.stdout).toMatch(/2 specs: 1 fit, 0 at risk, 0 fail, 1 could not be evaluated/);
  });

  test("check --vary: every problem of each variant on stderr, named by the variant, as plain check prints them", () => {
    const plain = runCli(["check", broken]).stderr.trimEnd().split("\n");
    expect(plain).toHaveLength(3);
    const run = runCli(["check", broken, "--vary", "training.workers=1,2"]);
    expect(run.status).toBe(2);
    expect(run.stderr.trimEnd().split("\n")).toEqual([...plain.map((l) => `${l} [training.workers=1]`), ...plain.map((l) => `${l} [training.workers=2]`)]);
  });
});
