/**
 * Embedding lookup: each output row is a row of the table times the multiplier, so E[x²] = var_table·multiplier²
 * whatever the token. There is no gradient for token ids. The table's gradient is sparse: with N = batch ×
 * positions lookups spread uniformly over V rows, λ = N/V lookups land on a row on average, a share e^(−λ) of the
 * rows gets none (exact zeros), and a touched row sums its lookups' gradients (Poisson occupancy; uniform token
 * use is an assumption: rare tokens get fewer, so their rows are smaller still).
 */
import type { GraphLayer } from "../../graph/types.js";
import type { EmbeddingLayer } from "../../spec/types.js";
import { NO_FACTORS, factor, fmt, weightOf } from "../common.js";
import type { AnalyticRule, BackwardResult, ForwardResult, Gradient, OpContext, Signal } from "../types.js";

const SOURCE = "embedding rows: table variance × multiplier² (definition of the layer)";

export const embeddingRule: AnalyticRule<null> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<null> {
    const spec = layer.spec as EmbeddingLayer;
    const table = weightOf(layer, "table");
    const q = ctx.variance(table) * spec.multiplier * spec.multiplier;
    const zero = table.distribution === "zeros";
    // two lookups read the same row with probability 1/V (uniform token use, as below), else independent rows:
    // E[x_n·x_m] = q/V for two samples or two positions (derived)
    const output: Signal = {
      q,
      shared: q / spec.vocabulary,
      positionCorrelation: 1 / spec.vocabulary,
      mean: 0,
      zeroFraction: zero ? 1 : 0,
      shape: table.distribution === "uniform" ? "uniform" : "gaussian",
      logVar: 0,
      gaussian: table.distribution === "normal",
    };
    return {
      output,
      factors: ctx.ledger ? [factor(input.q > 0 ? q / input.q : q, () => `embedding: var_table·multiplier² = ${fmt(ctx.variance(table))}·${fmt(spec.multiplier ** 2)}`, SOURCE)] : NO_FACTORS,
      role: "activation",
      inner: [],
      hazards: [],
      stash: null,
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, _stash: null, output: Gradient): BackwardResult {
    const spec = layer.spec as EmbeddingLayer;
    const lookups = ctx.batch * (layer.input.layout === "tokens" ? layer.input.positions : 1);
    const lambda = lookups / spec.vocabulary;
    const m2 = spec.multiplier * spec.multiplier;
    const curvature = output.curvature;
    const aligned = curvature === undefined ? 0 : lambda * lambda * m2 * curvature.rowSquares * ctx.variance(weightOf(layer, "table")) * m2;
    return {
      factors: [],
      inner: [],
      weightGradients: [
        {
          weight: "table",
          // over all V·width elements: Σ_rows count_r·E[δ²]·m² / V = λ·m²·E[δ²]; at the start the c(c − 1) pairs of one
          // row's lookups share M·x_r, the loss's curvature through the row itself: E[c(c − 1)] = λ², E[(M·x)_i²] =
          // Σ_j M_ij²·E[x²] (derived, as Curvature), the same in every micro-batch
          q: lambda * m2 * output.q + aligned,
          alignedQ: aligned,
          // coherent: a touched row's lookups all aligned, E[count²] = λ + λ² per row
          coherentQ: (lambda + lambda * lambda) * m2 * output.q,
          terms: lookups,
          zeroFraction: Math.exp(-lambda),
          logVar: output.logVar,
          rule: ctx.ledger ? () => `${fmt(lambda)} lookups per row on average (${lookups} lookups over ${spec.vocabulary} rows)` : "",
        },
      ],
    };
  },
};
