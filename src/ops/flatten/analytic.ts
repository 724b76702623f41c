/** Flatten: a reshape; every moment passes through unchanged. */
import type { AnalyticRule, BackwardResult, ForwardResult, Gradient, Signal } from "../types.js";

export const flattenRule: AnalyticRule<null> = {
  forward(_ctx, _layer, input: Signal): ForwardResult<null> {
    return { output: input, factors: [], role: "activation", inner: [], hazards: [], stash: null };
  },
  backward(_ctx, _layer, _stash, output: Gradient): BackwardResult {
    return { input: output, factors: [], inner: [], weightGradients: [] };
  },
};
