/**
 * Layer norm, RMS norm and batch norm: the output's second moment is reset to gain²·var/(var + ε) (the
 * definitions of the layers: Ba et al. 2016; Zhang & Sennrich 2019; Ioffe & Szegedy 2015), which also resets the
 * finite-width spread (Hanin & Rolnick 2018). Backward, the gradient is multiplied by gain/√(var + ε), the
 * Jacobian's scale, and its second moment by e^V more for a layer or RMS norm: each sample divides by its own
 * statistic, whose log spreads by the input's V (see sampleSpread). The projection that removes the mean and the
 * radial direction takes 1 or 2 of n dimensions and is left out. Its spread gains the forward spread of 1/√var.
 */
import { positionCount, sampleElements } from "../../graph/shape.js";
import type { GraphLayer } from "../../graph/types.js";
import type { NormLayer } from "../../spec/types.js";
import { activationMoments } from "../../numeric/activations.js";
import { crossMoments } from "../activation/analytic.js";
import { sumLogVarOf } from "../dense/analytic.js";
import { type ChannelInverse, channelInverse } from "./channels.js";
import { LINEAR_KAPPA, NO_FACTORS, betweenBatches, correlatedSum, eulerShare, crossCorrelationOf, factor, fmt, gradientBetween, gradientSum, maybeWeight, positionCorrelationOf, sampleCorrelationOf, sharedOf, weightOf } from "../common.js";
import type { AnalyticRule, BackwardResult, Curvature, ForwardResult, Gradient, OpContext, Signal, WeightGradientMoment } from "../types.js";

/** What the norm backward rule needs. */
export interface NormStash {
  input: Signal;
  /** the variance the layer divides by (mean removed for layer/batch norm), plus ε */
  denominator: number;
  /** E[x̂²] of the normalised values */
  normalisedSecond: number;
  gainSquared: number;
  /** correlation of the normalised values between two samples and between two positions of one sample */
  normalisedCorrelation: { sample: number; position: number };
  /** batch norm after a rectifier whose channels' means differ: the channels' mean of 1/(var_c + ε) and its gate */
  channels?: ChannelInverse;
}

const SOURCE = "normalisation resets the scale to the gain (the layers' definitions: Ioffe & Szegedy 2015; Ba et al. 2016; Zhang & Sennrich 2019)";
const CHANNEL_SOURCE = "each channel divided by its own variance, the channels' mean of 1/(var_c + ε) at the median draw (own algebra)";
const SPREAD_SOURCE = "each sample divided by its own log-normal statistic, E[1/s²] = e^V/E[s²] (Hanin & Nica 2019; own algebra)";

/** Elements summed into one statistic: features of a position (layer/rms norm), or batch × pixels of a channel (batch norm). */
export function normTerms(layer: GraphLayer, batch: number): number {
  const family = layer.family;
  if (family === "batch-norm") return batch * positionCount(layer.input);
  if (layer.input.layout === "image") return sampleElements(layer.input);
  return layer.input.layout === "features" ? layer.input.features : 1;
}

/**
 * Correlations (two samples, two positions) of the gain gradient's terms x̂·δ. When a ReLU gates the gradient right
 * after the norm, δ = relu'(x̂)·b and x̂·δ = relu(x̂)·b: a pair shares E[relu(x̂)relu(x̂')]·E[b b'] (arc-cosine kernel,
 * Cho & Saul 2009) against E[x̂²·relu'(x̂)]·E[b²] = E[x̂²]/2·E[b²] on the diagonal. Otherwise x̂ and δ are independent.
 */
function gainPairCorrelations(stash: NormStash, output: Gradient): [number, number, number] {
  const c = stash.normalisedCorrelation;
  const q = stash.normalisedSecond;
  // two samples at two positions: the normalised values' correlation taken as two samples' (as crossCorrelationOf does),
  // the gradient's its own (zero where a flatten's positions fed independent weights)
  if (output.reluGated === undefined || !(q > 0)) return [c.sample * sampleCorrelationOf(output), c.position * positionCorrelationOf(output), c.sample * crossCorrelationOf(output)];
  const m = activationMoments("relu", q);
  const pair = (x: number, b: number): number => (2 * crossMoments("relu", 0, q, x, m).value * b) / q;
  return [pair(c.sample, output.reluGated.sample), pair(c.position, output.reluGated.position), pair(c.sample, output.reluGated.cross)];
}

