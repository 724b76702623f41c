/**
 * Residual block, x_out = x + α·F(x): second moments add, q_out = q_x + α²·q_F (+ 2α·E[x]·E[F] for non-zero
 * means) (Zhang, Dauphin & Ma 2019, Fixup §2); a He-initialised branch doubles q per block without normalisation.
 * Backward, δ_x = δ_out + α·J_Fᵀ·δ_out, so the branch is seeded with α²·E[δ_out²] and the two gradients add.
 * The finite-width spread is not re-accumulated along the skip (Hanin & Rolnick 2018): only the branch's own spread
 * is added, weighted by its share of the sum. The skip and the branch are not independent where the loss's curvature
 * and feature covariances are concerned: E[x·Fᵀ] = Cov(x)·J̄ᵀ with J̄ the branch's mean Jacobian (Stein's lemma).
 */
import type { GraphLayer } from "../../graph/types.js";
import type { ActivationLayer, DropoutLayer, ResidualLayer } from "../../spec/types.js";
import { tangentMoments, type ActivationStash } from "../activation/analytic.js";
import type { NormStash } from "../norm/analytic.js";
import { NO_FACTORS, crossCorrelationOf, factor, fmt, positionCorrelationOf, sharedOf, sumLogVar, tangentShare, weightOf } from "../common.js";
import { sequenceExcessOf, summedExcess } from "../sequence-excess.js";
import type { AnalyticRule, BackwardResult, BranchResults, Curvature, Factor, ForwardResult, Gradient, OpContext, Signal } from "../types.js";

const SOURCE = "residual sum, q_out = q_x + α²·q_branch (Zhang, Dauphin & Ma 2019, Fixup §2)";

/** What the residual backward rule (and the branch's seed) needs. */
export interface ResidualStash {
  input: Signal;
  /** E[F²] of the branch output */
  branchQ: number;
  /**
   * the branch's mean Jacobian J̄ = E[∂F/∂x] as a gain, E[‖J̄·v‖²]/E[‖v‖²] (its entries taken as independent and of
   * mean zero, so J̄'s square sums over a row to this); undefined when the branch holds a layer it cannot follow
   */
  meanJacobian: number | undefined;
  /** features of the skip */
  width: number;
  /** how the block grows a perturbation along its input and one independent of it (BlockTangent); start phase only */
  tangent: BlockTangent | undefined;
}

/**
 * Per element of the branch output F: E[‖J_F·x‖²] and E[(J_F·x)·F] of the tangent J_F·x the branch makes of a
 * perturbation along its own input x, and `independent`, E[‖J_F·ε‖²]/E[‖ε‖²] for ε independent of x (the mean-field
 * gain: fan_in·var_w per dense layer, E[φ'²] per activation, Schoenholz et al. 2017)
 */
interface BlockTangent {
  tangent: number;
  cross: number;
  /** E[F²] as the same walk has it (bias and means left out, as for the tangent) */
  signal: number;
  independent: number;
}

/**
 * A branch followed layer by layer, for two things (undefined for a branch with a layer it cannot follow):
 * - the gain of its mean Jacobian J̄ = E[∂F/∂x], which Stein's lemma turns into the skip's covariance with the branch,
 *   E[x·Fᵀ] = Cov(x)·J̄ᵀ (Stein 1981, Lemma 1, x Gaussian): a dense layer multiplies it by fan_in·var_w, an activation
 *   by E[φ']², a layer or RMS norm by gain²/(var + ε), dropout by E[mask]/keep = 1; undefined also with no random linear
 *   map (J̄'s entries would not be of mean zero);
 * - with `withTangent` and J̄ known, {@link BlockTangent}: the tangent τ split into its part along the signal s and the
 *   rest, τ = a·s + r with a = E[τ·s]/E[s²] (own algebra): a linear layer maps both alike; an activation passes
 *   a·φ'(u)·u along (tangentMoments) and the rest as an independent perturbation (E[φ'²]); a norm, unchanged by a
 *   scale of its input, passes only the rest (gain²/(var + ε)); dropout's mask scales both by 1/keep.
 */
