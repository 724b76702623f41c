import { readFileSync } from "node:fs";
import { describe, expect, test } from "vitest";
import { batchExitCode, oneProblem, type BatchRow } from "../../src/batch/types.js";
import { check } from "../../src/check.js";
import { summarizeCheck } from "../../src/report/summary.js";
import { parseSpec } from "../../src/spec/index.js";
import {
  BATCH_CSV_HEADER,
  batchCountLine,
  countRows,
  formatRiskValue,
  renderBatchCsv,
  renderBatchJsonl,
  renderBatchMarkdown,
  renderBatchText,
  worstRiskCell,
  worstRiskText,
} from "../../src/report/batch.js";
import { createStyle } from "../../src/report/style.js";
import { parseRfc4180 } from "./rfc4180.js";

// Invented rows for a demo sweep (numbers are demo values, not predictions).
const ROWS: BatchRow[] = [
  {
    index: 0,
    file: "sweep/small.yaml",
    variant: null,
    status: "ok",
    summary: {
      name: "small",
      verdict: "fits",
      formats: [{ format: "bfloat16", verdict: "fits" }, { format: "binary32", verdict: "fits" }],
      lossScale: { status: "not-evaluated" },
      worst: null,
    },
  },
  {
    index: 1,
    file: "sweep/wide, \"odd\".yaml",
    variant: null,
    status: "ok",
    summary: {
      name: "wide",
      verdict: "at-risk",
      formats: [{ format: "binary16", verdict: "at-risk" }, { format: "binary32", verdict: "fits" }],
      lossScale: { status: "window", pickLog2: 12, lowestLog2: 8, highestLog2: 15 },
      worst: {
        subject: "block-3/activation-gradient",
        format: "binary16",
        verdict: "at-risk",
        kind: "overflow",
        label: "overflow",
        value: 3.2e-5,
        measure: "probability",
        scope: "subject",
      },
    },
  },
  {
    index: 2,
    file: "sweep/broken.yaml",
    variant: null,
    status: "error",
    error: oneProblem("input", "sweep/broken.yaml:4:10: training.batch: expected a positive whole number", { file: "sweep/broken.yaml", line: 4, column: 10 }),
  },
  {
    index: 3,
    file: "sweep/deep.yaml",
    variant: null,
    status: "ok",
    summary: {
      name: "deep",
      verdict: "fails",
      formats: [{ format: "binary16", verdict: "fails" }],
      lossScale: { status: "empty", sentence: "gradients flush before activations overflow" },
      worst: {
        subject: "embed/weight-gradient",
        format: "binary16",
        verdict: "fails",
        kind: "gradient-energy-flushed",
        label: "flushed energy",
        value: 0.125,
        measure: "share",
        scope: "subject",
      },
    },
  },
];

describe("batchExitCode (README: 0 all fit, 1 some at risk or failing, 2 input errors, 3 internal; strictest wins)", () => {
  const ok = ROWS[0]!;
  const risk = ROWS[1]!;
  const bad = ROWS[2]!;
  test("each level", () => {
    expect(batchExitCode([])).toBe(0);
    expect(batchExitCode([ok])).toBe(0);
    expect(batchExitCode([ok, risk])).toBe(1);
    expect(batchExitCode([risk, bad, ok])).toBe(2);
    expect(batchExitCode([bad, { index: 9, file: "x", variant: null, status: "error", error: oneProblem("internal", "worker stopped", { file: "x" }) }])).toBe(3);
  });
});

