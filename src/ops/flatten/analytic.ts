/** Flatten: a reshape; every moment passes through unchanged. */
import { gradientCopy } from "../common.js";
import type { AnalyticRule, BackwardResult, ForwardResult, Gradient, Signal } from "../types.js";

export const flattenRule: AnalyticRule<null> = {
  forward(_ctx, _layer, input: Signal): ForwardResult<null> {
    return { output: input, factors: [], role: "activation", inner: [], hazards: [], stash: null };
  },
  backward(_ctx, _layer, _stash, output: Gradient): BackwardResult {
    // different features of the flat gradient become different positions. The layer after a flatten maps its features
    // by independent weights, so two of them share nothing, in one sample or across two (mean-field independence of
    // the weights, Schoenholz et al. 2017): only one position of two samples keeps the sample correlation
    const input = gradientCopy(output);
    input.positionCorrelation = 0;
    input.crossCorrelation = 0;
    return { input, factors: [], inner: [], weightGradients: [] };
  },
};