export const normRule: AnalyticRule<NormStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<NormStash> {
    const spec = layer.spec as NormLayer;
    const gain = weightOf(layer, "gain");
    const gainSquared = ctx.variance(gain);
    const bias = maybeWeight(layer, "bias");
    const biasVariance = bias === undefined ? 0 : ctx.variance(bias);
    const centred = layer.family !== "rms-norm";
    // layer norm centres each sample over its features; batch norm centres each feature over the batch, removing the
    // shared part (the per-feature batch mean²), which a ReLU's positive mean puts there (Yang et al. 2019)
    // (over batch and pixels: a padded convolution's border pixels keep batch means of their own, which it leaves)
    const removed = layer.family === "batch-norm" ? (input.channelShared ?? sharedOf(input)) : centred ? input.mean * input.mean : 0;
    const variance = Math.max(input.q - removed, 0);
    const denominator = variance + spec.epsilon;
    const normalisedSecond = denominator > 0 ? variance / denominator : 0;
    const q = gainSquared * normalisedSecond + biasVariance;
    const output: Signal = centred
      ? {
          q,
          mean: 0,
          shared: layer.family === "batch-norm" ? biasVariance : Math.min(q, Math.max(sharedOf(input) - input.mean * input.mean, 0) * (gainSquared / denominator) + biasVariance),
          zeroFraction: 0,
          shape: "gaussian",
          logVar: 0,
          gaussian: true,
        }
      : {
          q,
          shared: sharedOf(input) * (gainSquared / denominator),
          mean: input.mean * Math.sqrt(gainSquared / denominator),
          zeroFraction: input.zeroFraction,
          shape: input.shape,
          logVar: 0,
          gaussian: input.gaussian,
        };
    if (!centred && input.bound !== undefined) output.bound = input.bound * Math.sqrt(gainSquared / denominator);
    // every feature of a position is divided by (nearly) the same statistic: covariances scale by gain²/(var + ε)
    if (layer.family !== "batch-norm" && input.featureCovariance !== undefined && q > 0) {
      output.featureCovariance = ((gainSquared / denominator) ** 2 * input.featureCovariance * input.q * input.q) / (q * q);
    }
    // (nearly) one scale per position leaves the shape of a sequence's deviations as it is (sequence-excess.ts)
    if (layer.family !== "batch-norm" && input.sequenceExcess !== undefined) output.sequenceExcess = input.sequenceExcess;
    // each position is divided by (nearly) the same statistic, so the part two positions share scales like q, less
    // what the centring removes: each sample's feature mean (layer norm) or each feature's batch mean (batch norm)
    const normalisedPositionShared = Math.max(positionCorrelationOf(input) * input.q - removed, 0) / denominator;
    if (q > 0) output.positionCorrelation = Math.min((normalisedPositionShared * gainSquared + biasVariance) / q, 1);
    const normalisedSampleShared = gainSquared > 0 ? Math.max((output.shared ?? 0) - biasVariance, 0) / gainSquared : 0;
    const normalisedCorrelation =
      normalisedSecond > 0 ? { sample: Math.min(normalisedSampleShared / normalisedSecond, 1), position: Math.min(normalisedPositionShared / normalisedSecond, 1) } : { sample: 0, position: 0 };
    const cosineSquare = input.correlationSquare;
    if (cosineSquare !== undefined && q > 0 && input.q > removed) output.correlationSquare = normCosineSquare(cosineSquare, sharedOf(input) / input.q, removed / input.q, (gainSquared * normalisedSecond) / q, biasVariance / q);
    const terms = normTerms(layer, ctx.batch);
    // a batch norm's channels right after a convolution: each channel's statistic is a Gaussian quadratic form in its
    // own weights, a scaled chi-square of 2/κ_unit degrees of freedom (Satterthwaite 1946: matched mean and variance),
    // independent between channels; the κ/width the convolution added to the tensor's spread is their mean's
    const fresh = input.fresh;
    const statistics = layer.family === "batch-norm" && fresh !== undefined && fresh.unitKappa !== undefined && fresh.unitKappa > 0 && fresh.width > 0 ? { dof: 2 / fresh.unitKappa, ownLogVar: fresh.kappa / fresh.width } : undefined;
    const stash: NormStash = { input, denominator, normalisedSecond, gainSquared, normalisedCorrelation };
    // each channel has its own variance after a rectifier whose channels' means differ (see channels.ts)
    const spread = input.channelSpread;
    if (layer.family === "batch-norm" && spread !== undefined && spread.q === input.q && spread.within > 0 && layer.input.layout === "image") {
      stash.channels = channelInverse(spread, layer.input.channels, spec.epsilon);
    }
    return {
      output,
      factors: ctx.ledger
        ? [
            factor(
              input.q > 0 ? q / input.q : 0,
              () => `${layer.family}: gain²·var/(var + ε) = ${fmt(gainSquared)}·${fmt(normalisedSecond)}${spec.epsilon > 0 && normalisedSecond < 0.99 ? " (ε dominates a small input)" : ""}`,
              SOURCE,
            ),
          ]
        : NO_FACTORS,
      role: "activation",
      inner: [],
      hazards: [
        {
          kind: "norm-sum-of-squares",
          input,
          inputElements: ctx.batch * sampleElements(layer.input),
          terms,
          guarded: false,
          detail: ctx.details ? () => `${layer.family} sums the squares of ${terms} elements per statistic` : "",
          statistics,
        },
      ],
      stash,
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: NormStash, output: Gradient): BackwardResult {
    const channels = stash.channels;
    const ratio = channels !== undefined ? stash.gainSquared * channels.inverse : stash.denominator > 0 ? stash.gainSquared / stash.denominator : 0;
    const spread = sampleSpread(layer, stash);
    const positions = positionCount(layer.input);
    const terms = ctx.batch * positions;
    // the loss's curvature through the gain: δ_i holds M_ii·g·x̂_i, so Σ_t x̂_i·δ_i gains N·g·E[x̂²]·M_ii in every
    // micro-batch, of one sign for every feature (see Curvature)
    const curvature = output.curvature;
    let aligned = 0;
    if (curvature !== undefined) {
      const skip = curvature.skip;
      aligned = terms * terms * stash.gainSquared * stash.normalisedSecond * stash.normalisedSecond * Math.max(curvature.diagonalSquare - (skip?.diagonalSquare ?? 0), 0);
      // the skip's part g of δ (Curvature.skip) gives E[x̂_i·g_i] = Cov(y_i, g_i)/gain, not gain·E[x̂²]·A_ii (own algebra)
      if (skip !== undefined && stash.gainSquared > 0) aligned += (terms * terms * skip.covariance) / stash.gainSquared;
    }
    const pairs = gainPairCorrelations(stash, output);
    const normBias = maybeWeight(layer, "bias");
    // Σ x̂·δ = Σ (y − β)·δ/γ: with β = 0 it is the max-pool's S = Σ p·g passed down by Euler's theorem
    // (Gradient.homogeneousSum; own algebra), whose pairs the pool counted at its output
    const homogeneousSum = output.homogeneousSum;
    const homogeneous = homogeneousSum !== undefined && stash.gainSquared > 0 && (normBias === undefined || ctx.variance(normBias) === 0);
    const gainQ = homogeneous ? homogeneousSum / stash.gainSquared : correlatedSum(ctx.batch, positions, stash.normalisedSecond * output.q, ...pairs) + aligned;
    // a batch norm's gain and bias gradients are one sum per channel, each nearly Gaussian about the channels' common
    // mean (eulerShare): their mean square over the channels spreads as a chi-square of that many, Var/E² = 2/channels
    // beyond the gradient's scale (as sumLogVarOf; own algebra)
    const common = homogeneous && homogeneousSum > 0 ? Math.min(eulerShare(output, layer) / homogeneousSum, 1) : 0;
    const channelSums = layer.family === "batch-norm" ? LINEAR_KAPPA / Math.max(weightOf(layer, "gain").elements, 1) : 0;
    const weightGradients: WeightGradientMoment[] = [
      {
        weight: "gain",
        // pairs of terms add what positions (samples) share of the normalised input and of the gradient (common practice)
        q: gainQ,
        alignedQ: aligned,
        betweenQ: betweenBatches(ctx.batch, positions, stash.normalisedSecond * output.q, pairs[0], pairs[2]),
        coherentQ: terms * terms * stash.normalisedSecond * output.q,
        terms,
        zeroFraction: 0,
        logVar: output.logVar + channelSums * (1 - common),
        rule: ctx.ledger ? () => `sum of ${terms} products (batch × positions) of normalised input and gradient` : "",
      },
    ];
    if (normBias !== undefined) {
      const biasSum = gradientSum(ctx.batch, positions, output);
      weightGradients.push({
        weight: "bias",
        q: biasSum,
        betweenQ: gradientBetween(ctx.batch, positions, output),
        coherentQ: terms * terms * output.q,
        terms,
        zeroFraction: 0,
        logVar: layer.family === "batch-norm" ? output.logVar + channelSums : sumLogVarOf(output, biasSum, terms * output.q, normBias.elements),
        rule: ctx.ledger ? () => `sum of ${terms} gradients (batch × positions)` : "",
      });
    }
    const input: Gradient = {
      q: ratio * spread * output.q,
      zeroFraction: layer.family === "rms-norm" ? output.zeroFraction : 0,
      shape: "gaussian",
      logVar: output.logVar + (layer.family === "batch-norm" ? 0 : stash.input.logVar),
    };
    if (curvature !== undefined && layer.family !== "batch-norm") {
      input.curvature = normPullback(curvature, ratio, stash.normalisedSecond);
      // a layer norm's Jacobian ends in the centring P = I − 1·1ᵀ/n, so P·M·P has rows summing to zero (its definition)
      if (layer.family === "layer-norm") input.curvature.centred = true;
    }
    if (channels !== undefined) input.channelGate = { derivativeSecond: channels.gate, pair: channels.pair, positionPair: channels.positionPair, correction: channels.correction };
    // batch norm's Jacobian removes each feature's batch mean from the gradient (Ioffe & Szegedy 2015, backward pass)
    if (layer.family === "batch-norm") input.shared = 0;
    // two samples divide by their own s: E[1/s]² = E[1/s²]·e^(−V/4) for log-normal s² (as in sampleSpread)
    // less the part of a dense layer's pair along each sample's own output (Curvature.alignedPair): the Jacobian
    // (g/s)·(I − x̂·x̂ᵀ/n) removes it whole (own algebra; a 4-output squared-error head over an RMS norm: the norm took
    // the gradient's sample correlation from 0.0102 to 0.0086, 600 draws, where it passed it on unchanged)
    else if (output.shared !== undefined) input.shared = ratio * spread ** 0.75 * Math.max(output.shared - (curvature?.alignedPair ?? 0), 0);
    // the shared part is the output's, times the draw's statistic, whose spread the whole gradient gains too (own algebra)
    if (layer.family !== "batch-norm" && output.sharedLogVar !== undefined) input.sharedLogVar = output.sharedLogVar + (input.logVar - output.logVar);
    // positions keep what they share, less (batch norm) the part every sample shares, which the batch mean removes
    const sampleShare = layer.family === "batch-norm" ? Math.max(sampleCorrelationOf(output), 0) : 0;
    input.positionCorrelation = sampleShare < 1 ? Math.max(positionCorrelationOf(output) - sampleShare, 0) / (1 - sampleShare) : 0;
    if (layer.family === "batch-norm" && terms > positions) {
      // and each channel's gradient sums to zero over batch × pixels (Ioffe & Szegedy 2015, backward pass): samples are
      // anti-correlated by what one sample's pixels share, −(1 + (P − 1)ρ_position)/((B − 1)·P)
      input.shared = (-input.q * (1 + (positions - 1) * input.positionCorrelation)) / (terms - positions);
    }
    return {
      input,
      factors: ctx.ledger
        ? [
            channels !== undefined
              ? factor(ratio, () => `${layer.family}: gain²·(mean over ${channelCount(layer)} channels of 1/(var_c + ε)) = ${fmt(ratio)}`, CHANNEL_SOURCE)
              : factor(
                  ratio * spread,
                  () => `${layer.family}: gain²/(var + ε)${spread > 1 ? `·E[(var + ε)/s²] = ${fmt(ratio)}·${fmt(spread)}` : ` = ${fmt(ratio)}`}`,
                  spread > 1 ? SPREAD_SOURCE : SOURCE,
                ),
          ]
        : NO_FACTORS,
      inner: [],
      weightGradients,
    };
  },
};

