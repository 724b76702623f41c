/**
 * Inverted dropout: kept elements are scaled by 1/(1 − rate), so E[x²] grows by 1/(1 − rate) and a share `rate` of
 * the elements is exactly zero; the gradient goes through the same mask and scale (Srivastava et al. 2014;
 * the 1/(1 − rate) scaling at training time is common practice).
 */
import type { GraphLayer } from "../../graph/types.js";
import type { DropoutLayer } from "../../spec/types.js";
import { NO_FACTORS, diagonalPullback, factor, fmt } from "../common.js";
import type { AnalyticRule, BackwardResult, ForwardResult, Gradient, OpContext, Signal } from "../types.js";

const SOURCE = "inverted dropout, kept elements scaled by 1/(1 − rate) (Srivastava et al. 2014; common practice)";

export const dropoutRule: AnalyticRule<null> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<null> {
    const rate = (layer.spec as DropoutLayer).rate;
    const keep = 1 - rate;
    const ratio = keep > 0 ? 1 / keep : 0;
    const output: Signal = { ...input, q: input.q * ratio, zeroFraction: rate + keep * input.zeroFraction };
    if (input.bound !== undefined) output.bound = input.bound * ratio;
    // two elements keep their product in expectation (independent masks: E[m·m']/keep² = 1) while q grows by 1/keep,
    // so a correlation given relative to q shrinks by keep (the absolute `shared` and `mean` stay as they are)
    if (input.positionCorrelation !== undefined) output.positionCorrelation = input.positionCorrelation * keep;
    // two features' covariance likewise (independent masks), relative to q²: keep²
    if (input.featureCovariance !== undefined) output.featureCovariance = input.featureCovariance * keep * keep;
    return {
      output,
      factors: ctx.ledger ? [factor(ratio, () => `dropout: 1/(1 − ${fmt(rate)}) = ${fmt(ratio)}`, SOURCE)] : NO_FACTORS,
      role: "activation",
      inner: [],
      hazards: [],
      stash: null,
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, _stash: null, output: Gradient): BackwardResult {
    const rate = (layer.spec as DropoutLayer).rate;
    const keep = 1 - rate;
    const ratio = keep > 0 ? 1 / keep : 0;
    const input: Gradient = { ...output, q: output.q * ratio, zeroFraction: rate + keep * output.zeroFraction };
    // as forward: pairs keep their product, q grows by 1/keep
    if (output.positionCorrelation !== undefined) input.positionCorrelation = output.positionCorrelation * keep;
    if (output.crossCorrelation !== undefined) input.crossCorrelation = output.crossCorrelation * keep;
    // the loss's curvature below the mask: E[D·M·D] over independent masks D = diag(m_i/keep), E[m_i·m_j]/keep² = 1 off
    // the diagonal and 1/keep on it, so M + (1/keep − 1)·diag(M) (derived, as Curvature)
    const m = output.curvature;
    if (m !== undefined) input.curvature = diagonalPullback(m, ratio, 1);
    return { input, factors: ctx.ledger ? [factor(ratio, () => `dropout: 1/(1 − ${fmt(rate)}) = ${fmt(ratio)}`, SOURCE)] : NO_FACTORS, inner: [], weightGradients: [] };
  },
};
