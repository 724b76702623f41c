/**
 * Finite-width spread of squared norms (SCIENCE.md §2.6): a per-layer relative variance κ/n and the
 * log-normal working model ln(‖h^L‖²/‖h^0‖²) ≈ N(−κβ/2, κβ) with β = Σ 1/width (Hanin 2018; Hanin &
 * Nica 2019 for the log-normal form). The model is a heuristic outside positively homogeneous φ.
 */
import type { ActivationName } from "../spec/types.js";
import { activationMoments, DEFAULT_LEAKY_SLOPE } from "./activations.js";
import { normalQuantile } from "./normal.js";
import { halfLineGaussianRule } from "./quadrature.js";

/** The spread constants of one activation at one pre-activation variance. */
export interface SpreadConstants {
  /** κ_forward = E[φ⁴]/E[φ²]² − 1 */
  readonly forward: number;
  /** κ_backward = 3·E[φ'⁴]/E[φ'²]² − 1 */
  readonly backward: number;
}

/**
 * κ_forward = E_q[φ⁴]/E_q[φ²]² − 1 and κ_backward = 3·E_q[φ'⁴]/E_q[φ'²]² − 1 (SCIENCE.md §2.6, [X]
 * heuristic): one layer of width n adds relative variance κ/n to a squared norm. ReLU gives 5 and 5,
 * identity 2 and 2, leaky-relu 6(1+a⁴)/(1+a²)² − 1 for both. The 3 in κ_backward is E[w⁴]/E[w²]² of the
 * Gaussian weight that multiplies φ' on the way back. q defaults to 1. Throws RangeError for softmax.
 */
export function spreadConstants(name: ActivationName, q = 1, slope: number = DEFAULT_LEAKY_SLOPE): SpreadConstants {
  const m = activationMoments(name, q, slope);
  return {
    forward: m.fourth / (m.second * m.second) - 1,
    backward: (3 * m.derivativeFourth) / (m.derivativeSecond * m.derivativeSecond) - 1,
  };
}

/** β = Σ_j 1/n_j over the hidden widths traversed (Hanin 2018). NaN if any width is not positive. */
export function reciprocalWidthSum(widths: Iterable<number>): number {
  let beta = 0;
  for (const w of widths) {
    if (!(w > 0)) return NaN;
    beta += 1 / w;
  }
  return beta;
}

/** Mean and variance of the log of a squared-norm ratio under the log-normal model. */
export interface LogNormalSpread {
  /** E[ln ratio] = −κβ/2, which keeps E[ratio] ≈ 1 */
  readonly logMean: number;
  /** Var[ln ratio] = κβ */
  readonly logVariance: number;
}

/**
 * ln(‖·‖²_out/‖·‖²_in) ≈ N(−κβ/2, κβ) (SCIENCE.md §2.6 working model; check #27 gives 5/n per ReLU layer).
 * κ ≥ 0 and β ≥ 0; NaN otherwise.
 */
export function squaredNormLogSpread(kappa: number, beta: number): LogNormalSpread {
  if (!(kappa >= 0) || !(beta >= 0)) return { logMean: NaN, logVariance: NaN };
  const v = kappa * beta;
  return { logMean: -v / 2, logVariance: v };
}

/**
 * The p-quantile of the squared-norm ratio ‖·‖²/E‖·‖² under the log-normal model:
 * exp(−κβ/2 + √(κβ)·Φ⁻¹(p)). For ReLU (κ = 5) and β = 0.1 the 0.1% and 99.9% quantiles are 0.0876 and
 * 6.92 (SCIENCE.md §2.6 tail factors). NaN for p outside [0, 1] or negative κ, β.
 */
export function squaredNormRatioQuantile(kappa: number, beta: number, p: number): number {
  const { logMean, logVariance } = squaredNormLogSpread(kappa, beta);
  if (!(p >= 0 && p <= 1)) return NaN;
  if (logVariance === 0) return Math.exp(logMean);
  return Math.exp(logMean + Math.sqrt(logVariance) * normalQuantile(p));
}

/** Terms of {@link pairCovariance}'s series kept; the rest of the series is put on c^(PAIR_ORDER + 1). */
const PAIR_ORDER = 12;

/**
 * g(c) = Cov(f(u), f(v))/E[f(u)]² for u, v ~ N(0, q) of correlation c, as the coefficients b_k of g(c) = Σ_{k≥1} b_k·c^k:
 * Mehler's formula (Mehler 1866) gives E[f(u)f(v)] = Σ_k a_k²·c^k/k! with a_k = E[f(√q·z)·He_k(z)], the probabilists'
 * Hermite polynomials. The last coefficient holds the remainder of the series, so that g(1) = Var f/E[f]² exactly.
 * f may have a kink at 0 (the split rule of gaussianExpectationSplit). Empty where E[f] is 0.
 */
export function pairCovariance(f: (x: number) => number, q: number): number[] {
  const { nodes, weights } = halfLineGaussianRule(q);
  const s = Math.sqrt(q);
  const a = new Array<number>(PAIR_ORDER + 1).fill(0);
  let second = 0;
  const he = new Array<number>(PAIR_ORDER + 1).fill(0);
  for (let i = 0; i < nodes.length; i++) {
    const z = nodes[i] as number;
    const w = weights[i] as number;
    const plus = f(s * z);
    const minus = f(-s * z);
    second += w * (plus * plus + minus * minus);
    he[0] = 1;
    he[1] = z;
    for (let k = 1; k < PAIR_ORDER; k++) he[k + 1] = z * (he[k] as number) - k * (he[k - 1] as number);
    // He_k(−z) = (−1)^k·He_k(z)
    for (let k = 0; k <= PAIR_ORDER; k++) a[k] = (a[k] as number) + w * (he[k] as number) * (k % 2 === 0 ? plus + minus : plus - minus);
  }
  const mean = a[0] as number;
  if (!(mean * mean > 0)) return [];
  const b: number[] = [];
  let factorial = 1;
  let sum = 0;
  for (let k = 1; k <= PAIR_ORDER; k++) {
    factorial *= k;
    const term = ((a[k] as number) * (a[k] as number)) / factorial / (mean * mean);
    b.push(term);
    sum += term;
  }
  b.push(Math.max(second / (mean * mean) - 1 - sum, 0));
  return b;
}

/** g(c) = Σ_k b_k·c^k of {@link pairCovariance}'s coefficients. */
export function pairCovarianceAt(b: readonly number[], c: number): number {
  let g = 0;
  for (let k = b.length; k >= 1; k--) g = (g + (b[k - 1] as number)) * c;
  return g;
}
