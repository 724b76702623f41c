/**
 * A batch row shows the loss scale the check judged at, not only the pick: a spec whose plan sets its own scale is
 * judged at that scale (Micikevicius et al. 2018 §3.2: the scale multiplies every gradient), so a row failing at its
 * own 2^30 must not read as failing at the pick. The place against the window is arithmetic on exponents of two:
 * log2 S minus the nearer edge, as check's header says it ("2^24 (from the plan), 15 binades above the window").
 */
import { readFileSync } from "node:fs";
import { describe, expect, test } from "vitest";
import type { BatchRow } from "../../src/batch/types.js";
import { check } from "../../src/check.js";
import { BATCH_CSV_HEADER, renderBatchCsv, renderBatchJsonl, renderBatchMarkdown, renderBatchText } from "../../src/report/batch.js";
import { describeLossScale } from "../../src/report/check-text.js";
import { summarizeCheck } from "../../src/report/summary.js";
import { parseSpec } from "../../src/spec/index.js";
import { parseRfc4180 } from "./rfc4180.js";

const FILE = "specs/wide-classifier.yaml";

/** The example with its binary16 plan given a loss scale of its own (`precision.loss-scale`, specs/README.md). */
function withPlanScale(scale: number) {
  const text = readFileSync(FILE, "utf8").replace("  accumulate: binary32\nplans:", `  accumulate: binary32\n  loss-scale: ${scale}\nplans:`);
  const parsed = parseSpec(text, FILE);
  if (!parsed.ok) throw new Error("the varied example does not load");
  expect(parsed.spec.precision.lossScale).toBe(scale);
  return check(parsed.spec);
}

const rowOf = (result: ReturnType<typeof check>): BatchRow => ({ index: 0, file: FILE, variant: null, status: "ok", summary: summarizeCheck(result) });
const tableLine = (row: BatchRow) => renderBatchText([row]).split("\n")[2]!;

describe("a spec whose plan sets a loss scale above the window", () => {
  const result = withPlanScale(2 ** 30);
  const window = result.lossScale.window!;
  const row = rowOf(result);
  // 2^30 against the window's upper edge 2^h: 30 − h binades above it (exponents of two)
  const above = 30 - window.highestLog2!;

  test("the check judged at the plan's scale, outside the window it searched", () => {
    expect(result.lossScale).toMatchObject({ value: 2 ** 30, origin: "plan" });
    expect(above).toBeGreaterThan(0);
    expect(result.lossScaleAnswer?.requested).toEqual({ scale: 2 ** 30, inside: false, origin: "plan" });
  });

  test("the row carries the scale judged, its origin and its binades above the window", () => {
    expect(row.status === "ok" && row.summary.judgedLossScale).toEqual({ value: 2 ** 30, origin: "plan", position: "above", binadesOutside: above });
  });

  test("the table and Markdown say the plan's scale and where it lies, and the pick beside the window", () => {
    const cell = `2^30 (plan, ${above} binades above)`;
    const windowCell = `2^${window.lowestLog2}..2^${window.highestLog2}, pick 2^${window.pickLog2}`;
    expect(tableLine(row)).toContain(cell);
    expect(tableLine(row)).toContain(windowCell);
    expect(renderBatchMarkdown([row])).toContain(`| ${cell} | ${windowCell} |`);
    // the same count of binades as check's own header
    expect(describeLossScale(result.lossScale, undefined, result.lossScaleAnswer ?? undefined)).toContain(`(from the plan), ${above} binades above the window`);
  });

  test("JSON Lines and CSV give it too", () => {
    expect(JSON.parse(renderBatchJsonl([row]))).toMatchObject({ judgedLossScale: { value: 2 ** 30, origin: "plan", position: "above", binadesOutside: above } });
    const records = parseRfc4180(renderBatchCsv([row]));
    const at = (name: string) => records[1]![BATCH_CSV_HEADER.indexOf(name as (typeof BATCH_CSV_HEADER)[number])];
    expect([at("judged_loss_scale"), at("judged_loss_scale_origin"), at("judged_loss_scale_position"), at("judged_loss_scale_binades_outside")]).toEqual([
      String(2 ** 30),
      "plan",
      "above",
      String(above),
    ]);
    // the pick stays in its own columns
    expect(at("loss_scale_log2")).toBe(String(window.pickLog2));
  });
});

describe("a spec whose plan sets a loss scale below the window, and one inside it", () => {
  test("1 below the window: its lower edge's exponent in binades below", () => {
    const result = withPlanScale(1);
    const low = result.lossScale.window!.lowestLog2!;
    // log2 1 = 0: the lower edge 2^l lies l binades above it
    expect(low).toBeGreaterThan(0);
    const row = rowOf(result);
    expect(row.status === "ok" && row.summary.judgedLossScale).toEqual({ value: 1, origin: "plan", position: "below", binadesOutside: low });
    expect(tableLine(row)).toContain(`2^0 (plan, ${low} binade${low === 1 ? "" : "s"} below)`);
  });

  test("a scale between the edges is inside", () => {
    const result = withPlanScale(2 ** 10);
    const w = result.lossScale.window!;
    expect(w.lowestLog2! <= 10 && 10 <= w.highestLog2!).toBe(true);
    const row = rowOf(result);
    expect(row.status === "ok" && row.summary.judgedLossScale).toEqual({ value: 2 ** 10, origin: "plan", position: "inside", binadesOutside: 0 });
    expect(tableLine(row)).toContain("2^10 (plan, inside)");
  });

  test("with no scale in the plan the pick is what was judged, and the cell says so", () => {
    const parsed = parseSpec(readFileSync(FILE, "utf8"), FILE);
    if (!parsed.ok) throw new Error("the example does not load");
    const result = check(parsed.spec);
    const row = rowOf(result);
    const pick = result.lossScale.window!.pickLog2!;
    expect(result.lossScale).toMatchObject({ value: 2 ** pick, origin: "recommended" });
    expect(row.status === "ok" && row.summary.judgedLossScale).toEqual({ value: 2 ** pick, origin: "recommended", position: "inside", binadesOutside: 0 });
    expect(tableLine(row)).toContain(`2^${pick} (pick)`);
    expect(tableLine(row)).not.toContain(", pick");
  });
});