/**
 * E[c²] of two samples' output cosine (Signal.correlationSquare) from the input's E[c²] and mean c̄ = shared/q. The
 * centring takes the same r·q (r = removed/q: a layer norm's μ², each sample's mean over its features; a batch norm's
 * batch mean²) off every dot product of two samples and off every squared norm, so each pair's cosine maps linearly,
 * c' = (c − r)/(1 − r); the division by each sample's own statistic leaves a cosine as it is (an RMS norm: r = 0). The
 * gain, equal on every feature at initialisation, and the bias map it as a dense layer's weights and bias do, a·c' + b
 * with a, b their shares of the output's q (the definitions of the layers; own algebra). Without this the next dense
 * layer took the samples as alike as one sample (D = 1 in its batch spread, V = 2/width).
 */
export function normCosineSquare(cosineSquare: number, mean: number, removed: number, a: number, b: number): number {
  const keep = 1 - removed;
  const centredMean = (mean - removed) / keep;
  const centredSquare = Math.max((cosineSquare - 2 * removed * mean + removed * removed) / (keep * keep), centredMean * centredMean);
  return Math.min(Math.max(a * a * centredSquare + 2 * a * b * centredMean + b * b, 0), 1);
}

function channelCount(layer: GraphLayer): number {
  return layer.input.layout === "image" ? layer.input.channels : 1;
}

