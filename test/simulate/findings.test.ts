import { describe, expect, it } from "vitest";
import { simulatedFinding } from "../../src/cli/simulate.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";

// simulate lists a tensor as having a finding by the check's own at-risk thresholds (README, "Verdicts": 1% of the
// nonzero elements flushed, subnormal rounding noise above bfloat16's rounding noise or the format's own; any
// overflow or clipping), not for any single flushed element
describe("simulatedFinding", () => {
  const none = { format: "binary16" as const, flushed: 0, subnormal: 0, subnormalNoise: 0, overflowed: 0, saturated: 0, nonFinite: 0 };
  it("ignores shares below the check's at-risk thresholds", () => {
    // 0.01% flushed, 99% subnormal with noise 2e-6 of the squared norm: invented for the demo, below README's 1% and
    // bfloat16's rounding noise 2.75e-6 (test/risk/subnormal-noise.test.ts measures it)
    expect(simulatedFinding(none)).toBe(false);
    expect(simulatedFinding({ ...none, flushed: 1e-4 })).toBe(false);
    expect(simulatedFinding({ ...none, subnormal: 0.99, subnormalNoise: 2e-6 })).toBe(false);
    // e5m2's own rounding noise, 2.82e-3 (p = 3, OCP 8-bit spec), is its limit: 1e-3 passes there
    expect(simulatedFinding({ ...none, format: "e5m2", subnormal: 0.5, subnormalNoise: 1e-3 })).toBe(false);
  });
  it("counts shares at the thresholds and any overflow, clipping or non-finite value", () => {
    expect(simulatedFinding({ ...none, flushed: DEFAULT_THRESHOLDS.flushedAtRisk })).toBe(true);
    expect(simulatedFinding({ ...none, subnormal: 0.5, subnormalNoise: 3e-6 })).toBe(true);
    expect(simulatedFinding({ ...none, format: "e5m2", subnormal: 0.5, subnormalNoise: 3e-3 })).toBe(true);
    // 1e-9: any share above zero (invented for the demo; README counts any overflow or clipping)
    expect(simulatedFinding({ ...none, overflowed: 1e-9 })).toBe(true);
    expect(simulatedFinding({ ...none, saturated: 1e-9 })).toBe(true);
    expect(simulatedFinding({ ...none, nonFinite: 1e-9 })).toBe(true);
  });
});
