/**
 * The loss value and the gradient it seeds at the network's output, at the start and at the end of the horizon.
 *
 * Every quantity here is predicted at the median draw (initialisation and data), then given the draw-to-draw
 * spread it inherits from the network's output: the output's squared norm is log-normal over draws with
 * ln-variance V (SCIENCE.md §2.6), so a seed f(output scale) has ln-variance (d ln f/d ln s²)²·V (the delta method,
 * with the elasticity taken numerically). The propagated second moment is the mean over draws, median·e^(V/2).
 *
 * Softmax cross-entropy (SCIENCE.md §2.1 output seed; DESIGN.md §3): ∂L/∂logit_j = (p_j − y_j)/N with N = batch ×
 * positions under mean reduction (1 under sum reduction). At initialisation the labels are independent of the
 * logits, which are N(0, s²) across classes, so every class has the same E[p²] and
 * E[(1 − p_y)²] = 1 − 2/C + E[p²]; E[p²] and the loss E[ln Σ e^z] are the exact Gaussian expectations of
 * src/numeric/softmax.ts (Laplace-transform quadrature, Cressie et al. 1981). Their log-normal-sum approximation
 * e^(s²)/C² overstates E[p²] by 2.7× at s² = 2 with 10 classes. The part two samples share, E[p_n p_m] − 1/C² for
 * logits correlated by c across samples, is the same quadrature over the common part of the logits.
 *
 * End of the horizon, derived here: a trained model's typical right-class probability is p_y ≈ e^(−finalLoss)
 * (the loss is the mean of −ln p_y), so the right-class gradient shrinks from (1 − 1/C) to (1 − e^(−finalLoss)),
 * and the wrong classes share the remaining mass 1 − p_y as a softmax over C − 1 classes of the end-of-horizon
 * logit variance: E[p_j²] = (1 − p_y)²·E[q²] with q that softmax.
 *
 * Mean squared error (mean over every output element, as common implementations reduce it): ∂L/∂y = 2(y − t)/M
 * for M = batch × output elements per sample. For targets independent of the initial outputs the loss of one draw
 * is E[(y − t)²] = E[y²] + targetScale², increasing in the output's squared norm, so its median over draws is the
 * output's median second moment + targetScale² (the mean over draws, E[y²] + targetScale², is larger by the
 * log-normal factor e^(V/2) on the first term and is not what a typical run sees). At the end the residual's rms is
 * √finalLoss (the loss is its mean square).
 */
import type { LossSpec } from "../spec/types.js";
import type { Gradient, Signal } from "../ops/types.js";
import { gaussianSoftmaxMoments, gaussianSoftmaxPairMoment } from "../numeric/softmax.js";
import { fmt } from "../ops/common.js";
import { gaussianExpectation } from "../numeric/quadrature.js";

/** The loss value and the gradient tensors it seeds. */
export interface LossSeed {
  /** the loss value (one number per step on one worker) at the median draw */
  value: number;
  /** variance over draws of ln(value) */
  valueLogVar: number;
  /** what one element of the summed loss contributes, for the loss-value hazard */
  termValue: number;
  terms: number;
  /** the gradient at the output that propagates backward (all elements) */
  gradient: Gradient;
  /** the tensors to report: the bulk (wrong classes, or every element for MSE) and, for cross-entropy, the right class */
  bulk: { gradient: Gradient; elements: number };
  target?: { gradient: Gradient; elements: number };
  /** the seed's factor in words, for the ledger */
  rule: string;
  source: string;
}

/**
 * Seed the backward pass.
 * @param output the forward moments of the last layer's output (the logits, or the regression outputs)
 * @param positions positions per sample of the output (1 for a plain vector)
 * @param width output features (classes for cross-entropy)
 * @param scale the factor every gradient carries: loss scale ÷ accumulation steps
 * @param finalLoss the expected loss at the end of the horizon, when the phase is "end"
 */