/**
 * E[1/(s² + ε)]·(var + ε) for a layer or RMS norm, whose backward divides each sample by its own statistic s² (the
 * input's per-sample mean square): ln s² is N(−V/2, V) about its mean with V the input's finite-width spread (Hanin &
 * Nica 2019; SCIENCE.md §2.6), so E[1/s²] = e^V/E[s²], and ε shrinks the spread of ln(s² + ε) by ρ = var/(var + ε)
 * (own algebra: the log-normal's negative moment, and d ln(s² + ε)/d ln s² = ρ). 1 for batch norm, whose statistic sums
 * the whole batch. The curvature's part does not gain it: its δ·xᵀ holds x̂·x̂ᵀ, in which s cancels.
 */
function sampleSpread(layer: GraphLayer, stash: NormStash): number {
  if (layer.family === "batch-norm") return 1;
  const rho = stash.normalisedSecond;
  // a dense output's V counts its batch rms (2·D/width, D → 1/batch for unrelated samples); one sample's statistic is
  // one Gaussian quadratic form of the layer's width, D = 1 (the dense rule's own algebra for a batch of one)
  const fresh = stash.input.fresh;
  const perSample = stash.input.logVar + (fresh !== undefined && fresh.width > 0 ? Math.max(LINEAR_KAPPA - fresh.kappa, 0) / fresh.width : 0);
  return Math.exp(rho * rho * Math.max(perSample, 0));
}

