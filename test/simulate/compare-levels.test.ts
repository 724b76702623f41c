/**
 * simulate's comparison flags a tensor whose measured and predicted flushed shares fall on two sides of a verdict
 * level of check (the flushed-share thresholds, README "Verdicts"), even when the share of all elements they differ by
 * is below the absolute tolerance: a conv input gradient with 1.6% of its nonzero elements flushed measured against
 * <0.1% predicted was reported as agreeing, while check's verdict on it would differ.
 */
import { describe, expect, it } from "vitest";
import { DEFAULT_THRESHOLDS } from "../../src/risk/index.js";
import { crossesFlushedLevel, STANDING_TOLERANCE } from "../../src/simulate/compare.js";

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