describe("renderBatchText", () => {
  test("a file name with a line break or ESC keeps one table line per row and sends no control character to the terminal (ECMA-48 §5.3: ESC starts a command)", () => {
    const odd: BatchRow[] = [
      { ...ROWS[0]!, file: "sweep/two\nlines\u009b.yaml" } as BatchRow,
      { index: 1, file: "sweep/\u001b[2Jclear.yaml", variant: null, status: "error", error: oneProblem("input", "sweep/\u001b[2Jclear.yaml:1:1: the spec is empty: it needs at least input, training and layers", { file: "sweep/\u001b[2Jclear.yaml", line: 1, column: 1 }) },
    ];
    const text = renderBatchText(odd);
    expect(text).not.toMatch(/[\u0000-\u0009\u000b-\u001f\u007f-\u009f]/);
    const lines = text.split("\n");
    expect(lines.filter((line) => /^\d+ {2}/.test(line)).map((line) => line.split(/ {2,}/)[1])).toEqual(["sweep/two\\nlines\\u009b.yaml", "sweep/\\u001b[2Jclear.yaml"]);
    expect(lines).toContain("  sweep/\\u001b[2Jclear.yaml:1:1: the spec is empty: it needs at least input, training and layers");
  });

  const text = renderBatchText(ROWS);
  test("one line per row, in order, with a column per format used", () => {
    const lines = text.split("\n");
    expect(lines[0]).toMatch(/^#\s+spec\s+verdict\s+binary16\s+bfloat16\s+binary32\s+loss scale\s+window\s+worst tensor\s+risk$/);
    expect(lines[2]).toMatch(/^1 {2}sweep\/small\.yaml\s+fits\s+-\s+fits\s+fits\s+not evaluated\s*$/);
    expect(lines[3]).toContain("at risk");
    expect(lines[3]).toContain("2^12");
    expect(lines[3]).toContain("2^8..2^15");
    expect(lines[3]).toContain("block-3/activation-gradient (binary16)");
    expect(lines[3]).toMatch(/overflow probability 3\.2e-5 per step$/);
    expect(lines[4]).toMatch(/^3 {2}sweep\/broken\.yaml\s+error$/);
    expect(lines[5]).toContain("none");
    expect(lines[5]).toContain("empty");
    expect(lines[5]).toMatch(/flushed energy 12\.5% of the squared norm$/);
  });
  test("lists errors with positions and ends with counts and the estimate note", () => {
    expect(text).toContain("could not be evaluated\n  sweep/broken.yaml:4:10: training.batch");
    expect(text).toContain("4 specs: 1 fit, 1 at risk, 1 fail, 1 could not be evaluated. Predictions are estimates");
  });
  test("has no escapes without colour, and keeps alignment with colour", () => {
    expect(text).not.toContain("\x1b");
    const coloured = renderBatchText(ROWS, { style: createStyle(true) });
    expect(coloured).toContain("\x1b[");
    expect(coloured.replace(/\x1b\[[0-9;]*m/g, "")).toBe(text);
  });
  test("adds a variant column when rows carry variants", () => {
    const varied = renderBatchText([{ ...ROWS[0]!, variant: "training.batch=8" }]);
    expect(varied.split("\n")[0]).toMatch(/spec\s+variant\s+verdict/);
    expect(varied).toContain("training.batch=8");
  });
});

describe("renderBatchJsonl", () => {
  test("one JSON object per line, in order", () => {
    const lines = renderBatchJsonl(ROWS).split("\n");
    expect(lines.at(-1)).toBe("");
    const objects = lines.slice(0, -1).map((line) => JSON.parse(line));
    expect(objects.map((o) => o.index)).toEqual([0, 1, 2, 3]);
    expect(objects[1]).toMatchObject({ verdict: "at-risk", formats: [{ format: "binary16", verdict: "at-risk" }, { format: "binary32", verdict: "fits" }], lossScale: { pickLog2: 12 } });
    expect(objects[2]).toMatchObject({ status: "error", error: { position: { line: 4, column: 10 } } });
  });
});

describe("renderBatchCsv", () => {
  test("parses with a strict RFC 4180 reader; fixed header; one record per row", () => {
    const records = parseRfc4180(renderBatchCsv(ROWS));
    expect(records[0]).toEqual([...BATCH_CSV_HEADER]);
    expect(records).toHaveLength(5);
    const at = (name: string) => BATCH_CSV_HEADER.indexOf(name as (typeof BATCH_CSV_HEADER)[number]);
    expect(records[2]![at("file")]).toBe('sweep/wide, "odd".yaml');
    expect(records[2]![at("binary16")]).toBe("at-risk");
    expect(records[2]![at("loss_scale_log2")]).toBe("12");
    expect(records[2]![at("worst_value")]).toBe("0.000032");
    expect(records[3]![at("verdict")]).toBe("error");
    expect(records[3]![at("error_line")]).toBe("4");
    expect(records[1]![at("loss_scale_status")]).toBe("not-evaluated");
  });
});

describe("renderBatchMarkdown", () => {
  const md = renderBatchMarkdown(ROWS);
  test("a count line, a table with escaped names, errors, and the note", () => {
    expect(md.startsWith("**headroom batch**: 4 specs: 1 fit, 1 at risk, 1 fail, 1 could not be evaluated\n\n| spec | verdict |")).toBe(true);
    expect(md).toContain("| sweep/wide, \"odd\".yaml | **at risk** |");
    expect(md).toContain("_not evaluated_");
    expect(md).toContain("- sweep/broken.yaml:4:10: training.batch");
    expect(md).toContain("_Predictions are estimates");
  });
});

describe("warnings of specs judged as written", () => {
  const warning = "sweep/small.yaml:6:38: training.horizon.final-loss: the final loss 3 is not below the starting loss ln(4) ≈ 1.39: gradients are taken not to shrink";
  const warned: BatchRow[] = [{ ...(ROWS[0] as Extract<BatchRow, { status: "ok" }>), variant: "training.batch=8", warnings: [warning] }, ROWS[1]!];
  test("the text lists them under the table with their variant; Markdown likewise; JSON Lines on their row only", () => {
    expect(renderBatchText(warned)).toContain(`\nwarnings (judged as written)\n  ${warning} [training.batch=8]\n`);
    expect(renderBatchMarkdown(warned)).toContain(`\nWarnings (judged as written):\n\n- ${warning.replace("[", "\\[")} \\[training.batch=8\\]\n`);
    const [first, second] = renderBatchJsonl(warned).trimEnd().split("\n").map((line) => JSON.parse(line));
    expect(first.warnings).toEqual([warning]);
    expect(second).not.toHaveProperty("warnings");
    // rows without warnings render as before
    expect(renderBatchText(ROWS)).not.toContain("warnings");
    expect(renderBatchJsonl(ROWS)).not.toContain("warnings");
  });
});

describe("countRows / batchCountLine", () => {
  test("counts outcomes", () => {
    expect(countRows(ROWS)).toEqual({ total: 4, fits: 1, atRisk: 1, fails: 1, inputErrors: 1, internalErrors: 0, unmatched: 0 });
    expect(batchCountLine([ROWS[0]!])).toBe("1 spec: 1 fit, 0 at risk, 0 fail");
  });

  test("a path argument that named no spec file is not counted as a spec", () => {
    const unmatched: BatchRow = {
      index: 4,
      file: "nothing/*.yaml",
      variant: null,
      status: "error",
      error: {
        kind: "input",
        message: "nothing/*.yaml: no file matches this pattern",
        position: { file: "nothing/*.yaml" },
        issues: [{ message: "nothing/*.yaml: no file matches this pattern", position: { file: "nothing/*.yaml" } }],
        argument: true,
      },
    };
    expect(countRows([...ROWS, unmatched])).toEqual({ total: 4, fits: 1, atRisk: 1, fails: 1, inputErrors: 1, internalErrors: 0, unmatched: 1 });
    expect(batchCountLine([ROWS[0]!, unmatched])).toBe("1 spec: 1 fit, 0 at risk, 0 fail; 1 argument named no spec file");
    expect(batchCountLine([ROWS[0]!, unmatched, { ...unmatched, index: 5 }])).toBe("1 spec: 1 fit, 0 at risk, 0 fail; 2 arguments named no spec file");
  });
});

describe("a check with two loss-scale answers (check --format binary16,e5m2)", () => {
  const parsed = parseSpec(readFileSync("specs/wide-classifier.yaml", "utf8"), "specs/wide-classifier.yaml");
  if (!parsed.ok) throw new Error("specs/wide-classifier.yaml does not parse");
  // the plan written in e4m3 without scale factors, so the what-if e5m2 keeps none and takes a loss scale of its own
  const unscaled = { ...parsed.spec, precision: { ...parsed.spec.precision, activations: "e4m3", weights: "e4m3", gradients: "e4m3", scaling: "none" } } as typeof parsed.spec;
  const result = check(unscaled, { formats: ["binary16", "e5m2"] });
  const [b16, e5m2] = [result.lossScaleAnswer!.window, result.moreLossScaleAnswers![0]!.window];
  const row: BatchRow = { index: 0, file: "wide.yaml", variant: null, status: "ok", summary: summarizeCheck(result) };
  // an answer's row fields: the window's exponents of two, or "empty"
  const fields = (w: typeof b16) => (w.empty ? { status: "empty" } : { status: "window", pickLog2: w.pickLog2, lowestLog2: w.lowestLog2, highestLog2: w.highestLog2 });
  const cell = (w: typeof b16) => (w.empty ? "none" : `2^${w.pickLog2}`);
  const windowCell = (w: typeof b16) => (w.empty ? "empty" : `2^${w.lowestLog2}..2^${w.highestLog2}`);

  test("the row keeps the first answer in lossScale and gives both in lossScales", () => {
    expect(row.status === "ok" && row.summary.lossScale).toMatchObject(fields(b16));
    expect(row.status === "ok" && row.summary.lossScales).toMatchObject([{ format: "binary16", ...fields(b16) }, { format: "e5m2", ...fields(e5m2) }]);
  });

  test("the table and Markdown name each format in the loss-scale and window cells", () => {
    const pick = `binary16 ${cell(b16)}; e5m2 ${cell(e5m2)}`;
    const window = `binary16 ${windowCell(b16)}; e5m2 ${windowCell(e5m2)}`;
    const line = renderBatchText([row]).split("\n")[2]!;
    expect(line).toContain(pick);
    expect(line).toContain(window);
    expect(renderBatchMarkdown([row])).toContain(`| ${pick} | ${window} |`);
  });

  test("JSONL: one object on one line, with both answers", () => {
    const lines = renderBatchJsonl([row]).split("\n");
    expect(lines).toHaveLength(2);
    const object = JSON.parse(lines[0]!);
    expect(object.lossScale).toMatchObject(fields(b16));
    expect(object.lossScales).toMatchObject([{ format: "binary16", ...fields(b16) }, { format: "e5m2", ...fields(e5m2) }]);
  });

  test("CSV: the first answer in the old columns, both in loss_scales; a strict RFC 4180 reader agrees", () => {
    const records = parseRfc4180(renderBatchCsv([row]));
    expect(records).toHaveLength(2);
    const at = (name: string) => BATCH_CSV_HEADER.indexOf(name as (typeof BATCH_CSV_HEADER)[number]);
    const entry = (format: string, w: typeof b16) => (w.empty ? `${format}:empty` : `${format}:window:${w.pickLog2}:${w.lowestLog2}:${w.highestLog2}`);
    expect(records[1]![at("loss_scale_status")]).toBe(b16.empty ? "empty" : "window");
    expect(records[1]![at("loss_scale_log2")]).toBe(b16.empty ? "" : String(b16.pickLog2));
    expect(records[1]![at("loss_scales")]).toBe(`${entry("binary16", b16)}; ${entry("e5m2", e5m2)}`);
  });

  test("a row with one answer keeps its cells unnamed, and a not-needed answer reads 'not needed'", () => {
    const single = renderBatchText([{ ...row, summary: summarizeCheck(check(parsed.spec)) }]).split("\n")[2]!;
    expect(single).toContain(` ${cell(b16)} `);
    expect(single).not.toContain("binary16 2^");
    const both = renderBatchText([{ ...row, summary: summarizeCheck(check(unscaled, { formats: ["bfloat16", "e5m2"] })) }]).split("\n")[2]!;
    expect(both).toContain(`bfloat16 not needed; e5m2 ${cell(e5m2)}`);
  });
});

describe("a worst finding counted in elements", () => {
  test("keeps the expected count's fraction, as the finding's sentence gives it ('about 1.66 second-moment elements')", () => {
    expect(formatRiskValue({ value: 1.6591118013057697, measure: "count" })).toBe("1.66 elements");
    expect(formatRiskValue({ value: 0.25, measure: "count" })).toBe("0.25 elements");
    expect(formatRiskValue({ value: 12, measure: "count" })).toBe("12 elements");
    expect(formatRiskValue({ value: 4_500_000.5, measure: "count" })).toBe("4.5M elements");
  });
});

describe("a worst finding that counts the whole network (Adam's zero second moments)", () => {
  test("says so beside the layer it names, which holds only part of the count (deep-relu-he, states in binary16)", () => {
    const file = "specs/deep-relu-he.yaml";
    const text = readFileSync(file, "utf8").replace("  optimizer-states: binary32\n  master-weights", "  optimizer-states: binary16\n  master-weights");
    const parsed = parseSpec(text, file);
    if (!parsed.ok) throw new Error("the varied example does not load");
    const worst = summarizeCheck(check(parsed.spec)).worst!;
    expect(worst.kind).toBe("optimizer-epsilon-flushed");
    expect(worst.subject).toBe("hidden-stack.0.use-0.dense-0");
    // the named layer holds 784 × 512 weights and 512 biases (a dense layer's fan-in × width, common practice): the
    // count is above all its elements, so it cannot be the layer's own
    expect(worst.value).toBeGreaterThan(784 * 512 + 512);
    expect(worst.scope).toBe("network");
    expect(worstRiskText(worst)).toMatch(/^zero second moments [0-9.]+M elements across the network \(most in this layer\)$/);
    const row: BatchRow = { index: 0, file, variant: null, status: "ok", summary: summarizeCheck(check(parsed.spec)) };
    expect(JSON.parse(renderBatchJsonl([row]))).toMatchObject({ worst: { scope: "network" } });
    const records = parseRfc4180(renderBatchCsv([row]));
    expect(records[1]![BATCH_CSV_HEADER.indexOf("worst_scope")]).toBe("network");
    // a finding about its subject alone says nothing more
    expect(worstRiskText({ label: "flushed energy", value: 0.125, measure: "share", scope: "subject" })).toBe("flushed energy 12.5%");
  });
});

describe("the loss-scale columns of the batch table", () => {
  test("are left-aligned whether or not some row says 'not needed', as the Markdown table aligns them", () => {
    const windowRow = (index: number, pickLog2: number): BatchRow => ({
      index,
      file: `sweep/w${index}.yaml`,
      variant: null,
      status: "ok",
      summary: {
        name: `w${index}`,
        verdict: "fits",
        formats: [{ format: "binary16", verdict: "fits" }],
        lossScale: { status: "window", pickLog2, lowestLog2: -9, highestLog2: 18 },
        worst: null,
      },
    });
    const lines = renderBatchText([windowRow(0, 5), windowRow(1, 12)]).split("\n");
    const header = lines[0]!;
    const column = header.indexOf("loss scale");
    expect(lines[2]!.slice(column, column + 3)).toBe("2^5");
    expect(lines[3]!.slice(column, column + 4)).toBe("2^12");
    const windowColumn = header.indexOf("window");
    expect(lines[2]!.slice(windowColumn).startsWith("2^-9..2^18")).toBe(true);
  });
});

describe("the risk column of the batch table", () => {
  const text = renderBatchText(ROWS);
  test("starts where its header does, right after the worst tensor's column, on every row that has a risk", () => {
    const lines = text.split("\n");
    const column = lines[0]!.indexOf("risk");
    // the subjects of rows 2 and 4 differ in length (27 and 21 characters): left-aligned, both risks start at the header
    expect(lines[3]!.slice(column)).toBe("overflow probability 3.2e-5 per step");
    expect(lines[5]!.slice(column)).toBe("flushed energy 12.5% of the squared norm");
    // two spaces after the longest subject, as every column of the table
    expect(lines[3]!.slice(column - 2 - "block-3/activation-gradient (binary16)".length, column)).toBe("block-3/activation-gradient (binary16)  ");
  });

  test("says what each number is (README, Verdicts: overflow a per-step probability, flushed energy a share of the squared norm, accumulation error √n·u relative)", () => {
    const cell = (kind: string, label: string, value: number, measure: "probability" | "share" | "binades" | "relative-error" | "count") =>
      worstRiskCell({ kind, label, value, measure, scope: "subject" });
    expect(cell("overflow", "overflow", 1, "probability")).toBe("overflow probability 1 per step");
    expect(cell("norm-sum-overflow", "norm sum overflow", 0.99, "probability")).toBe("norm sum overflow probability 0.99 per step");
    expect(cell("gradient-energy-flushed", "flushed energy", 0.683, "share")).toBe("flushed energy 68.3% of the squared norm");
    expect(cell("flushed-values", "flushed", 0.432, "share")).toBe("flushed 43.2% of the nonzero elements");
    // √32 · 2^-8 = 0.0221 (bfloat16's unit roundoff 2^-8, IEEE 754-2019 §3.6 precision 8 bits)
    expect(cell("accumulation-error", "accumulation error", Math.sqrt(32) * 2 ** -8, "relative-error")).toBe("accumulation error 0.022 relative to the sum");
    expect(cell("little-headroom", "headroom", 0.5, "binades")).toBe("headroom 0.5 binades");
    expect(worstRiskCell({ kind: "optimizer-epsilon-flushed", label: "zero second moments", value: 425_200, measure: "count", scope: "network" })).toBe(
      "zero second moments 425.2k elements per step across the network (most in this layer)",
    );
  });

  test("Markdown says the same", () => {
    expect(renderBatchMarkdown(ROWS)).toContain("| block-3/activation-gradient (binary16) | overflow probability 3.2e-5 per step |");
  });
});
