/**
 * Gaussian expectations of pointwise activations for the analytic rules: the moments themselves come from
 * src/numeric (`activationMoments`, memoised, SCIENCE.md §2.9); this file adds the finite-width κ heuristics.
 */
import { activationMoments } from "../../numeric/activations.js";
import { INV_SQRT_2PI } from "../../numeric/normal.js";
import type { ActivationName } from "../../spec/types.js";
import type { ActivationMoments } from "../types.js";

export { activationMoments };

/**
 * {@link activationMoments} for a caller that reads the moments before it asks for any others and keeps none of them
 * (the pointwise forward rule, on every activation layer of both passes): ReLU's are written into one object reused
 * from call to call, the others are activationMoments' own. The same numbers (test/ops/rule-records.test.ts holds them
 * to activationMoments' bit for bit).
 */
export function transientMoments(name: ActivationName, q: number, slope: number): ActivationMoments {
  if (name !== "relu" || !(q >= 0)) return activationMoments(name, q, slope);
  // half-normal moments: E[x·1(x>0)] = √(q/2π), E[x²·1] = q/2, E[x⁴·1] = 3q²/2; φ' = 1(x>0) (SCIENCE.md §2.9, as
  // src/numeric/activations.ts computeMoments)
  const out = TRANSIENT_MOMENTS;
  out.mean = Math.sqrt(q) * INV_SQRT_2PI;
  out.second = q / 2;
  out.fourth = 1.5 * q * q;
  out.derivativeMean = 0.5;
  out.derivativeSecond = 0.5;
  out.derivativeFourth = 0.5;
  out.zeroFraction = q === 0 ? 1 : 0.5;
  return out;
}
// (non-integer numbers from the start, so V8 keeps each field as a double from the first write)
const TRANSIENT_MOMENTS: { -readonly [K in keyof ActivationMoments]: ActivationMoments[K] } = {
  mean: 0.5,
  second: 0.5,
  fourth: 0.5,
  derivativeMean: 0.5,
  derivativeSecond: 0.5,
  derivativeFourth: 0.5,
  zeroFraction: 0.5,
};

// erf and Φ for the activation kernels and the comparison code: the shared implementations of src/numeric
export { erf, normalCdf } from "../../numeric/normal.js";

/**
 * Finite-width κ heuristics at input variance q (SCIENCE.md §2.6): forward κ_f = E[φ⁴]/E[φ²]² − 1,
 * backward κ_b = 3E[φ'⁴]/E[φ'²]² − 1. ReLU gives 5 and 5; a linear map 2 and 2.
 */
export function activationKappa(moments: ActivationMoments): { forward: number; backward: number } {
  return { forward: forwardKappa(moments), backward: backwardKappa(moments) };
}

/** κ_f of {@link activationKappa} alone (no object for the pair, on every activation of both passes). */
export function forwardKappa(moments: ActivationMoments): number {
  return moments.second > 0 ? moments.fourth / (moments.second * moments.second) - 1 : 2;
}

/** κ_b of {@link activationKappa} alone. */
export function backwardKappa(moments: ActivationMoments): number {
  return moments.derivativeSecond > 0 ? (3 * moments.derivativeFourth) / (moments.derivativeSecond * moments.derivativeSecond) - 1 : 2;
}
