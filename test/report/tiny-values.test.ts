/**
 * One rule for tiny numbers across the text outputs (DEVELOPERS.md, "Numbers in text outputs"): a share reads as
 * formatPercent writes it and a per-step probability as formatProbability writes it, in check's tensor table, in
 * explain and in a batch row alike. Before, a flushed share of 2.4e-8 read "2.4e-8" in check's table and "<0.1%" in
 * explain, and an energy share at risk (above 1e-4) read "<0.1%" in a batch row.
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { renderSimulationText } from "../../src/cli/simulate.js";
import { predict } from "../../src/magnitude/index.js";
import { simulate } from "../../src/simulate/index.js";
import { formatRiskValue } from "../../src/report/batch.js";
import { renderExplainText } from "../../src/report/check-explain.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { formatPercent, formatProbability } from "../../src/report/number.js";
import { parseSpec } from "../../src/spec/index.js";

describe("tiny values read alike in every text output", () => {
  const parsed = parseSpec(readFileSync("specs/wide-classifier.yaml", "utf8"), "specs/wide-classifier.yaml");
  if (!parsed.ok) throw new Error("the example does not load");
  const result = check(parsed.spec);
  const table = renderCheckText(result, { width: 400, all: true });

  it("a tensor's flushed share and overflow probability: the same words in check's table and in explain", () => {
    let tiny = 0;
    for (const tensor of result.tensors) {
      const risk = tensor.risks.find((r) => r.format === "binary16");
      if (risk === undefined || !risk.judged) continue;
      const w = risk.worst;
      const row = table.split("\n").find((line) => line.trimStart().startsWith(`${tensor.layer} `) && line.includes(` ${tensor.role}${tensor.id.includes(":") ? tensor.id.slice(tensor.id.indexOf(":")) : ""} `));
      expect(row, tensor.id).toBeDefined();
      const cells = row!.trim().split(/ {2,}/);
      expect(cells, tensor.id).toContain(formatPercent(w.flushedFraction));
      const explained = renderExplainText(result, tensor, { width: 1000 });
      expect(explained, tensor.id).toContain(`flushed ${formatPercent(w.flushedFraction)} of nonzero elements`);
      expect(explained, tensor.id).toContain(`overflow ${formatProbability(w.overflowRisk)} per step`);
      if (w.flushedFraction > 0 && w.flushedFraction < 1e-6) tiny++;
    }
    // the example has tensors whose flushed share is positive and far below 0.1% (the case the rule is for)
    expect(tiny).toBeGreaterThan(0);
  });

  it("simulate's table writes the measured shares and the subnormal noise as check's table does", () => {
    // gradients that binary16 partly flushes and partly rounds as subnormals (the fixture says how)
    const tide = parseSpec(readFileSync("test/fixtures/specs/tide-gauge.yaml", "utf8"), "tide-gauge.yaml");
    if (!tide.ok) throw new Error("the spec does not load");
    const report = simulate(tide.spec, { predict, draws: 1 });
    const text = renderSimulationText(report, { all: true });
    let noisy = 0;
    for (const t of report.result.tensors) {
      const line = text.split("\n").find((l) => l.trimStart().startsWith(`${t.id} `));
      expect(line, t.id).toBeDefined();
      const c = t.median.counts;
      const overflow = c.overflowed + c.saturated + c.nonFinite;
      expect(line!.trim().split(/ {2,}/).slice(-4), t.id).toEqual([formatPercent(c.flushed), formatPercent(c.subnormal), formatProbability(c.subnormalNoise), formatPercent(overflow)]);
      if (c.subnormalNoise > 0 && c.subnormalNoise < 0.01) noisy++;
    }
    expect(noisy).toBeGreaterThan(0);
  });

  it("shares: one decimal from 0.1%, two significant digits below, the sentences' floor of 1e-6% (share 1e-8)", () => {
    // the floor is the sentences' ("less than 1e-6%", src/risk/words.ts tinyShare); the digits are arithmetic
    expect(formatPercent(2.4e-8)).toBe("2.4e-6%");
    expect(formatPercent(4.3e-9)).toBe("<1e-6%");
    expect(formatPercent(2e-4)).toBe("0.02%");
    expect(formatPercent(0)).toBe("0%");
    // an energy share at risk (the catalogue's 1e-4 threshold, README "Thresholds") keeps a digit in a batch row
    expect(formatRiskValue({ measure: "share", value: 2.5e-4 })).toBe("0.025%");
    expect(formatRiskValue({ measure: "probability", value: 1e-9 })).toBe("1e-9");
  });
});
