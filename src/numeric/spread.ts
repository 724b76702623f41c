/**
 * Finite-width spread of squared norms (SCIENCE.md §2.6): a per-layer relative variance κ/n and the
 * log-normal working model ln(‖h^L‖²/‖h^0‖²) ≈ N(−κβ/2, κβ) with β = Σ 1/width (Hanin 2018; Hanin &
 * Nica 2019 for the log-normal form). The model is a heuristic outside positively homogeneous φ.
 */
import type { ActivationName } from "../spec/types.js";
import { activationMoments, DEFAULT_LEAKY_SLOPE } from "./activations.js";
import { normalQuantile } from "./normal.js";

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