export function lossSeed(
  loss: LossSpec,
  output: Signal,
  batch: number,
  positions: number,
  width: number,
  scale: number,
  phase: "start" | "end",
  finalLoss: number | undefined,
): LossSeed {
  if (loss.kind === "cross-entropy") {
    const C = loss.classes;
    const N = batch * positions;
    const divisor = loss.reduction === "mean" ? N : 1;
    const s2Mean = Math.max(output.q - output.mean * output.mean, 0);
    const V = Math.max(output.logVar, 0);
    const s2 = medianOf(s2Mean, V);
    const endLoss = phase === "end" ? finalLoss : undefined;
    const end = endLoss !== undefined;
    const pRight = endLoss !== undefined ? Math.exp(-endLoss) : 1 / C;
    // 1 − e^(−L) by expm1: a final loss below 2^-53 would round 1 − p to 0 and leave no gradient
    const rightMagnitude = endLoss !== undefined ? -Math.expm1(-endLoss) : 1 - pRight;
    // E[p_j²] for a wrong class and E[(1 − p_y)²], as functions of the logit variance
    const wrongSecond = (v: number): number =>
      C < 2 ? 0 : end ? rightMagnitude * rightMagnitude * gaussianSoftmaxMoments(v, C - 1).second : gaussianSoftmaxMoments(v, C).second;
    const rightSecond = (v: number): number => (end ? rightMagnitude * rightMagnitude : 1 - 2 / C + gaussianSoftmaxMoments(v, C).second);
    const totalSecond = (v: number): number => ((C - 1) * wrongSecond(v) + rightSecond(v)) / C;
    const k = scale / divisor;
    const wrong = seedMoment(wrongSecond, s2, V, k * k);
    const right = seedMoment(rightSecond, s2, V, k * k);
    const total = seedMoment(totalSecond, s2, V, k * k);
    const perTerm = endLoss !== undefined ? endLoss : gaussianSoftmaxMoments(s2, C).logSumExp;
    const valueLogVar = end ? 0 : logVarOf((v) => gaussianSoftmaxMoments(v, C).logSumExp, s2, V);
    // two samples' logits correlated by c share part of p; with labels independent across samples,
    // E[δ_n δ_m] per element = E[p_n p_m] − 2E[p]/C + 1/C² = E[p_n p_m] − 1/C² (derived), E[p_n p_m] exact
    const c = s2Mean > 0 ? Math.min(Math.max(((output.shared ?? output.mean * output.mean) - output.mean * output.mean) / s2Mean, 0), 1) : 0;
    const sharedQ = Math.max(gaussianSoftmaxPairMoment(s2, c, C) - 1 / (C * C), 0) * k * k * Math.exp(total.logVar / 2);
    const gradient: Gradient = { q: total.q, zeroFraction: 0, shape: "gaussian", logVar: total.logVar, shared: Math.min(sharedQ, total.q) };
    // the shared part follows the logits' shared part (of the output's spread, Signal.sharedLogVar) through the pair
    // moment, the logit variance held: the delta method in c (own algebra)
    if (c > 0 && sharedQ > 0) gradient.sharedLogVar = logVarOf((x) => gaussianSoftmaxPairMoment(s2, Math.min(x, 1), C) - 1 / (C * C), c, output.sharedLogVar ?? output.logVar);
    // two positions of one sample: the same pair moment at the logits' position correlation, labels independent across
    // positions too (own algebra, as for two samples); left unset it would be the samples' c (a tagger's inputs share
    // 0.75 across the positions of one sequence and 0.03 across sequences: its gradient's position correlation was 27×
    // too small, measured Dec 2026)
    if (positions > 1 && output.positionCorrelation !== undefined && s2Mean > 0 && total.q > 0) {
      const cPosition = Math.min(Math.max((output.q * output.positionCorrelation - output.mean * output.mean) / s2Mean, 0), 1);
      const positionQ = Math.max(gaussianSoftmaxPairMoment(s2, cPosition, C) - 1 / (C * C), 0) * k * k * Math.exp(total.logVar / 2);
      gradient.positionCorrelation = Math.min(positionQ / total.q, 1);
    }
    if (!end && C >= 2) {
      // ∂(p − y)/∂z = diag(p) − p pᵀ; its mean over Gaussian logits has E[p_j − p_j²] = 1/C − E[p²] on the diagonal and,
      // as every row sums to 0, −(1/C − E[p²])/(C − 1) off it (derived)
      const h = k * (1 / C - gaussianSoftmaxMoments(s2, C).second);
      gradient.curvature = { diagonal: h, diagonalSquare: h * h, rowSquares: (h * h * C) / (C - 1), seed: true };
      // E[Σ_j z_j·(p_j − y_j)] = s²·Σ_j E[∂p_j/∂z_j] = s²·C·h/k per term (Stein's lemma; labels independent of the logits),
      // at a draw of logit variance v. A channel's share is read squared, as its mean square over draws: the root of
      // E[(v·(1/C − E[p²]))²] over v log-normal about the median (ln-variance V), by Gauss–Hermite quadrature
      // (Golub & Welsch 1969), not the median's square (0.38 of a Monte Carlo's mean at V = 1.26, 4 classes)
      const eulerOf = (u: number): number => {
        const v = s2 * Math.exp(u);
        const e = v * (1 / C - gaussianSoftmaxMoments(v, C).second);
        return e * e;
      };
      gradient.eulerSum = V > 0 ? N * C * k * Math.sqrt(gaussianExpectation(eulerOf, V, EULER_NODES)) : N * s2 * C * h;
    }
    return {
      value: loss.reduction === "mean" ? perTerm : perTerm * N,
      valueLogVar,
      termValue: perTerm,
      terms: N,
      gradient,
      bulk: {
        gradient: {
          q: wrong.q,
          zeroFraction: 0,
          shape: "log-normal",
          elementLog2Spread: Math.sqrt(s2) / Math.LN2,
          bound: Math.abs(k),
          logVar: wrong.logVar,
        },
        elements: N * (C - 1),
      },
      target: { gradient: { q: right.q, zeroFraction: 0, shape: "bounded", bound: Math.abs(k), logVar: right.logVar }, elements: N },
      rule: `softmax cross-entropy over ${C} classes, ${loss.reduction} over ${N}, logit variance ${fmt(s2)} at the median draw: right class rms(1 − p)/${divisor} = ${fmt(Math.sqrt(rightSecond(s2)) / divisor)}, wrong classes rms(p)/${divisor} = ${fmt(Math.sqrt(wrongSecond(s2)) / divisor)}`,
      source: "softmax cross-entropy gradient p − y (common practice); Gaussian softmax moments by Laplace-transform quadrature (Cressie et al. 1981)",
    };
  }
  const M = batch * positions * width;
  const divisor = loss.reduction === "mean" ? M : 1;
  const V = Math.max(output.logVar, 0);
  const endLoss = phase === "end" ? finalLoss : undefined;
  const target2 = loss.targetScale * loss.targetScale;
  // the residual's mean square as a function of the output's second moment, at the median draw
  const residualOf = (x: number): number => (endLoss !== undefined ? endLoss : x + target2);
  const k = (2 * scale) / divisor;
  const seed = seedMoment(residualOf, medianOf(output.q, V), V, k * k);
  const residual = residualOf(medianOf(output.q, V));
  // targets independent of the outputs: the samples share only the outputs' shared part
  const gradient: Gradient = { q: seed.q, zeroFraction: 0, shape: "gaussian", logVar: seed.logVar, shared: Math.min((output.shared ?? output.mean * output.mean) * k * k, seed.q) };
  // the samples share only the outputs' shared part, so that part keeps the outputs' own spread, logVar when the output
  // carries none of its own (Signal.sharedLogVar), not the seed's: a narrow head's batch mean is one Gaussian per unit
  // (own algebra)
  gradient.sharedLogVar = output.sharedLogVar ?? output.logVar;
  // two positions of one sample share the outputs' position part likewise, the targets independent across positions
  if (positions > 1 && output.positionCorrelation !== undefined && seed.q > 0) gradient.positionCorrelation = Math.min((output.q * output.positionCorrelation * k * k) / seed.q, 1);
  // a row's k residuals are i.i.d. Gaussian, but every gradient a transposed weight map spreads them into is Gaussian
  // only given their norm: a scale mixture over √(χ²_k/k) (Gradient.rows); past k = 64 it moves a flushed share by
  // under 1.2% (E[√k/χ_k] ≈ 1 + 3/(4k), from E[1/χ_k] = Γ((k−1)/2)/(√2·Γ(k/2)): own algebra), and is left out
  if (width <= MIXED_ROWS) {
    gradient.rowsPending = width;
    gradient.rowCount = batch * positions;
  }
  if (output.correlationSquare !== undefined && positions === 1 && V > 0 && seed.q > 0) {
    // two samples' residual vectors y − t of width m with per-feature correlation ρ: E[(a·b)²]/E[‖a‖²‖b‖²] =
    // (1 + (m + 1)ρ²)/(m + 2ρ²) (Isserlis; exact at m = 1, ρ = 0 and ρ = 1)
    const rho = Math.min((gradient.shared ?? 0) / seed.q, 1);
    gradient.cosineSquare = (1 + (width + 1) * rho * rho) / (width + 2 * rho * rho);
    // the seed's share e of the output's own spread: ln E[δ²] = e·ln‖y‖² + what the targets add (the delta method)
    gradient.coupling = { elasticity: Math.sqrt(seed.logVar / V), budget: V };
  }
  // ∂δ/∂y = k·I: at the start the targets are independent of the inputs, so nothing cancels the outputs' own part. δ is
  // k·y exactly, not to first order as p − y, so it is not marked `seed`: the dense layer below pairs two samples'
  // Wᵀ·M·W·x (Curvature.seed)
  if (endLoss === undefined) {
    gradient.curvature = { diagonal: k, diagonalSquare: k * k, rowSquares: k * k };
    // E[Σ y·k(y − t)] = k·M·E[y²], targets independent of the outputs (as the seed, at the median draw)
    gradient.eulerSum = k * M * medianOf(output.q, V);
  }
  return {
    value: loss.reduction === "mean" ? residual : residual * M,
    valueLogVar: seed.logVar,
    termValue: residual,
    terms: M,
    gradient,
    bulk: { gradient, elements: M },
    rule: `mean squared error, ${loss.reduction} over ${M}, at the median draw: 2·rms(y − t)/${divisor} = ${fmt((2 * Math.sqrt(residual)) / divisor)}`,
    source: "squared-error gradient 2(y − t) (common practice); median over draws of a log-normal output scale (Hanin & Nica 2019)",
  };
}

