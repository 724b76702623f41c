/**
 * Mean-field signal propagation at initialisation (Poole et al. 2016, "Exponential expressivity in deep
 * neural networks through transient chaos"; Schoenholz et al. 2017, "Deep information propagation";
 * SCIENCE.md §2.1 and §2.4): the length map, the gradient factor χ, the fixed point q*, and the
 * critical weight variance ("edge of chaos") for a given bias variance.
 */
import type { ActivationName } from "../spec/types.js";
import { activationMoments, DEFAULT_LEAKY_SLOPE } from "./activations.js";
import { findRootBracketed } from "./roots.js";

/**
 * Length map q ↦ σw²·E_q[φ²] + σb²: the pre-activation variance of the next layer (SCIENCE.md §2.1,
 * Poole et al. 2016). `weightVariance` is σw² = fan_in·Var[W]; `biasVariance` is σb².
 */
export function meanFieldLengthMap(
  name: ActivationName,
  q: number,
  weightVariance: number,
  biasVariance: number,
  slope: number = DEFAULT_LEAKY_SLOPE,
): number {
  return weightVariance * activationMoments(name, q, slope).second + biasVariance;
}

/**
 * χ(q) = σw²·E_q[φ'²]: the per-layer factor of the gradient's second moment at equal widths
 * (SCIENCE.md §2.1; Schoenholz et al. 2017). χ(q*) < 1 is the ordered phase, > 1 the chaotic one.
 */
export function meanFieldChi(name: ActivationName, q: number, weightVariance: number, slope: number = DEFAULT_LEAKY_SLOPE): number {
  return weightVariance * activationMoments(name, q, slope).derivativeSecond;
}

/**
 * Depth scale −1/ln χ over which the gradient's second moment changes by a factor e (Schoenholz et al.
 * 2017, ξ_∇; SCIENCE.md §2.4). Positive for χ < 1 (shrinks), negative for χ > 1 (grows), ∞ at χ = 1.
 */
export function meanFieldDepthScale(chi: number): number {
  return -1 / Math.log(chi);
}

/**
 * The fixed point q* = σw²·E_{q*}[φ²] + σb² that the length map reaches from `start` (default 1): the
 * root of L(q) − q bracketed on the side the iteration moves to. Returns 0 when the variance collapses
 * (e.g. tanh with σb² = 0, σw² ≤ 1) and Infinity when it grows without bound (e.g. ReLU with σw² > 2).
 * Assumes E_q[φ²] increases with q, true for every activation here.
 */
export function meanFieldFixedPoint(
  name: ActivationName,
  weightVariance: number,
  biasVariance: number,
  slope: number = DEFAULT_LEAKY_SLOPE,
  start = 1,
): number {
  if (!(weightVariance >= 0) || !(biasVariance >= 0) || !(start > 0)) return NaN;
  const g = (q: number): number => meanFieldLengthMap(name, q, weightVariance, biasVariance, slope) - q;
  const g0 = g(start);
  if (g0 === 0) return start;
  if (g0 > 0) {
    let lo = start;
    let hi = 2 * start;
    for (let i = 0; i < 1100; i++) {
      if (g(hi) <= 0) return findRootBracketed(g, lo, hi);
      lo = hi;
      hi *= 2;
      if (!Number.isFinite(hi)) break;
    }
    return Infinity;
  }
  let hi = start;
  let lo = start / 2;
  // below 1e-280 the variance has collapsed for any practical purpose (and rounding decides the sign)
  while (lo > 1e-280) {
    if (g(lo) > 0) return findRootBracketed(g, lo, hi);
    hi = lo;
    lo /= 2;
  }
  return 0;
}

/** A point on the critical line χ(q*) = 1. */
export interface CriticalPoint {
  /** σw² on the critical line */
  readonly weightVariance: number;
  /** q* there; Infinity when σb² > 0 and φ is positively homogeneous (no finite fixed point), NaN when every q is fixed */
  readonly fixedPoint: number;
  /** χ(q*) there, 1 up to the solver tolerance */
  readonly chi: number;
}

/**
 * The critical σw² at bias variance σb² ("edge of chaos", Schoenholz et al. 2017): the σw² for which
 * χ(q*) = 1. For relu, leaky-relu and identity, E[φ'²] does not depend on q, so σw² = 1/E[φ'²] (ReLU: 2,
 * He initialisation, SCIENCE.md §2.4); there q* is NaN (every q is fixed) at σb² = 0 and Infinity for
 * σb² > 0. For the others, σw² is found by bracketing χ(q*(σw²)) − 1 (tanh at σb² = 0.05 gives 1.76095,
 * q* = 0.57005; SCIENCE.md §2.4 table). NaN when no critical point is found below σw² = 2^40.
 */
export function criticalWeightVariance(
  name: ActivationName,
  biasVariance: number,
  slope: number = DEFAULT_LEAKY_SLOPE,
): CriticalPoint {
  if (!(biasVariance >= 0)) return { weightVariance: NaN, fixedPoint: NaN, chi: NaN };
  if (name === "relu" || name === "leaky-relu" || name === "identity") {
    const weightVariance = 1 / activationMoments(name, 1, slope).derivativeSecond;
    return { weightVariance, fixedPoint: biasVariance === 0 ? NaN : Infinity, chi: 1 };
  }
  const excess = (sw2: number): number => {
    const q = meanFieldFixedPoint(name, sw2, biasVariance, slope);
    if (!Number.isFinite(q)) return q === Infinity ? 1 : NaN;
    return meanFieldChi(name, q, sw2, slope) - 1;
  };
  let lo = 0.5;
  let hi = 1;
  for (let i = 0; i < 40 && excess(lo) > 0; i++) lo /= 2;
  for (let i = 0; i < 40 && !(excess(hi) > 0); i++) {
    lo = hi;
    hi *= 2;
  }
  const weightVariance = findRootBracketed(excess, lo, hi, 1e-13);
  if (Number.isNaN(weightVariance)) return { weightVariance: NaN, fixedPoint: NaN, chi: NaN };
  const fixedPoint = meanFieldFixedPoint(name, weightVariance, biasVariance, slope);
  return { weightVariance, fixedPoint, chi: meanFieldChi(name, fixedPoint, weightVariance, slope) };
}
