/**
 * The JSON of compare and batch against the check's (README.md, "The JSON result", is the reference layout): the same
 * names and shapes for what they share, a `version` in each, and every field documented in README's tables.
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { comparePlans } from "../../src/compare.js";
import { oneProblem, type BatchRow } from "../../src/batch/types.js";
import { renderBatchJsonl } from "../../src/report/batch.js";
import { renderCheckJson } from "../../src/report/check-json.js";
import { renderCompareJson } from "../../src/report/compare-text.js";
import { summarizeCheck } from "../../src/report/summary.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

type Json = Record<string, unknown>;

const readme = readFileSync(new URL("../../README.md", import.meta.url), "utf8");

function example(file: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
  if (!parsed.ok) throw new Error(`specs/${file} does not parse`);
  return parsed.spec;
}

/** The field names of the README table that follows `heading` (its first column, `name` or `name[]`, nested ones dotted). */
function documentedFields(heading: string): string[] {
  const start = readme.indexOf(heading);
  expect(start, heading).toBeGreaterThanOrEqual(0);
  const lines = readme.slice(start).split("\n");
  const first = lines.findIndex((line) => /^\s*\| field \| meaning \|/.test(line));
  const fields: string[] = [];
  for (const line of lines.slice(first + 2)) {
    const m = /^\s*\| `([^`]+)` \|/.exec(line);
    if (m === null) break;
    fields.push(m[1]!.replace(/\[\]/g, ""));
  }
  return fields;
}

const checkJson = (spec: NetworkSpec) => JSON.parse(renderCheckJson(check(spec))) as Json;

describe("batch JSON Lines rows", () => {
  const sigmoid = example("deep-sigmoid.yaml");
  const encoder = example("transformer-encoder.yaml");
  const wide = example("wide-classifier.yaml");
  const rows: BatchRow[] = [
    { index: 0, file: "specs/deep-sigmoid.yaml", variant: null, status: "ok", summary: summarizeCheck(check(sigmoid)), warnings: ["specs/deep-sigmoid.yaml:1:1: name: a warning"] },
    { index: 1, file: "specs/transformer-encoder.yaml", variant: "training.batch=8", status: "ok", summary: summarizeCheck(check(encoder)) },
    { index: 2, file: "specs/wide-classifier.yaml", variant: null, status: "ok", summary: summarizeCheck(check(wide)) },
    { index: 3, file: "nope.yaml", variant: null, status: "error", error: { ...oneProblem("input", "nope.yaml: no such file or folder", { file: "nope.yaml" }), argument: true } },
  ];
  const lines = renderBatchJsonl(rows).trimEnd().split("\n").map((line) => JSON.parse(line) as Json);

  it("carry the check's version and names: formats[] of { format, verdict }, the window's lowestLog2/highestLog2, reason { kind, sentence }", () => {
    const wideCheck = checkJson(wide);
    const encoderCheck = checkJson(encoder);
    for (const line of lines) expect(line.version).toBe(2);
    expect(lines[2]!.formats).toEqual((wideCheck.formats as Json[]).map((f) => ({ format: f.format, verdict: f.verdict })));
    const window = (wideCheck.lossScale as { window: Json }).window;
    expect(lines[2]!.lossScale).toEqual({ status: "window", pickLog2: window.pickLog2, lowestLog2: window.lowestLog2, highestLog2: window.highestLog2 });
    const item = (encoderCheck.lossScales as Json[])[0]!;
    expect(item.status).toBe("not-needed");
    expect(lines[1]!.lossScale).toEqual({ status: "not-needed", reason: item.reason });
    expect((lines[1]!.lossScales as Json[])[0]).toEqual({ format: item.format, status: "not-needed", reason: item.reason });
    // an empty window: the check answer's first sentence
    const empty = checkJson(sigmoid).lossScaleAnswer as { sentences: string[] };
    expect(lines[0]!.lossScale).toEqual({ status: "empty", sentence: empty.sentences[0] });
  });

  it("give an error row a verdict, 'error', as the table and the CSV do", () => {
    expect(lines[3]).toMatchObject({ status: "error", verdict: "error" });
  });

  it("have every field documented in README's JSON Lines table, and nothing documented that no row has", () => {
    const documented = documentedFields("- **JSON Lines**");
    const seen = new Set<string>();
    for (const line of lines) {
      for (const [key, value] of Object.entries(line)) {
        seen.add(key);
        // the worst finding's fields are listed in its row of the table
        if (key === "worst" && value !== null) for (const inner of Object.keys(value as Json)) expect(readme).toContain(`\`${inner}\``);
      }
    }
    expect([...seen].sort()).toEqual([...documented].sort());
  });
});

describe("compare --json", () => {
  const wide = example("wide-classifier.yaml");
  const comparison = JSON.parse(renderCompareJson(comparePlans(wide))) as Json;
  const outcomes = comparison.outcomes as Json[];

  it("has a version, and a plan's lossScale is the check's object, its verdict the check's", () => {
    expect(comparison.version).toBe(2);
    for (const outcome of outcomes) {
      const checked = checkJson({ ...wide, precision: outcome.plan as NetworkSpec["precision"] });
      expect(outcome.lossScale, (outcome.plan as Json).name as string).toEqual(checked.lossScale);
      expect(outcome.verdict).toBe(checked.verdict);
    }
  });

  it("has every field documented in README's table, and nothing documented that it lacks", () => {
    const documented = documentedFields("`compare --json` prints the whole comparison");
    const top = documented.filter((f) => !f.includes("."));
    const inner = documented.filter((f) => f.startsWith("outcomes.")).map((f) => f.slice("outcomes.".length));
    expect(Object.keys(comparison).sort()).toEqual([...top].sort());
    for (const outcome of outcomes) expect(Object.keys(outcome).sort()).toEqual([...inner].sort());
  });
});

describe("the check's empty window", () => {
  it("has crossed edges, as README says: lowestLog2 above highestLog2 by gapBinades (deep-sigmoid)", () => {
    const json = checkJson(example("deep-sigmoid.yaml"));
    const window = (json.lossScaleAnswer as { window: { lowestLog2: number; highestLog2: number; gapBinades: number; empty: boolean } }).window;
    expect(window.empty).toBe(true);
    expect(window.lowestLog2).toBeGreaterThan(window.highestLog2);
    expect(window.lowestLog2 - window.highestLog2).toBe(window.gapBinades);
    expect(readme).toContain(`\`specs/deep-sigmoid.yaml\`: ${window.lowestLog2} > ${window.highestLog2}, ${window.gapBinades} binades`);
  });
});