function followBranch(
  ctx: OpContext,
  layer: GraphLayer,
  stashes: readonly unknown[] | undefined,
  q: number,
  withTangent: boolean,
): { meanJacobian: number | undefined; tangent: BlockTangent | undefined } {
  const branch = layer.branch;
  if (branch === undefined || stashes === undefined || stashes.length !== branch.length || layer.output.layout !== "features") return NOT_FOLLOWED;
  let gain = 1;
  let mixes = false;
  // the tangent's walk, dropped (null) at a layer it cannot follow
  let t: BlockTangent | null = withTangent && q > 0 ? { tangent: q, cross: q, signal: q, independent: 1 } : null;
  for (let i = 0; i < branch.length; i++) {
    const b = branch[i] as GraphLayer;
    const stash = stashes[i];
    switch (b.family) {
      case "dense": {
        const w = weightOf(b, "weight");
        const g = ctx.variance(w) * w.fanIn;
        gain *= g;
        mixes = true;
        if (t !== null) {
          t.tangent *= g;
          t.cross *= g;
          t.signal *= g;
          t.independent *= g;
        }
        break;
      }
      case "activation": {
        const s = stash as ActivationStash;
        gain *= s.derivativeMean ** 2;
        const name = (b.spec as ActivationLayer).activation;
        if (t === null) break;
        if (name === "softmax" || !(t.signal > 0)) {
          t = null;
          break;
        }
        const a = t.cross / t.signal;
        const along = tangentMoments(name, s);
        const rest = Math.max(t.tangent - a * a * t.signal, 0);
        t.tangent = a * a * along.tangent + s.derivativeSecond * rest;
        t.cross = a * along.cross;
        t.signal = along.output;
        t.independent *= s.derivativeSecond;
        break;
      }
      case "layer-norm":
      case "rms-norm": {
        const norm = stash as NormStash;
        const g = norm.denominator > 0 ? norm.gainSquared / norm.denominator : 0;
        gain *= g;
        if (t !== null) {
          t.tangent = g * Math.max(t.tangent - (t.signal > 0 ? (t.cross * t.cross) / t.signal : 0), 0);
          t.cross = 0;
          t.signal = norm.gainSquared * norm.normalisedSecond;
          t.independent *= g;
        }
        break;
      }
      case "dropout": {
        if (t === null) break;
        // the mask m/keep scales the tangent, the signal and a perturbation alike, each square by 1/keep
        const keep = 1 - (b.spec as DropoutLayer).rate;
        if (!(keep > 0)) {
          t = null;
          break;
        }
        t.tangent /= keep;
        t.cross /= keep;
        t.signal /= keep;
        t.independent /= keep;
        break;
      }
      default:
        return NOT_FOLLOWED;
    }
  }
  const meanJacobian = mixes && Number.isFinite(gain) ? gain : undefined;
  const followed = meanJacobian !== undefined && t !== null && Number.isFinite(t.tangent) && Number.isFinite(t.cross) && Number.isFinite(t.independent);
  return { meanJacobian, tangent: followed ? (t as BlockTangent) : undefined };
}

const NOT_FOLLOWED = { meanJacobian: undefined, tangent: undefined } as const;

/**
 * E[c²] of two samples' cosine at the sum x + α·F (Signal.correlationSquare), from its mean c̄ (the sum's shared/q): the
 * two parts' spreads about their own means, weighed by their shares w of q, add at most as standard deviations do
 * (Minkowski's inequality; F's cosine moves with x's), and the cross terms x_n·F_m, of mean zero over the branch's
 * random last map, add 2·w_x·w_F/n (own algebra, as Fisher's 1/n for a random map's cosine)
 */
function sumCorrelationSquare(x: Signal, f: Signal, branchQ: number, mean: number, width: number): number {
  const q = x.q + branchQ;
  const wx = x.q / q;
  const wf = branchQ / q;
  const spread = wx * spreadOf(x) + wf * spreadOf(f);
  return Math.min(Math.max(mean * mean + spread * spread + (2 * wx * wf) / width, 0), 1);
}