// Gauss–Hermite nodes over the draws' logit variance for the Euler sum: its mean square within 2e-4 of 64 nodes' up to
// V = 1.3 and 2.4% at V = 2 (measured, 4 to 1,000 classes); more nodes reach logit variances whose softmax moments are slow
const EULER_NODES = 5;

// the widest squared-error head whose rows are a scale mixture (see lossSeed)
export const MIXED_ROWS = 64;

/** The median of a quantity whose ln is Gaussian with variance V and whose mean is `mean`: mean·e^(−V/2). */
function medianOf(mean: number, V: number): number {
  return mean * Math.exp(-V / 2);
}

/**
 * Variance over draws of ln f(x) when ln x has variance V: (d ln f/d ln x)²·V (the delta method), the elasticity
 * by a central difference of ±0.05 in ln x.
 */
function logVarOf(f: (x: number) => number, x: number, V: number): number {
  if (!(V > 0) || !(x > 0)) return 0;
  const h = 0.05;
  const up = f(x * Math.exp(h));
  const down = f(x * Math.exp(-h));
  if (!(up > 0) || !(down > 0)) return 0;
  const elasticity = (Math.log(up) - Math.log(down)) / (2 * h);
  return elasticity * elasticity * V;
}

/**
 * A seed second moment f(x)·factor at the median draw x, with the spread it inherits, as the engine carries it:
 * the mean over draws median·e^(logVar/2) and logVar.
 */
function seedMoment(f: (x: number) => number, x: number, V: number, factor: number): { q: number; logVar: number } {
  const logVar = logVarOf(f, x, V);
  return { q: f(x) * factor * Math.exp(logVar / 2), logVar };
}
