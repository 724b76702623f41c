/**
 * 2-D convolution: a dense map per output pixel with fan-in in-channels × k² (SCIENCE.md §2.1: "conv is the same
 * with fan-in k²c"). Backward, each input pixel feeds out-channels × (output pixels per input pixel) × k² outputs,
 * which is out-channels × k² at stride 1.
 */
import { sampleElements } from "../../graph/shape.js";
import type { GraphLayer } from "../../graph/types.js";
import { fmt, weightOf } from "../common.js";
import { type DenseStash, linearBackward, linearForward } from "../dense/analytic.js";
import type { Text, AnalyticRule, BackwardResult, ForwardResult, Gradient, OpContext, Signal } from "../types.js";

export const conv2dRule: AnalyticRule<DenseStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<DenseStash> {
    return linearForward(ctx, layer, input, "conv2d");
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: DenseStash, output: Gradient): BackwardResult {
    const w = weightOf(layer, "weight");
    const inChannels = w.shape[1] ?? 1;
    // connections per input element = (output elements × in-channels × k²) / input elements
    const connections = (sampleElements(layer.output) * w.fanIn) / sampleElements(layer.input);
    const variance = ctx.variance(w);
    const gain = variance * connections;
    return linearBackward(ctx, layer, stash, output, gain, ctx.ledger ? conv2dBackwardRule(connections, variance, gain) : "", inChannels, variance);
  },
};

/** The backward wording, made only with a ledger and holding only its numbers. */
function conv2dBackwardRule(connections: number, variance: number, gain: number): Text {
  return () => `conv2d: outputs fed per input·var_w = ${fmt(connections)}·${fmt(variance)} = ${fmt(gain)}`;
}
