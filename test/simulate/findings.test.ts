import { describe, expect, it } from "vitest";
import { simulatedFinding } from "../../src/cli/simulate.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";

// simulate lists a tensor as having a finding by the check's own at-risk thresholds (README, "Verdicts": 1% of the
// nonzero elements flushed, 25% subnormal; any overflow or clipping), not for any single flushed element
describe("simulatedFinding", () => {
  const none = { format: "binary16" as const, flushed: 0, subnormal: 0, overflowed: 0, saturated: 0, nonFinite: 0 };
  it("ignores shares below the check's at-risk thresholds", () => {
    // 0.01% flushed and 20% subnormal: invented for the demo, below README's 1% and 25%
    expect(simulatedFinding(none)).toBe(false);
    expect(simulatedFinding({ ...none, flushed: 1e-4 })).toBe(false);
    expect(simulatedFinding({ ...none, subnormal: 0.2 })).toBe(false);
  });
  it("counts shares at the thresholds and any overflow, clipping or non-finite value", () => {
    expect(simulatedFinding({ ...none, flushed: DEFAULT_THRESHOLDS.flushedAtRisk })).toBe(true);
    expect(simulatedFinding({ ...none, subnormal: DEFAULT_THRESHOLDS.subnormalAtRisk })).toBe(true);
    // 1e-9: any share above zero (invented for the demo; README counts any overflow or clipping)
    expect(simulatedFinding({ ...none, overflowed: 1e-9 })).toBe(true);
    expect(simulatedFinding({ ...none, saturated: 1e-9 })).toBe(true);
    expect(simulatedFinding({ ...none, nonFinite: 1e-9 })).toBe(true);
  });
});
