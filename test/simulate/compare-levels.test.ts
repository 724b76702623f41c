/**
 * simulate's comparison flags a tensor whose measured and predicted flushed shares fall on two sides of a verdict
 * level of check (the flushed-share thresholds, README "Verdicts"), even when the share of all elements they differ by
 * is below the absolute tolerance: a conv input gradient with 1.6% of its nonzero elements flushed measured against
 * <0.1% predicted was reported as agreeing, while check's verdict on it would differ.
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { DEFAULT_THRESHOLDS } from "../../src/risk/index.js";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { compareWithPrediction, crossesFlushedLevel, STANDING_TOLERANCE } from "../../src/simulate/compare.js";
import { runSimulation } from "../../src/simulate/engine.js";

describe("flushed shares on two sides of a verdict level", () => {
  it("the standing tolerance's levels are check's flushed thresholds", () => {
    expect(STANDING_TOLERANCE.flushedLevels).toEqual([DEFAULT_THRESHOLDS.flushedAtRisk, DEFAULT_THRESHOLDS.flushedFails]);
  });

  it("1.6% measured against 0.0021% predicted crosses 1% (and differs 760-fold)", () => {
    expect(crossesFlushedLevel(0.0159, 0.000021, STANDING_TOLERANCE.flushedLevels)).toBe(true);
    expect(crossesFlushedLevel(0.000021, 0.0159, STANDING_TOLERANCE.flushedLevels)).toBe(true);
  });

  it("two shares on one side of every level, or within a factor of 2 of each other, agree", () => {
    expect(crossesFlushedLevel(0.005, 0.00001, [0.01, 0.1])).toBe(false);
    expect(crossesFlushedLevel(0.012, 0.009, [0.01, 0.1])).toBe(false);
    expect(crossesFlushedLevel(0.3, 0.2, [0.01, 0.1])).toBe(false);
    // 10% is a level too: 25% against 4% crosses it
    expect(crossesFlushedLevel(0.25, 0.04, [0.01, 0.1])).toBe(true);
    // at the level itself the verdict has not changed (it changes above it)
    expect(crossesFlushedLevel(0.01, 0.001, [0.01, 0.1])).toBe(false);
  });

  it("no levels, or a share that is not a number (8-bit formats with scale factors), never disagree this way", () => {
    expect(crossesFlushedLevel(0.5, 0, [])).toBe(false);
    expect(crossesFlushedLevel(0.5, NaN, [0.01])).toBe(false);
  });
});

describe("a comparison row's shares of the nonzero elements flushed", () => {
  it("divide the flushed share of all elements by the share that is not an exact zero, measured and predicted", () => {
    // gradients that binary16 partly flushes, below a ReLU's exact zeros (the fixture says how)
    const parsed = parseSpec(readFileSync("test/fixtures/specs/tide-gauge.yaml", "utf8"), "tide-gauge.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const built = buildGraph(parsed.spec);
    if (!built.ok) throw new Error("does not build");
    const comparison = compareWithPrediction(runSimulation(parsed.spec), predict(built.graph, parsed.spec));
    // the definition of a share of the nonzero elements (README "Verdicts": flushed shares count nonzero elements only)
    let measuredFlushing = 0;
    let predictedWithZeros = 0;
    for (const row of comparison.rows) {
      const m = row.measured.median;
      // a tensor of exact zeros has no nonzero element to flush: 0
      if (m.zeroFraction === 1) expect(row.measuredNonzeroFlushed).toBe(0);
      else expect(row.measuredNonzeroFlushed).toBeCloseTo(m.counts.flushed / (1 - m.zeroFraction), 15);
      if (row.predictedZeroFraction === 1) expect(row.predictedNonzeroFlushed).toBe(0);
      else expect(row.predictedNonzeroFlushed).toBeCloseTo(row.predictedFlushed / (1 - row.predictedZeroFraction), 15);
      if (m.counts.flushed > 0.01) measuredFlushing++;
      if (row.predictedZeroFraction > 0.3 && row.predictedFlushed > 0) predictedWithZeros++;
    }
    // the cases the shares are for: stored values that flush, and a tensor with exact zeros (after the ReLU)
    expect(measuredFlushing).toBeGreaterThan(0);
    expect(predictedWithZeros).toBeGreaterThan(0);
  });
});
