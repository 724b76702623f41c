/**
 * The loss value and the gradient it seeds at the network's output, at the start and at the end of the horizon.
 *
 * Softmax cross-entropy (SCIENCE.md §2.1 output seed; DESIGN.md §3): ∂L/∂logit_j = (p_j − y_j)/N with N = batch ×
 * positions under mean reduction (1 under sum reduction). With logits of variance s², the wrong-class
 * probabilities are log-normal, p_j ≈ e^(z_j)/(C·e^(s²/2)) (a log-normal sum approximation), so their rms is
 * e^(s²/2)/C and log2 p_j spreads by s/ln 2: over many classes these elements span many binades. The right class
 * has (1 − p_y)/N with p_y ≈ 1/C at initialisation.
 *
 * End of the horizon, derived here: a trained model's typical right-class probability is p_y ≈ e^(−finalLoss)
 * (the loss is the mean of −ln p_y), so the right-class gradient shrinks from (1 − 1/C) to (1 − e^(−finalLoss)),
 * and the wrong-class probabilities share the remaining mass 1 − p_y: their mean is (1 − p_y)/(C − 1), their rms
 * that times e^(s²/2) with the end-of-horizon logit variance s², capped by (1 − p_y)/√(C − 1) (all the mass on
 * one wrong class).
 *
 * Mean squared error (mean over every output element, as common implementations reduce it): ∂L/∂y = 2(y − t)/M
 * for M = batch × output elements per sample; E[(y − t)²] = E[y²] + targetScale² for targets independent of the
 * initial outputs. At the end the residual's rms is √finalLoss (the loss is its mean square), i.e. it shrinks by
 * √(loss ratio).
 */
import type { LossSpec } from "../spec/types.js";
import type { Gradient, Signal } from "../ops/types.js";

/** The loss value and the gradient tensors it seeds. */
export interface LossSeed {
  /** the loss value (one number per step on one worker) */
  value: number;
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
    const s2 = Math.max(output.q - output.mean * output.mean, 0);
    const pRight = phase === "end" && finalLoss !== undefined ? Math.exp(-finalLoss) : 1 / C;
    const rightMagnitude = 1 - pRight;
    const wrongRms = C > 1 ? Math.min((rightMagnitude / (C - 1)) * Math.exp(s2 / 2), rightMagnitude / Math.sqrt(C - 1)) : 0;
    const k = scale / divisor;
    const wrongQ = (wrongRms * k) ** 2;
    const rightQ = (rightMagnitude * k) ** 2;
    const totalQ = ((C - 1) * wrongQ + rightQ) / C;
    const startLoss = Math.log(C) + s2 / 2;
    const perTerm = phase === "end" && finalLoss !== undefined ? finalLoss : startLoss;
    // two samples' logits correlated by c share part of p; with labels independent across samples,
    // E[δ_n δ_m] per element = E[p_n p_m] − 2E[p]/C + 1/C² = (e^(c·s²) − 1)/C² (log-normal p; derived)
    const c = s2 > 0 ? Math.min(Math.max(((output.shared ?? output.mean * output.mean) - output.mean * output.mean) / s2, 0), 1) : 0;
    const sharedQ = ((Math.exp(c * s2) - 1) / (C * C)) * k * k;
    return {
      value: loss.reduction === "mean" ? perTerm : perTerm * N,
      termValue: perTerm,
      terms: N,
      gradient: { q: totalQ, zeroFraction: 0, shape: "gaussian", logVar: 0, shared: Math.min(sharedQ, totalQ) },
      bulk: {
        gradient: {
          q: wrongQ,
          zeroFraction: 0,
          shape: "log-normal",
          elementLog2Spread: Math.sqrt(s2) / Math.LN2,
          bound: Math.abs(k),
          logVar: 0,
        },
        elements: N * (C - 1),
      },
      target: { gradient: { q: rightQ, zeroFraction: 0, shape: "bounded", bound: Math.abs(k), logVar: 0 }, elements: N },
      rule: `softmax cross-entropy over ${C} classes, ${loss.reduction} over ${N}: right class (1 − p)/${divisor} = ${(rightMagnitude / divisor).toExponential(3)}, wrong classes ≈ ${(wrongRms / divisor).toExponential(3)}`,
      source: "softmax cross-entropy gradient p − y (SCIENCE.md §2.1 output seed; DESIGN.md §3)",
    };
  }
  const M = batch * positions * width;
  const divisor = loss.reduction === "mean" ? M : 1;
  const startResidual = output.q + loss.targetScale * loss.targetScale;
  const residual = phase === "end" && finalLoss !== undefined ? finalLoss : startResidual;
  const k = (2 * scale) / divisor;
  const q = residual * k * k;
  // targets independent of the outputs: the samples share only the outputs' shared part
  const gradient: Gradient = { q, zeroFraction: 0, shape: "gaussian", logVar: 0, shared: Math.min((output.shared ?? output.mean * output.mean) * k * k, q) };
  return {
    value: loss.reduction === "mean" ? residual : residual * M,
    termValue: residual,
    terms: M,
    gradient,
    bulk: { gradient, elements: M },
    rule: `mean squared error, ${loss.reduction} over ${M}: 2·rms(y − t)/${divisor} = ${(2 * Math.sqrt(residual) / divisor).toExponential(3)}`,
    source: "squared-error gradient 2(y − t) (common practice)",
  };
}
