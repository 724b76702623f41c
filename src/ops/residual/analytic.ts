/**
 * Residual block, x_out = x + α·F(x): second moments add, q_out = q_x + α²·q_F (+ 2α·E[x]·E[F] for non-zero
 * means) (Zhang, Dauphin & Ma 2019, Fixup §2); a He-initialised branch doubles q per block without normalisation.
 * Backward, δ_x = δ_out + α·J_Fᵀ·δ_out, so the branch is seeded with α²·E[δ_out²] and the two gradients add.
 * The finite-width spread is not re-accumulated along the skip (Hanin & Rolnick 2018): only the branch's own spread
 * is added, weighted by its share of the sum.
 */
import type { GraphLayer } from "../../graph/types.js";
import type { ResidualLayer } from "../../spec/types.js";
import { NO_FACTORS, crossCorrelationOf, factor, fmt, positionCorrelationOf, sharedOf, sumLogVar } from "../common.js";
import type { AnalyticRule, BackwardResult, BranchResults, Factor, ForwardResult, Gradient, OpContext, Signal } from "../types.js";

const SOURCE = "residual sum, q_out = q_x + α²·q_branch (Zhang, Dauphin & Ma 2019, Fixup §2)";

/** What the residual backward rule needs. */
export interface ResidualStash {
  input: Signal;
}

/** The gradient the branch starts from: α·δ_out, with its ledger factor (worded only with a ledger). */
export function residualBranchSeed(layer: GraphLayer, output: Gradient, ledger: boolean): { gradient: Gradient; factor: Factor } {
  const alpha = (layer.spec as ResidualLayer).multiplier;
  const a2 = alpha * alpha;
  const gradient: Gradient = { ...output, q: a2 * output.q };
  // δ_F = α·δ_out: what samples share of it scales by α² like q, and the loss's curvature in the branch's output
  // features by α² too, since the branch enters the loss as α·F (∂δ_F/∂F = α²·M) (derived, as Curvature)
  if (output.shared !== undefined) gradient.shared = a2 * output.shared;
  const m = output.curvature;
  if (m !== undefined) gradient.curvature = { ...m, diagonal: a2 * m.diagonal, diagonalSquare: a2 * a2 * m.diagonalSquare, rowSquares: a2 * a2 * m.rowSquares };
  return {
    gradient,
    factor: factor(alpha * alpha, ledger ? () => `residual branch: multiplier² = ${fmt(alpha * alpha)}` : "", SOURCE),
  };
}

export const residualRule: AnalyticRule<ResidualStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal, branch: BranchResults): ForwardResult<ResidualStash> {
    const alpha = (layer.spec as ResidualLayer).multiplier;
    const f = branch.branchOutput;
    if (f === undefined) throw new RangeError(`residual ${layer.name}: the branch output is missing`);
    const branchQ = alpha * alpha * f.q;
    const q = input.q + branchQ + 2 * alpha * input.mean * f.mean;
    const shared = branch.branchResets === true ? 0 : 1;
    const output: Signal = {
      q,
      shared: Math.min(q, sharedOf(input) + alpha * alpha * sharedOf(f) + 2 * alpha * input.mean * f.mean),
      mean: input.mean + alpha * f.mean,
      zeroFraction: input.zeroFraction * f.zeroFraction,
      shape: "gaussian",
      logVar: sumLogVar(input.q, input.logVar, branchQ, f.logVar, shared),
      gaussian: input.gaussian && f.gaussian,
    };
    // what two positions share adds up like the second moments
    if (q > 0) output.positionCorrelation = Math.min((positionCorrelationOf(input) * input.q + positionCorrelationOf(f) * branchQ + 2 * alpha * input.mean * f.mean) / q, 1);
    const ratio = input.q > 0 ? q / input.q : 0;
    return {
      output,
      factors: ctx.ledger ? [factor(ratio, () => `residual: 1 + α²·q_branch/q_skip = ${fmt(ratio)}`, SOURCE)] : NO_FACTORS,
      role: "activation",
      inner: [],
      hazards: [],
      stash: { input },
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, _stash: ResidualStash, output: Gradient, branch: BranchResults): BackwardResult {
    const g = branch.branchGradient;
    if (g === undefined) throw new RangeError(`residual ${layer.name}: the branch gradient is missing`);
    const q = output.q + g.q;
    const input: Gradient = {
      q,
      zeroFraction: output.zeroFraction * g.zeroFraction,
      shape: "gaussian",
      logVar: sumLogVar(output.q, output.logVar, g.q, g.logVar, 1),
      shared: (output.shared ?? 0) + (g.shared ?? 0),
    };
    if (q > 0) input.positionCorrelation = (positionCorrelationOf(output) * output.q + positionCorrelationOf(g) * g.q) / q;
    if (q > 0 && (output.crossCorrelation !== undefined || g.crossCorrelation !== undefined)) {
      input.crossCorrelation = (crossCorrelationOf(output) * output.q + crossCorrelationOf(g) * g.q) / q;
    }
    const ratio = output.q > 0 ? q / output.q : 0;
    return {
      input,
      factors: ctx.ledger ? [factor(ratio, () => `residual: 1 + branch gradient/skip gradient = ${fmt(ratio)}`, SOURCE)] : NO_FACTORS,
      inner: [],
      weightGradients: [],
    };
  },
};
