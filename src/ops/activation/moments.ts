/**
 * Gaussian expectations of pointwise activations for the analytic rules: the moments themselves come from
 * src/numeric (`activationMoments`, memoised, SCIENCE.md §2.9); this file adds the finite-width κ heuristics and keeps
 * the erf and normal cdf the activation kernels and the comparison code import from here.
 */
import type { ActivationMoments } from "../types.js";

export { activationMoments } from "../../numeric/activations.js";

const SQRT2 = Math.SQRT2;

/** erf(x) to about 1e-14: Maclaurin series below 3, Lentz continued fraction for erfc above. */
export function erf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  const ax = Math.abs(x);
  if (ax < 3) {
    // erf x = 2/√π Σ (−1)^n x^(2n+1) / (n! (2n+1))  (Abramowitz & Stegun 7.1.5)
    let term = ax;
    let sum = ax;
    const x2 = ax * ax;
    for (let n = 1; n < 200; n++) {
      term *= -x2 / n;
      const add = term / (2 * n + 1);
      sum += add;
      if (Math.abs(add) < 1e-17 * Math.abs(sum)) break;
    }
    const value = (2 / Math.sqrt(Math.PI)) * sum;
    return x < 0 ? -value : value;
  }
  const value = 1 - erfcLarge(ax);
  return x < 0 ? -value : value;
}

/** erfc(x) for x ≥ 3 by the continued fraction erfc x = e^(−x²)/√π · 1/(x + 1/2/(x + 1/(x + 3/2/(x + ...)))) (A&S 7.1.14). */
function erfcLarge(x: number): number {
  // modified Lentz on b0 = x, a_n = n/2, b_n = x
  const tiny = 1e-300;
  let f = x;
  let c = x;
  let d = 0;
  for (let n = 1; n < 300; n++) {
    const a = n / 2;
    d = x + a * d;
    d = d === 0 ? tiny : d;
    c = x + a / c;
    c = c === 0 ? tiny : c;
    d = 1 / d;
    const delta = c * d;
    f *= delta;
    if (Math.abs(delta - 1) < 1e-16) break;
  }
  return Math.exp(-x * x) / Math.sqrt(Math.PI) / f;
}

/** Standard normal cdf Φ(x). */
export function normalCdf(x: number): number {
  return x < -3 * SQRT2 ? 0.5 * erfcLarge(-x / SQRT2) : 0.5 * (1 + erf(x / SQRT2));
}

/**
 * Finite-width κ heuristics at input variance q (SCIENCE.md §2.6): forward κ_f = E[φ⁴]/E[φ²]² − 1,
 * backward κ_b = 3E[φ'⁴]/E[φ'²]² − 1. ReLU gives 5 and 5; a linear map 2 and 2.
 */
export function activationKappa(moments: ActivationMoments): { forward: number; backward: number } {
  const forward = moments.second > 0 ? moments.fourth / (moments.second * moments.second) - 1 : 2;
  const backward = moments.derivativeSecond > 0 ? (3 * moments.derivativeFourth) / (moments.derivativeSecond * moments.derivativeSecond) - 1 : 2;
  return { forward, backward };
}
