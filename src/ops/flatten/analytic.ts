/** Flatten: a reshape; every moment passes through unchanged. */
import { gradientCopy, sampleCorrelationOf } from "../common.js";
import type { AnalyticRule, BackwardResult, ForwardResult, Gradient, Signal } from "../types.js";

export const flattenRule: AnalyticRule<null> = {
  forward(_ctx, _layer, input: Signal): ForwardResult<null> {
    return { output: input, factors: [], role: "activation", inner: [], hazards: [], stash: null };
  },
  backward(_ctx, _layer, _stash, output: Gradient): BackwardResult {
    // different features of the flat gradient become different positions: they share only what samples share
    const input = gradientCopy(output);
    input.positionCorrelation = sampleCorrelationOf(output);
    return { input, factors: [], inner: [], weightGradients: [] };
  },
};
