/**
 * Gaussian expectations of pointwise activations for the analytic rules: the moments themselves come from
 * src/numeric (`activationMoments`, memoised, SCIENCE.md §2.9); this file adds the finite-width κ heuristics.
 */
import type { ActivationMoments } from "../types.js";

export { activationMoments } from "../../numeric/activations.js";

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