/**
 * Curvature at the input of a layer or RMS norm, y = g·z/√(s² + ε) per position, for the weights below it: what they
 * sum is E[δ_z·zᵀ] = E[∂δ_z/∂z]·s² (Stein's lemma), with δ_z = Jᵀ·M·y. For Gaussian z of n features,
 * E[Jᵀ·M·y·zᵀ] = g²/(s² + ε)·s²·(M − ρ·(tr M·I + 2M)/n), ρ = s²/(s² + ε) (E[(uᵀMu)·u uᵀ] = (tr M·I + 2M)/(n(n + 2))
 * for u uniform on the sphere; the centring's one direction and the 2M/n are left out, as in the second-moment rule):
 * the norm's scale invariance takes the diagonal's mean ρ·tr M/n out of M (derived; M's diagonal entries taken as
 * independent draws, as in Curvature).
 */
export function normPullback(m: Curvature, ratio: number, rho: number): Curvature {
  const diagonalSquare = ratio * ratio * Math.max(m.diagonalSquare - (2 * rho - rho * rho) * m.diagonal * m.diagonal, 0);
  return {
    diagonal: ratio * (1 - rho) * m.diagonal,
    diagonalSquare,
    rowSquares: ratio * ratio * Math.max(m.rowSquares - m.diagonalSquare, 0) + diagonalSquare,
    indefinite: true,
  };
}