// the standard deviation of two samples' cosine about its mean shared/q
function spreadOf(s: Signal): number {
  if (!(s.q > 0)) return 0;
  const c = sharedOf(s) / s.q;
  return Math.sqrt(Math.max((s.correlationSquare ?? 0) - c * c, 0));
}

/** The gradient the branch starts from: α·δ_out, with its ledger factor (worded only with a ledger). */
export function residualBranchSeed(layer: GraphLayer, output: Gradient, ledger: boolean, stash?: ResidualStash): { gradient: Gradient; factor: Factor } {
  const alpha = (layer.spec as ResidualLayer).multiplier;
  const a2 = alpha * alpha;
  const gradient: Gradient = { ...output, q: a2 * output.q };
  // Σ y·δ_y of the block's output (a max-pool's sum) is not Σ F·δ_F of the branch's
  delete gradient.homogeneousSum;
  // δ_F = α·δ_out: what samples share of it scales by α² like q, and the loss's curvature in the branch's output
  // features by α² too, since the branch enters the loss as α·F (∂δ_F/∂F = α²·M) (derived, as Curvature)
  if (output.shared !== undefined) gradient.shared = a2 * output.shared;
  const m = output.curvature;
  if (m !== undefined) {
    const seed: Curvature = { ...m, diagonal: a2 * m.diagonal, diagonalSquare: a2 * a2 * m.diagonalSquare, rowSquares: a2 * a2 * m.rowSquares };
    const jacobian = stash?.meanJacobian;
    if (stash !== undefined && jacobian !== undefined && stash.branchQ > 0) {
      // δ_F also holds α·M·x of the skip; x's best linear estimate from F is E[x·Fᵀ]·E[F·Fᵀ]⁻¹·F = (q_x/q_F)·J̄ᵀ·F
      // (Stein's lemma), so M_F gains (α·q_x/q_F)·M·J̄ᵀ: no diagonal mean, squares R·ḡ/n on the diagonal and R·ḡ over a
      // row, ḡ = n·E[J̄_ij²] (own algebra: linear projection of the skip on the branch output, J̄'s entries independent)
      const c = (alpha * stash.input.q) / stash.branchQ;
      const cross = c * c * m.rowSquares * jacobian;
      seed.diagonalSquare += cross / stash.width;
      seed.rowSquares += cross;
      // Cov(F_i, (α·M·x)_i) = α·(M·Cov(x)·J̄ᵀ)_ii: its square q_F²·cross/n·(1 + (n − 1)·c_x), a row of Cov(x) holding
      // q_x² on its diagonal and the (n − 1) features' covariances off it (own algebra, Stein's lemma as above)
      const rowOfCovariance = 1 + (stash.width - 1) * (stash.input.featureCovariance ?? 0);
      seed.skip = { rowSquares: cross, diagonalSquare: cross / stash.width, covariance: (stash.branchQ * stash.branchQ * cross * rowOfCovariance) / stash.width };
      // M·J̄ᵀ is not symmetric: no positive semidefinite bound holds for M_F
      seed.indefinite = true;
      delete seed.centred;
    }
    gradient.curvature = seed;
  }
  return {
    gradient,
    factor: factor(a2, ledger ? () => `residual branch: multiplier² = ${fmt(a2)}` : "", SOURCE),
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
    const width = layer.output.layout === "features" ? layer.output.features : 1;
    if (q > 0 && input.correlationSquare !== undefined && f.correlationSquare !== undefined) {
      output.correlationSquare = sumCorrelationSquare(input, f, branchQ, output.shared! / q, width);
    }
    // a sequence's deviations add as two randomly oriented parts, the branch's first order in the skip's deviations
    // spreading the skip's (summedExcess)
    if (width > 1 && (input.sequenceExcess !== undefined || f.sequenceExcess !== undefined)) {
      const skipEnergy = input.q * (1 - positionCorrelationOf(input));
      const branchEnergy = branchQ * (1 - positionCorrelationOf(f));
      output.sequenceExcess = summedExcess(sequenceExcessOf(input, width), skipEnergy, sequenceExcessOf(f, width), branchEnergy, branchEnergy * (f.sequenceLinear ?? 0));
    }
    // the loss's curvature, which the tangent's growth limits, exists at the start of the horizon only
    const { meanJacobian, tangent } = followBranch(ctx, layer, branch.branchStashes, input.q, ctx.phase === "start");
    if (meanJacobian !== undefined && q > 0) {
      // Cov(y) = Cov(x) + α·(Cov(x)·J̄ᵀ + J̄·Cov(x)) + α²·Cov(F) (Stein's lemma, as above): the middle terms' entries, of
      // mean zero, add E[(Cov(x)·J̄ᵀ)_ij²] = q_x²·(1 + (n − 1)·c_x)·ḡ/n each (own algebra, J̄'s entries independent)
      const skip = (input.featureCovariance ?? 0) * input.q * input.q;
      const own = input.q * input.q * (1 + (width - 1) * (input.featureCovariance ?? 0));
      const crossed = (2 * alpha * alpha * own * meanJacobian) / width;
      output.featureCovariance = (skip + crossed + alpha ** 4 * (f.featureCovariance ?? 0) * f.q * f.q) / (q * q);
    }
    return {
      output,
      factors: ctx.ledger ? [factor(ratio, () => `residual: 1 + α²·q_branch/q_skip = ${fmt(ratio)}`, SOURCE)] : NO_FACTORS,
      role: "activation",
      inner: [],
      hazards: [],
      stash: { input, branchQ: f.q, meanJacobian, width, tangent },
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: ResidualStash, output: Gradient, branch: BranchResults): BackwardResult {
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
    // both shared parts are images of the one the loss seeded, so they add coherently; the branch's share adds what its
    // path spread on top (sumLogVar with a wholly shared skip; own algebra)
    if (output.sharedLogVar !== undefined) {
      const skipShared = output.shared ?? 0;
      const branchShared = g.shared ?? 0;
      input.sharedLogVar =
        g.sharedLogVar !== undefined && skipShared > 0 && branchShared > 0 ? sumLogVar(skipShared, output.sharedLogVar, branchShared, g.sharedLogVar, 1) : output.sharedLogVar;
    }
    if (q > 0 && (output.crossCorrelation !== undefined || g.crossCorrelation !== undefined)) {
      input.crossCorrelation = (crossCorrelationOf(output) * output.q + crossCorrelationOf(g) * g.q) / q;
    }
    const m = output.curvature;
    const pulled = g.curvature;
    // the loss's curvature at the skip's input: (I + α·J)ᵀ·M·(I + α·J) = M + α·(M·J̄ + J̄ᵀ·M) + α²·E[Jᵀ·M·J], the last the
    // branch's own pullback (its gradient's curvature, which also holds J̄ᵀ·M through the seed's skip part); only when
    // the branch carried it down and J̄ is known
    if (m !== undefined && pulled !== undefined && stash.meanJacobian !== undefined) input.curvature = skipCurvature(m, pulled, (layer.spec as ResidualLayer).multiplier, stash);
    const ratio = output.q > 0 ? q / output.q : 0;
    return {
      input,
      factors: ctx.ledger ? [factor(ratio, () => `residual: 1 + branch gradient/skip gradient = ${fmt(ratio)}`, SOURCE)] : NO_FACTORS,
      inner: [],
      weightGradients: [],
    };
  },
};

/**
 * M_x = M + α·M·J̄ + (α·J̄ᵀ·M + α²·E[Jᵀ·M·J]), the bracket the branch's pullback `pulled`: the diagonals add (J̄'s of
 * mean zero adds none), E[(M_ii + P_ii)²] and the rows' squares add with 2·E[M_ii]·E[P_ii] for the diagonal they share,
 * and α·M·J̄ adds α²·R·ḡ over a row, α²·R·ḡ/n on the diagonal (own algebra, J̄'s entries independent of M). Where the
 * block's tangent is known (BlockTangent), the sum carries the tangent's growth on (blockMarks): each part is taken
 * without the limit applied above it and the sum is limited once by the excess at x (Curvature.tangentExcess).
 */
function skipCurvature(m: Curvature, pulled: Curvature, alpha: number, stash: ResidualStash): Curvature {
  const marks = blockMarks(m, alpha, stash);
  // each part's squares carry the share of y along its tangent (limitTangent, an earlier sum): undone here, and the sum
  // scaled once by the share at x
  const mUnlimited = marks === undefined ? 1 : 1 / tangentShare(m.tangentExcess ?? 1, m.tangentAlong);
  const pUnlimited = marks === undefined ? 1 : 1 / tangentShare(pulled.tangentExcess ?? 1, pulled.tangentAlong);
  const mDiagonal = m.diagonal * Math.sqrt(mUnlimited);
  const pDiagonal = pulled.diagonal * Math.sqrt(pUnlimited);
  const shared = 2 * mDiagonal * pDiagonal;
  const cross = alpha * alpha * mUnlimited * m.rowSquares * (stash.meanJacobian ?? 0);
  const sum: Curvature = {
    diagonal: mDiagonal + pDiagonal,
    diagonalSquare: mUnlimited * m.diagonalSquare + pUnlimited * pulled.diagonalSquare + shared + cross / stash.width,
    rowSquares: mUnlimited * m.rowSquares + pUnlimited * pulled.rowSquares + shared + cross,
  };
  // M·J̄ is not symmetric: no positive semidefinite bound holds for M_x
  if (m.indefinite === true || pulled.indefinite === true || cross > 0) sum.indefinite = true;
  if (marks !== undefined) {
    const share = tangentShare(marks.excess, marks.along);
    if (share !== 1) {
      sum.diagonal *= Math.sqrt(share);
      sum.diagonalSquare *= share;
      sum.rowSquares *= share;
    }
    sum.tangentExcess = marks.excess;
    sum.tangentAbove = marks.above;
    sum.tangentAlong = marks.along;
  }
  return sum;
}

/**
 * The tangent marks at a residual block's input x from those at its output v = x + α·F(x) (Curvature.tangentExcess).
 * The tangent there is τ = x + α·J_F·x (J_F·x and F of mean zero against x, the weights' signs random): its part along
 * v, c·v with c = E[τ·v]/E[v²], grows above as v's own tangent does (the excess at v), the rest as a perturbation
 * independent of v (tangentAbove at v), so excess_x = c²·excess_v + (E[τ²]/E[v²] − c²)·above_v, and only the part
 * along v holds y: along_x = c·along_v; a perturbation independent of x grows through the block by
 * (1 + α²·ḡ_F)·q_x/q_v against the signal (own algebra, the mean-field gains of Schoenholz et al. 2017). Undefined
 * where the branch's tangent is not known.
 */
function blockMarks(m: Curvature, alpha: number, stash: ResidualStash): { excess: number; above: number; along: number } | undefined {
  const t = stash.tangent;
  if (t === undefined) return undefined;
  const a2 = alpha * alpha;
  const q = stash.input.q;
  const signal = q + a2 * t.signal;
  if (!(signal > 0)) return undefined;
  const tangent = q + a2 * t.tangent;
  const c = (q + a2 * t.cross) / signal;
  const rest = Math.max(tangent / signal - c * c, 0);
  const excess = c * c * (m.tangentExcess ?? 1) + rest * (m.tangentAbove ?? 1);
  const above = (m.tangentAbove ?? 1) * ((1 + a2 * t.independent) * q) / signal;
  const along = c * (m.tangentAlong ?? 1);
  return Number.isFinite(excess) && Number.isFinite(above) && excess > 0 && above > 0 ? { excess, above, along } : undefined;
}
