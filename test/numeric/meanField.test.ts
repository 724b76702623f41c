import { describe, expect, it } from "vitest";
import {
  criticalWeightVariance,
  findRootBracketed,
  meanFieldChi,
  meanFieldDepthScale,
  meanFieldFixedPoint,
  meanFieldLengthMap,
} from "../../src/numeric/index.js";

describe("length map and χ (Poole et al. 2016; Schoenholz et al. 2017; SCIENCE.md §2.1)", () => {
  it("ReLU: q ↦ σw²·q/2 + σb² and χ = σw²/2 (SCIENCE.md §2.4)", () => {
    expect(meanFieldLengthMap("relu", 3, 2, 0.1)).toBeCloseTo(3.1, 14);
    expect(meanFieldChi("relu", 3, 2)).toBe(1);
  });
  it("check #18: ReLU with Glorot on square layers (σw² = 1) halves q each layer: 2^-30 after 30 layers", () => {
    let q = 1;
    for (let l = 0; l < 30; l++) q = meanFieldLengthMap("relu", q, 1, 0);
    expect(Math.abs(q / 9.313225746154785e-10 - 1)).toBeLessThan(1e-12);
  });
  it("check #19: He init (σw² = 2, σb² = 0) keeps q fixed", () => {
    expect(meanFieldLengthMap("relu", 0.37, 2, 0)).toBeCloseTo(0.37, 15);
  });
});

describe("criticalWeightVariance (SCIENCE.md §2.4)", () => {
  it("check #25: tanh at σb² = 0.05 → σw² ≈ 1.76095, q* ≈ 0.57005 (1e-4)", () => {
    const c = criticalWeightVariance("tanh", 0.05);
    expect(Math.abs(c.weightVariance - 1.76095)).toBeLessThan(1e-4);
    expect(Math.abs(c.fixedPoint - 0.57005)).toBeLessThan(1e-4);
    expect(Math.abs(c.chi - 1)).toBeLessThan(1e-10);
  });
  it("check #26: ReLU critical point σw² = 2 exactly at σb² = 0 (every q fixed → NaN); no finite q* for σb² > 0", () => {
    const c = criticalWeightVariance("relu", 0);
    expect(c.weightVariance).toBe(2);
    expect(c.fixedPoint).toBeNaN();
    expect(criticalWeightVariance("relu", 0.1).fixedPoint).toBe(Infinity);
  });
  it.each([
    [0.0001, 1.086, 0.0457],
    [0.01, 1.4242, 0.2733],
    [0.09, 1.9477, 0.7635],
    [0.1, 1.9861, 0.8058],
    [0.2, 2.2852, 1.1645],
    [0.5, 2.8432, 1.971],
    [1, 3.4432, 3.0364],
    [2, 4.2664, 4.8306],
  ])("tanh critical line at σb² = %d: σw² = %d, q* = %d (table's 4 decimals)", (b, w, q) => {
    const c = criticalWeightVariance("tanh", b);
    expect(Math.abs(c.weightVariance - w)).toBeLessThan(6e-5);
    expect(Math.abs(c.fixedPoint - q)).toBeLessThan(6e-5);
  });
  it("leaky-relu: σw² = 2/(1 + a²) (He et al. 2015 PReLU form, from memory in SCIENCE.md §2.3; follows from E[φ'²] = (1+a²)/2)", () => {
    expect(criticalWeightVariance("leaky-relu", 0, 0.2).weightVariance).toBeCloseTo(2 / 1.04, 14);
  });
});

describe("off-critical tanh at σb² = 0.05 (SCIENCE.md §2.4 [X])", () => {
  it.each([
    [1.0, 0.19359, 0.75903, 3.627],
    [1.5, 0.41804, 0.93864, 15.79],
  ])("σw² = %d: q* = %d, χ1 = %d, depth scale %d", (w, q, chi, xi) => {
    const qs = meanFieldFixedPoint("tanh", w, 0.05);
    expect(Math.abs(qs - q)).toBeLessThan(1e-5);
    const c = meanFieldChi("tanh", qs, w);
    expect(Math.abs(c - chi)).toBeLessThan(1e-5);
    expect(Math.abs(meanFieldDepthScale(c) / xi - 1)).toBeLessThan(1e-3);
  });
  it("σw² = 2.5: χ1 = 1.13352, growing by e every 7.98 layers", () => {
    const w = 2.5;
    const c = meanFieldChi("tanh", meanFieldFixedPoint("tanh", w, 0.05), w);
    expect(Math.abs(c - 1.13352)).toBeLessThan(1e-5);
    expect(Math.abs(-meanFieldDepthScale(c) - 7.98)).toBeLessThan(0.005);
  });
  it("collapse and blow-up: tanh with σb² = 0, σw² = 0.9 → 0; ReLU with σw² = 3 → ∞; bad input → NaN", () => {
    expect(meanFieldFixedPoint("tanh", 0.9, 0)).toBe(0);
    expect(meanFieldFixedPoint("relu", 3, 0)).toBe(Infinity);
    expect(meanFieldFixedPoint("tanh", -1, 0)).toBeNaN();
  });
});

describe("findRootBracketed", () => {
  it("finds √2 and ln 3 to 1e-15 relative; NaN without a sign change", () => {
    expect(Math.abs(findRootBracketed((x) => x * x - 2, 0, 2) - Math.SQRT2)).toBeLessThan(3e-16);
    expect(Math.abs(findRootBracketed((x) => Math.exp(x) - 3, -5, 5) - Math.log(3))).toBeLessThan(3e-16);
    expect(findRootBracketed((x) => x * x + 1, -1, 1)).toBeNaN();
  });
});
