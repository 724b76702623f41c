import { describe, expect, it } from "vitest";
import { getFormat, roundTo } from "../../src/formats/index.js";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { stochasticStepsToAverage, swampedShare } from "../../src/scale/optimizer.js";

const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });
/** every update has magnitude `size` */
const updatesOf = (size: number) => (t: number) => (size < t ? 1 : 0);

describe("swampedShare (update lost against half an ulp of its weight)", () => {
  const binary16 = getFormat("binary16");
  const bfloat16 = getFormat("bfloat16");
  const binary32 = getFormat("binary32");

  // Micikevicius et al. 2018 §3.1: an update vanishes when the weight is 2048 = 2^11 times larger;
  // the exact RNE bound for a weight of 1.0 in binary16 is half an ulp, 2^-11 (SCIENCE.md §1.1 [X]).
  it("a binary16 weight of 1.0 loses updates below 2^-11 and keeps those above", () => {
    expect(swampedShare(constant(1), updatesOf(2 ** -11 * 0.99), binary16)).toBe(1);
    expect(swampedShare(constant(1), updatesOf(2 ** -11 * 1.01), binary16)).toBe(0);
    // cross-check with the format model itself: 1 + Δ rounds back to 1 exactly when Δ < 2^-11
    expect(roundTo(binary16, 1 + 2 ** -11 * 0.99)).toBe(1);
    expect(roundTo(binary16, 1 + 2 ** -11 * 1.01)).toBeGreaterThan(1);
  });

  // common practice: bfloat16 keeps 8 significant bits, so a weight of 1.0 loses updates below 2^-8
  it("a bfloat16 weight of 1.0 loses updates below 2^-8", () => {
    expect(swampedShare(constant(1), updatesOf(2 ** -8 * 0.99), bfloat16)).toBe(1);
    expect(swampedShare(constant(1), updatesOf(2 ** -8 * 1.01), bfloat16)).toBe(0);
  });

  it("a binary32 master copy keeps updates down to 2^-24 of the weight", () => {
    expect(swampedShare(constant(1), updatesOf(2 ** -20), binary32)).toBe(0);
    expect(swampedShare(constant(1), updatesOf(2 ** -25), binary32)).toBe(1);
  });

  // SCIENCE.md §3.3 [X]: |w| = 0.02 with lr = 1e-5 gives a ratio of 5e-4, lost in bfloat16
  it("a bfloat16 weight of 0.02 loses an update of 1e-5", () => {
    expect(swampedShare(constant(0.02), updatesOf(1e-5), bfloat16)).toBe(1);
  });

  it("for Gaussian weights, loses the share of weights whose half ulp exceeds the update", () => {
    const weights: MagnitudeProfile = { elements: 1e6, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0 };
    // update 2^-12: lost where 2^(e-11) > 2^-12, i.e. e ≥ 0: |w| ≥ 1, P(|Z| ≥ 1) = 0.3173105 (SCIENCE.md §4)
    expect(swampedShare(weights, updatesOf(2 ** -12 * 1.0000001), binary16)).toBeCloseTo(0.3173105, 5);
  });
});

describe("stochasticStepsToAverage", () => {
  it("counts the steps for binomial rounding noise to fall below 10% of the summed update", () => {
    const binary16 = getFormat("binary16");
    // weight 1.0 in binary16: ulp 2^-10; update 2^-14 gives q = 1/16: N = 100·(15/16)/(1/16) = 1500
    expect(stochasticStepsToAverage(2 ** -14, 1, binary16)).toBe(1500);
    expect(stochasticStepsToAverage(2 ** -9, 1, binary16)).toBe(1);
  });
});
