import { describe, expect, it } from "vitest";
import { lossScaleWindow, type ScaledTensorCurves } from "../../src/scale/window.js";

// binary16 limits (IEEE 754-2019 Table 3.5 parameters): largest finite 65504, smallest subnormal 2^-24
const MAX = 65504;
const TINY = 2 ** -24;

/**
 * A tensor whose largest element is `largest` and whose small elements are `smallest`, hard-edged:
 * overflow when S·largest > 65504, all energy lost when S·smallest < 2^-24. The window is then computable by hand:
 * k ≤ floor(log2(65504 / largest)) and k ≥ ceil(log2(2^-24 / smallest)).
 */
function hard(id: string, largest: number, smallest: number): ScaledTensorCurves {
  return {
    id,
    overflowRisk: (k) => (2 ** k * largest > MAX ? 1 : 0),
    flushedEnergy: (k) => (2 ** k * smallest < TINY ? 1 : 0),
  };
}

describe("lossScaleWindow", () => {
  it("finds the window of a single tensor by hand", () => {
    // largest 3.0 → k ≤ floor(log2(65504/3)) = floor(14.41) = 14; smallest 2^-30 → k ≥ 6
    const w = lossScaleWindow([hard("g", 3, 2 ** -30)], { marginBinades: 2 });
    expect(w.highestLog2).toBe(14);
    expect(w.lowestLog2).toBe(6);
    expect(w.pickLog2).toBe(10); // the centre of [6, 14]
    expect(w.marginBelowOverflow).toBe(4);
    expect(w.marginAboveFlush).toBe(4);
    expect(w.empty).toBe(false);
    expect(w.unscaledFits).toBe(false);
    expect(w.upperEdgeSetBy).toBe("g");
    expect(w.lowerEdgeSetBy).toBe("g");
  });

  it("keeps the margin below the overflow edge when the centre would come closer", () => {
    // window [6, 7]: centre rounds up to 7, the margin of 2 pulls it to 5, the flush edge lifts it back to 6
    const w = lossScaleWindow([hard("g", 65504 / 2 ** 7, 2 ** -30)], { marginBinades: 2 });
    expect([w.lowestLog2, w.highestLog2, w.pickLog2]).toEqual([6, 7, 6]);
  });

  it("names the tensor that sets each edge", () => {
    const w = lossScaleWindow([hard("big", 100, 2 ** -20), hard("small", 0.01, 2 ** -33)]);
    // big: k ≤ floor(log2(655.04)) = 9; small: k ≥ 9 → window is the single exponent 9
    expect([w.lowestLog2, w.highestLog2]).toEqual([9, 9]);
    expect(w.pickLog2).toBe(9); // margin cannot be kept; the pick stays at the flush edge
    expect(w.upperEdgeSetBy).toBe("big");
    expect(w.lowerEdgeSetBy).toBe("small");
  });

  it("reports an empty window and the gap in binades", () => {
    // big: k ≤ 9; tiny: k ≥ ceil(log2(2^-24 / 2^-40)) = 16 → gap 7 binades
    const w = lossScaleWindow([hard("big", 100, 1), hard("tiny", 1e-3, 2 ** -40)]);
    expect(w.empty).toBe(true);
    expect(w.pickLog2).toBeNull();
    expect(w.gapBinades).toBe(7);
    expect(w.upperEdgeSetBy).toBe("big");
    expect(w.lowerEdgeSetBy).toBe("tiny");
  });

  it("says when no scale is needed", () => {
    const w = lossScaleWindow([hard("g", 1, 2 ** -10)]);
    expect(w.unscaledFits).toBe(true);
    expect(w.lowestLog2).toBeLessThanOrEqual(0);
  });

  it("sums risks over tensors against the budget (union bound)", () => {
    // each tensor alone stays within 1e-4 at k = 3 (risk 6e-5) but two together do not
    const soft = (id: string): ScaledTensorCurves => ({ id, overflowRisk: (k) => (k <= 2 ? 0 : k === 3 ? 6e-5 : 1), flushedEnergy: () => 0 });
    expect(lossScaleWindow([soft("a")], { riskBudget: 1e-4 }).highestLog2).toBe(3);
    expect(lossScaleWindow([soft("a"), soft("b")], { riskBudget: 1e-4 }).highestLog2).toBe(2);
  });
});
