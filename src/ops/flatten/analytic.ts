/** Flatten: a reshape; every moment passes through unchanged. */
import { featureWidth, positionCount } from "../../graph/shape.js";
import { gradientCopy } from "../common.js";
import type { AnalyticRule, BackwardResult, ForwardResult, Gradient, Signal } from "../types.js";

export const flattenRule: AnalyticRule<null> = {
  forward(_ctx, _layer, input: Signal): ForwardResult<null> {
    return { output: input, factors: [], role: "activation", inner: [], hazards: [], stash: null };
  },
  backward(_ctx, layer, _stash, output: Gradient): BackwardResult {
    // different features of the flat gradient become different positions. The layer after a flatten maps its features
    // by independent weights, so two of them share nothing, in one sample or across two (mean-field independence of
    // the weights, Schoenholz et al. 2017): only one position of two samples keeps the sample correlation
    const input = gradientCopy(output);
    input.positionCorrelation = 0;
    input.crossCorrelation = 0;
    // a reshape keeps every sum, the shared part's spread with them
    if (output.sharedLogVar !== undefined) input.sharedLogVar = output.sharedLogVar;
    const curvature = output.curvature;
    if (curvature !== undefined) {
      // the loss's curvature over the flat features couples positions; a layer below acts on one position's D features
      // at a time, and sees the block of those: a row keeps its diagonal and D − 1 of its P·D − 1 other entries (own
      // algebra: the entries off the diagonal are alike, their weights being independent)
      const D = featureWidth(layer.input);
      const all = D * positionCount(layer.input);
      const off = all > 1 ? (Math.max(curvature.rowSquares - curvature.diagonalSquare, 0) * (D - 1)) / (all - 1) : 0;
      input.curvature = { diagonal: curvature.diagonal, diagonalSquare: curvature.diagonalSquare, rowSquares: curvature.diagonalSquare + off };
      if (curvature.indefinite === true) input.curvature.indefinite = true;
    }
    return { input, factors: [], inner: [], weightGradients: [] };
  },
};
