/**
 * Dense layer, y = W x + b with W [out, in]: forward q_out = fan_in·var_w·E[x²] + var_b (Poole et al. 2016),
 * backward E[δ_in²] = fan_out·var_w·E[δ_out²] (Schoenholz et al. 2017), weight gradient a sum of
 * batch × positions products of input and gradient.
 */
import { positionCount, sampleElements } from "../../graph/shape.js";
import type { GraphLayer } from "../../graph/types.js";
import { LINEAR_KAPPA, NO_FACTORS, NO_INNER, NO_INNER_GRADIENTS, SOURCES, accumulationInto, backwardInto, betweenBatches, forwardInto, correlatedSum, crossCorrelationOf, factor, fmt, hazardInput, keepMarks, linearGradient, linearOutput, linearSumsInto, maybeWeight, pairCorrelationsInto, positionCorrelationOf, sampleCorrelationOf, sharedOf, transposedHazard, weightOf, weightSumHazard, CountWords } from "../common.js";
import { linearUnitKappa, unitPairs } from "../unit-pairs.js";
import { mappedExcess, sequenceExcessOf } from "../sequence-excess.js";
import type { Text, AnalyticRule, BackwardResult, Curvature, ForwardResult, Gradient, OpContext, Signal, UnitPairs, WeightGradientMoment } from "../types.js";

/** What the dense backward rule needs from the forward pass. */
export interface DenseStash {
  input: Signal;
  output: Signal;
}

export const denseRule: AnalyticRule<DenseStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<DenseStash> {
    return linearForward(ctx, layer, input, "dense");
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: DenseStash, output: Gradient): BackwardResult {
    const w = weightOf(layer, "weight");
    const variance = ctx.variance(w);
    const gain = variance * w.fanOut;
    const inWidth = w.fanIn;
    return linearBackward(ctx, layer, stash, output, gain, ctx.ledger ? denseBackwardRule(gain) : "", inWidth, variance);
  },
};

/** Forward rule shared by dense and conv2d (conv's fan-in is in-channels × k²). */
export function linearForward(ctx: OpContext, layer: GraphLayer, input: Signal, kind: string): ForwardResult<DenseStash> {
  const w = weightOf(layer, "weight");
  const bias = maybeWeight(layer, "bias");
  const variance = ctx.variance(w);
  const biasVariance = bias === undefined ? 0 : ctx.variance(bias);
  const gain = variance * w.fanIn;
  const q = gain * input.q + biasVariance;
  const outWidth = w.shape[0] ?? 1;
  // each output feature's mean over the batch is Σ_i W_ji·(mean of input i): its square averages to fan_in·var_w·shared_in
  const output = linearOutput(q, input.logVar, outWidth, gain * sharedOf(input) + biasVariance);
  const positions = positionCount(layer.output);
  if (layer.family === "dense" && positions > 1 && q > 0 && input.q > 0) positionSpread(ctx.batch, positions, w.fanIn, input, output, gain * input.q / q, biasVariance / q);
  else if (layer.family === "dense" && q > 0 && input.q > 0) batchSpread(output, input, ctx.batch, gain * input.q / q, biasVariance / q, input.correlationSquare ?? droppedCosineSquare(input, w.fanIn));
  // two positions' outputs share Σ_i W_ji²·E[x_p,i x_p',i] and the bias: the input's correlation, diluted by the bias
  if (q > 0) output.positionCorrelation = (gain * input.q * positionCorrelationOf(input) + biasVariance) / q;
  if (layer.family === "dense" && q > 0) {
    // Cov(z_i, z_j) = Σ_kl W_ik·W_jl·Cov(x_k, x_l) with independent weights: E[·²] = var_w²·Σ_kl Cov_kl², a row of Cov
    // holding var(x)² on its diagonal and (fan_in − 1) covariances off it (derived)
    const varianceX = Math.max(input.q - sharedOf(input), 0);
    const row = varianceX * varianceX + (w.fanIn - 1) * (input.featureCovariance ?? 0) * input.q * input.q;
    output.featureCovariance = (variance * variance * w.fanIn * row) / (q * q);
    // the same matrix maps the deviations of every sequence (mappedExcess); a bias moves only what positions share
    if (positions > 1) output.sequenceExcess = mappedExcess(sequenceExcessOf(input, w.fanIn), w.fanIn, outWidth);
  }
  const ratio = input.q > 0 ? q / input.q : 0;
  const perSample = layer.output.layout === "image" ? layer.output.channels * layer.output.height * layer.output.width : outWidth * positionCount(layer.output);
  const records = ctx.ruleRecords;
  const factors = ctx.ledger ? [factor(ratio, linearForwardRule(kind, gain, biasVariance), SOURCES.lengthMap)] : NO_FACTORS;
  if (records !== undefined) {
    const hazards = accumulationInto(records, input, input.q * variance, ctx.batch * perSample * w.fanIn, output, ctx.batch * perSample, w.fanIn, ctx.details ? accumulationDetail(kind, w.fanIn) : "");
    return forwardInto(records, output, factors, "pre-activation", NO_INNER, hazards, { input, output });
  }
  return {
    output,
    factors,
    role: "pre-activation",
    inner: NO_INNER,
    hazards: [
            {
              kind: "accumulation",
              input: hazardInput(input, input.q * variance, "gaussian"),
              inputElements: ctx.batch * perSample * w.fanIn,
              output,
              outputElements: ctx.batch * perSample,
              terms: w.fanIn,
              guarded: false,
              detail: ctx.details ? accumulationDetail(kind, w.fanIn) : "",
            },
          ],
    stash: { input, output },
  };
}

/**
 * E[c''²] of two vectors' cosine after a random map over `width` independent units, from E[c'²] = s: the variance of a
 * sample correlation, (1 − c'²)²/n (Fisher 1915), added to leading order
 */
function fisherSquare(s: number, width: number): number {
  return Math.min(s + ((1 - s) * (1 - s)) / width, 1);
}

/**
 * E[c²] of two samples' cosine where a family between dropped it (a convolution stack's pool and flatten): its mean
 * c̄ = shared/q squared, spread by Fisher's (1 − c̄²)²/fan_in (Fisher 1915), as positionSpread floors it
 */
function droppedCosineSquare(input: Signal, fanIn: number): number {
  const mean = Math.min(Math.max(sharedOf(input) / input.q, -1), 1);
  return fisherSquare(mean * mean, fanIn);
}

/** A pair class's E[c²]: its mean's square plus its variance (at most 1). */
function classSquare(pairs: { mean: number; deviation: number }): number {
  return Math.min(pairs.mean * pairs.mean + pairs.deviation * pairs.deviation, 1);
}

/**
 * The standard deviation of a pair class's cosines about `mean`: what the carried E[c²] holds beyond the mean
 * (`excess`), at least Fisher's (1 − c̄²)²/fan of `fan` features (Fisher 1915)
 */
function fisherDeviation(mean: number, excess: number, fan: number): number {
  return Math.sqrt(Math.max(excess, (1 - mean * mean) ** 2 / Math.max(fan, 1)));
}

/**
 * The finite-width spread of a dense layer's output over a batch of N samples (one position each), and the spread of
 * the samples' cosines it passes on. Given the input, each output unit's batch vector (w·x_n + b)_n is Gaussian with
 * covariance G (G_nm = var_w·x_n·x_m + var_b), so its batch sum of squares has Var/E² = 2·tr G²/(tr G)² = 2·D with
 * D = 1/N + (1 − 1/N)·E[c²], c the pairs' cosine (moments of a Gaussian quadratic form; own algebra), not 2 as for one
 * sample: D → 1 when the samples are alike (a deep ReLU stack's shared mean) and → 1/N for unrelated ones. A following
 * activation replaces the κ counted here by its own (pointwiseForward). The cosine of two samples' outputs has mean
 * c' = a·c + b (a, b the weights' and bias's shares of q) and, over the width's n independent units, the variance of a
 * sample correlation, (1 − c'²)²/n (Fisher 1915), so E[c''²] = E[c'²] + (1 − E[c'²])²/n to leading order.
 */
function batchSpread(output: Signal, input: Signal, batch: number, a: number, b: number, s: number): void {
  const fresh = output.fresh;
  const width = fresh?.width ?? 1;
  const rho = input.q > 0 ? Math.min(Math.max(sharedOf(input) / input.q, -1), 1) : 0;
  const mapped = Math.min(Math.max(a * a * s + 2 * a * b * rho + b * b, 0), 1);
  const D = batch > 1 ? 1 / batch + (1 - 1 / batch) * mapped : 1;
  output.logVar = input.logVar + (LINEAR_KAPPA * D) / width;
  // linearOutput's own record, made for this output alone: its κ set in place
  if (fresh !== undefined) fresh.kappa = LINEAR_KAPPA * D;
  else output.fresh = { width, kappa: LINEAR_KAPPA * D };
  output.correlationSquare = fisherSquare(mapped, width);
  // the batch mean of each unit, w·x̄ + b, is one Gaussian: its square keeps Var/E² = 2 per unit, D = 1
  output.sharedLogVar = (input.sharedLogVar ?? input.logVar) + LINEAR_KAPPA / width;
}

/**
 * batchSpread over positions: a unit's weights serve every position of every sample, so its sum of squares is a
 * Gaussian quadratic form over T = batch × positions terms, Var/E² = 2·(1/T + the pairs' mean E[c²]) (moments of a
 * Gaussian quadratic form; own algebra, as a convolution's channel), the pairs of one sample's positions and of two
 * samples each with their mean cosine and a spread about it: what the carried E[c²] holds beyond the mean, at least the
 * (1 − c̄²)²/fan_in of fan_in features (Fisher 1915). The pairs go on to the activation (UnitPairs); the batch mean of
 * each unit keeps Var/E² = 2 per unit, and two samples' cosines gain Fisher's spread over the width, as batchSpread's
 */
function positionSpread(batch: number, positions: number, fanIn: number, input: Signal, output: Signal, a: number, b: number): void {
  const fresh = output.fresh;
  if (fresh === undefined) return;
  const rho = sampleCorrelationOf(input);
  const excess = input.correlationSquare === undefined ? 0 : Math.max(input.correlationSquare - rho * rho, 0);
  const pairs = (mean: number): { mean: number; deviation: number } => ({ mean: a * mean + b, deviation: a * fisherDeviation(mean, excess, fanIn) });
  const unit = unitPairs(batch, positions, pairs(positionCorrelationOf(input)), pairs(rho));
  const kappa = linearUnitKappa(unit);
  const width = fresh.width;
  output.logVar = input.logVar + kappa / width;
  output.fresh = { width, kappa, unit };
  const mapped = classSquare(unit.other);
  output.correlationSquare = fisherSquare(mapped, width);
  output.sharedLogVar = (input.sharedLogVar ?? input.logVar) + LINEAR_KAPPA / width;
}

/**
 * batchSpread for a transposed map: Σ_n ‖Wᵀδ_n‖² has Var/E² = 2·D/width with D from the gradient vectors' cosines,
 * which the map keeps on average and spreads by Fisher's (1 − c²)²/width. A gradient that carries e of the output's
 * own spread (Gradient.coupling) meets that spread again here: the output is b·x for the very vector b = Wᵀ·(…) whose
 * norm this map sets (a width-1 output, where b̂ is independent of ‖b‖ for Gaussian weights), so Var(e·ln‖y‖² + ln‖b‖²)
 * gains 2e·Var(ln‖b‖²), at most the output's ln-variance in all (Cauchy–Schwarz) (own algebra)
 */
function backwardBatchSpread(input: Gradient, output: Gradient, batch: number, width: number): void {
  const s = output.cosineSquare as number;
  const D = batch > 1 ? 1 / batch + (1 - 1 / batch) * s : 1;
  const own = (LINEAR_KAPPA * D) / width;
  input.logVar = output.logVar + own;
  // linearGradient's own record, made for this gradient alone: its κ set in place
  const fresh = input.fresh;
  if (fresh !== undefined && fresh.width === width && fresh.unit === undefined) fresh.kappa = LINEAR_KAPPA * D;
  else input.fresh = { width, kappa: LINEAR_KAPPA * D };
  input.cosineSquare = fisherSquare(s, width);
  const coupling = output.coupling;
  if (coupling !== undefined) {
    const met = Math.min(own, coupling.budget);
    input.logVar += 2 * coupling.elasticity * met;
    input.coupling = { elasticity: coupling.elasticity, budget: coupling.budget - met };
  }
}

/**
 * The pairs of the batch × positions terms of a gradient δ_out that a transposed map sums in each input unit: two
 * positions of one sample and two samples (at one position in P, at two otherwise), each class's cosines spread about
 * their mean by what the carried E[c²] holds beyond it (`carry`), at least Fisher's (1 − c̄²)²/fan_out of fan_out
 * features (Fisher 1915)
 */
export function gradientPairs(batch: number, positionsOut: number, positionsIn: number, fanOut: number, output: Gradient, carry: boolean): UnitPairs {
  const other = (sampleCorrelationOf(output) + (positionsOut - 1) * crossCorrelationOf(output)) / positionsOut;
  const excess = carry && output.cosineSquare !== undefined ? Math.max(output.cosineSquare - other * other, 0) : 0;
  const pairs = (mean: number): { mean: number; deviation: number } => ({ mean, deviation: fisherDeviation(mean, excess, fanOut) });
  return unitPairs(batch, positionsIn, pairs(positionCorrelationOf(output)), pairs(other));
}

/**
 * The input gradient's unit sums over batch × positions the same way as a forward unit: δ_in = Σ w·δ_out over the
 * fan_out weights of that input unit (out-channels × k² for a convolution), a Gaussian quadratic form in them over the
 * gradient's pairs (gradientPairs; own algebra, as positionSpread). `carry`: the cosines' E[c²] goes on below, with
 * Fisher's spread over this width (as backwardBatchSpread)
 */
export function transposedUnitSpread(input: Gradient, output: Gradient, width: number, unit: UnitPairs, carry: boolean): void {
  const kappa = linearUnitKappa(unit);
  const before = input.logVar;
  input.logVar = output.logVar + kappa / width;
  input.fresh = { width, kappa, unit };
  if (input.sharedLogVar !== undefined) input.sharedLogVar += input.logVar - before;
  if (!carry) return;
  const mapped = classSquare(unit.other);
  input.cosineSquare = fisherSquare(mapped, width);
}

/**
 * ln-variance over draws of a sum over the batch of terms with moments `delta` (times an input with none of its own),
 * a tensor of `elements` sums: the part beyond the independent terms' (`independent` of `sum`) is what the samples
 * share, with the shared part's spread; the independent part's mean square over the elements, each a Gaussian sum of
 * its own, is a chi-square of that many, Var/E² = 2/elements beyond the gradient's scale (a narrow head's bias); the two
 * interpolated by the shared part's share, exact when either part is the whole (own algebra)
 */
export function sumLogVarOf(delta: Gradient, sum: number, independent: number, elements: number): number {
  const own = delta.logVar + (elements > 0 ? LINEAR_KAPPA / elements : 0);
  if (!(sum > 0)) return own;
  const w = Math.min(Math.max(1 - independent / sum, 0), 1);
  return own + w * ((delta.sharedLogVar ?? delta.logVar) - own);
}

/** Backward rule shared by dense and conv2d: δ_in = Wᵀ δ_out, plus the weight and bias gradients. */
export function linearBackward(
  ctx: OpContext,
  layer: GraphLayer,
  stash: DenseStash,
  output: Gradient,
  gain: number,
  rule: Text,
  inWidth: number,
  variance: number,
): BackwardResult {
  const positions = positionCount(layer.output);
  const terms = ctx.batch * positions;
  // the batch × positions sum is partly coherent: pairs of terms add E[x x']·E[δ δ'], the parts samples and positions share
  const x = stash.input;
  // a row (column) of the weight gradient is exactly zero when its unit's gradient (input) is zero at every term
  const deltaZero = output.allZero ?? 0;
  const curvature = output.curvature;
  // the loss's curvature through these weights: N·M·W·E[x xᵀ] in every micro-batch (see Curvature), E[x xᵀ] taken as
  // E[x²]·I (what the samples share of x is in gradientSum's pairs)
  // (a convolution's kernel pairs neighbouring positions, which this per-position count does not cover: none there)
  // E[x xᵀ]'s row: E[x²]² on the diagonal and the covariances of the (fan_in − 1) other features off it (featureCovariance)
  const aligned = curvature === undefined || layer.family !== "dense" ? 0 : terms * terms * x.q * x.q * (1 + (inWidth - 1) * (x.featureCovariance ?? 0)) * variance * curvature.rowSquares;
  // the pair correlations of input and gradient, read once for the weight's and the bias's sums: gradientSum and
  // gradientBetween (src/ops/common.ts) inlined, the same arithmetic on the same six. Calling them made predict 2–7%
  // slower on the 1,000-layer bench spec (measured Dec 2026: both builds in one process, called alternately on 100 fresh
  // variants with a young generation large enough that no collection fell in a call, 4 runs in both orders)
  const pairs = BACKWARD_PAIRS;
  pairCorrelationsInto(x, pairs, 0);
  pairCorrelationsInto(output, pairs, 3);
  const xSample = pairs[0] as number;
  const xPosition = pairs[1] as number;
  const xCross = pairs[2] as number;
  const dSample = pairs[3] as number;
  const dPosition = pairs[4] as number;
  const dCross = pairs[5] as number;
  const xq = x.q * output.q;
  let weightSum = correlatedSum(ctx.batch, positions, xq, xSample * dSample, xPosition * dPosition, xCross * dCross);
  const bias = maybeWeight(layer, "bias");
  if (output.homogeneousSum !== undefined && inWidth > 0 && variance > 0 && (bias === undefined || ctx.variance(bias) === 0)) {
    // Σ δ·xᵀ holds S·w/‖w‖² along the unit's own weights, S = Σ y·δ (Gradient.homogeneousSum), in place of one of
    // fan_in like directions; E[S²/‖w‖²] = E[S²]/(fan_in·var_w) as S ∝ ‖w‖ (own algebra)
    const fanIn = weightOf(layer, "weight").fanIn;
    weightSum = weightSum * (1 - 1 / fanIn) + output.homogeneousSum / (fanIn * fanIn * variance);
  }
  const records = ctx.ruleRecords;
  let weightMoment: WeightGradientMoment;
  const weightQ = weightSum + aligned;
  const weightBetween = betweenBatches(ctx.batch, positions, xq, xSample * dSample, xCross * dCross);
  const weightCoherent = terms * terms * x.q * output.q;
  const weightZero = 1 - (1 - deltaZero) * (1 - (x.allZero ?? 0));
  const weightLogVar = x.logVar + sumLogVarOf(output, weightSum, terms * x.q * output.q, weightOf(layer, "weight").elements);
  const weightRule = ctx.ledger ? weightSumRule(terms) : "";
  if (records !== undefined) {
    // the walk's record (OpContext.ruleRecords), every field written
    weightMoment = records.weight;
    weightMoment.q = weightQ;
    weightMoment.alignedQ = aligned;
    weightMoment.betweenQ = weightBetween;
    weightMoment.coherentQ = weightCoherent;
    weightMoment.terms = terms;
    weightMoment.zeroFraction = weightZero;
    weightMoment.logVar = weightLogVar;
    weightMoment.rule = weightRule;
  } else {
    weightMoment = { weight: "weight", q: weightQ, alignedQ: aligned, betweenQ: weightBetween, coherentQ: weightCoherent, terms, zeroFraction: weightZero, logVar: weightLogVar, rule: weightRule };
  }
  let weightGradients: WeightGradientMoment[];
  if (bias === undefined) weightGradients = records !== undefined ? records.weightOnly : [weightMoment];
  else {
    const biasSum = correlatedSum(ctx.batch, positions, output.q, dSample, dPosition, dCross);
    const biasBetween = betweenBatches(ctx.batch, positions, output.q, dSample, dCross);
    const biasLogVar = sumLogVarOf(output, biasSum, terms * output.q, bias.elements);
    const biasRule = ctx.ledger ? biasSumRule(terms) : "";
    if (records !== undefined) {
      const biasMoment = records.bias;
      biasMoment.q = biasSum;
      biasMoment.betweenQ = biasBetween;
      biasMoment.coherentQ = terms * terms * output.q;
      biasMoment.terms = terms;
      biasMoment.zeroFraction = deltaZero;
      biasMoment.logVar = biasLogVar;
      biasMoment.rule = biasRule;
      weightGradients = records.weightAndBias;
    } else {
      // one list of its final length (a push grew the list's store on every layer of both passes)
      weightGradients = [
        weightMoment,
        { weight: "bias", q: biasSum, betweenQ: biasBetween, coherentQ: terms * terms * output.q, terms, zeroFraction: deltaZero, logVar: biasLogVar, rule: biasRule },
      ];
    }
  }
  const input = linearGradient(gain * output.q, output.logVar, inWidth);
  if (layer.family === "dense" && positions > 1) transposedUnitSpread(input, output, inWidth, gradientPairs(ctx.batch, positions, positions, weightOf(layer, "weight").fanOut, output, true), true);
  else if (layer.family === "dense" && output.cosineSquare !== undefined) backwardBatchSpread(input, output, ctx.batch, inWidth);
  if (output.sharedLogVar !== undefined) input.sharedLogVar = output.sharedLogVar + (input.logVar - output.logVar);
  let selfRatio = 1;
  let selfPair = 0;
  if (curvature !== undefined && layer.family === "dense") {
    const outWidth = gain / variance;
    input.curvature = densePullback(curvature, variance, outWidth, inWidth);
    // δ_in holds Wᵀ·M·W·x: E[(Wᵀ·M·W·x)_i²] = v²·(E[(tr M)²] + (fan_in + 1)·n·r)·E[x²] (Isserlis' theorem, r the row
    // squares), where the independent-weights rule counts fan_out·v·E[(M·y)²] = v²·n·fan_in·r·E[x²]: add the difference
    const before = input.q;
    const traceSquare = traceSquareOf(curvature, outWidth);
    const selfSum = traceSquare + outWidth * (curvature.rowSquares - (curvature.skip?.rowSquares ?? 0));
    input.q += variance * variance * x.q * selfSum;
    if (before > 0) selfRatio = input.q / before;
    // two samples' Wᵀ·M·W·x_a and Wᵀ·M·W·x_b pair the same way, bilinear in x: E[x_a·x_b] in place of E[x²] (own
    // algebra). A deep ReLU stack's gradients gained 2–7% of sample correlation per dense layer, as this pair says
    // (measured Dec 2026, 16 draws). Right below a cross-entropy loss it is left out: a 4-class head gained 4% (60 draws)
    // where it says 21% (the seed p − y is M·z only to first order). Below a squared-error loss (δ = k·(y − t), exact)
    // it brings a 12-layer ReLU stack's top weight and bias gradients 0.04 binade nearer the measured (41 draws).
    // Inside a residual branch (M holding the skip's part) it is left out too: there a 64-block residual MLP's branch
    // weight gradients, already 0.1–1.2 binade above the measured, moved 0.1–0.26 further (9 draws, shrunk 4×)
    if (curvature.seed !== true && curvature.skip === undefined) {
      const pairScale = variance * variance * sharedOf(x);
      selfPair = pairScale * selfSum;
      if (selfPair > 0) {
        input.curvature.paired = true;
        input.curvature.alignedPair = pairScale * traceSquare;
      }
    }
  }
  if (output.shared !== undefined) input.shared = selfPair > 0 ? Math.min(gain * output.shared + selfPair, input.q) : gain * output.shared;
  input.positionCorrelation = dPosition;
  // weights shared across positions pair two positions of two samples with such pairs of the output gradient
  if (output.crossCorrelation !== undefined) input.crossCorrelation = output.crossCorrelation;
  // the sums this backward pass accumulates: the weight gradient over batch × positions, and δ_in = Wᵀ·δ_out over the
  // weight's fan-out (out-channels × k² for a convolution at stride 1, the most any input pixel meets)
  const w = weightOf(layer, "weight");
  const what = layer.family === "dense" ? "dense Wᵀ·δ" : "conv2d Wᵀ·δ";
  const hazards =
    records !== undefined
      ? linearSumsInto(records, ctx.details, w, x, output, terms, variance, input, ctx.batch * sampleElements(layer.input), what)
      : [weightSumHazard(ctx.details, w, "weight-gradient", x, output, terms), transposedHazard(ctx.details, variance, output, w.fanOut, input, ctx.batch * sampleElements(layer.input), "input", what)];
  const factors = ctx.ledger ? (selfRatio !== 1 ? [factor(gain, rule, SOURCES.backward), factor(selfRatio, SELF_RULE, SELF_SOURCE)] : [factor(gain, rule, SOURCES.backward)]) : NO_FACTORS;
  if (records !== undefined) {
    const result = backwardInto(records.linearBackward, input, factors, weightGradients);
    result.hazards = hazards;
    return result;
  }
  return { input, factors, inner: NO_INNER_GRADIENTS, weightGradients, hazards };
}

/** linearBackward's pair correlations of input and gradient (pairCorrelationsInto) */
const BACKWARD_PAIRS = new Float64Array(6);

/**
 * Curvature M' = Wᵀ·M·W of a dense layer's input, W [outWidth, inWidth] with independent entries of variance v:
 * E[M'_ii] = v·tr M, E[M'_ii²] = v²·(E[(tr M)²] + ‖M‖² + tr M²), E[M'_ij²] = v²·‖M‖² (Isserlis' theorem; the diagonal
 * of M taken as independent entries), tr M² = ‖M‖² for a symmetric M and ‖M‖² less the skip's non-symmetric part's
 * square otherwise (Curvature.skip).
 */
export function densePullback(m: Curvature, v: number, outWidth: number, inWidth: number): Curvature {
  const trace = outWidth * m.diagonal;
  const traceSquare = traceSquareOf(m, outWidth);
  const frobenius = outWidth * m.rowSquares;
  // own algebra: the skip's A = c·M·J̄ᵀ has tr A² = c²·tr(M·J̄ᵀ·M·J̄ᵀ) of mean zero, so its ‖A‖² enters the diagonal once
  const skip = m.skip === undefined ? 0 : outWidth * m.skip.rowSquares;
  const diagonalSquare = v * v * (traceSquare + 2 * frobenius - skip);
  const diagonal = v * trace;
  // a Gauss–Newton M' is positive semidefinite, so M'_ij² ≤ M'_ii·M'_jj (Cauchy–Schwarz): a row's squares are at most
  // E[M'_ii·tr M'], which the independent-entries count overshoots through many narrow layers
  const counted = diagonalSquare + (inWidth - 1) * v * v * frobenius;
  const rowSquares = m.indefinite === true ? counted : Math.min(counted, diagonalSquare + (inWidth - 1) * diagonal * diagonal);
  // (the pair marks, which linearBackward sets on it, are keys from the start: a key added later grows an out-of-object store)
  const pulled: Curvature = { diagonal, diagonalSquare, rowSquares, paired: undefined, alignedPair: undefined };
  keepMarks(m, pulled);
  // Wᵀ·A·W stays non-symmetric; E_i[Cov(x_i, (Wᵀg)_i)²] = v·fan_out·E[C²] against v·fan_in·E[C²] above, C_ja =
  // Cov(x_j, g_a) independent of W (own algebra)
  if (m.skip !== undefined) pulled.skip = { rowSquares: inWidth * v * v * skip, diagonalSquare: v * v * skip, covariance: (m.skip.covariance * outWidth) / inWidth };
  return pulled;
}

const SELF_RULE = "the loss's curvature: the gradient holds this layer's own input, Wᵀ·M·W·x";
const SELF_SOURCE = "Gauss–Newton part of the loss gradient at the start, where labels are independent of inputs; Isserlis' theorem over the weights (derived)";

// E[(tr M)²] for M n × n with independent diagonal entries
function traceSquareOf(m: Curvature, n: number): number {
  const trace = n * m.diagonal;
  return trace * trace + n * Math.max(m.diagonalSquare - m.diagonal * m.diagonal, 0);
}

// The wording makers below hold only the numbers they print: a closure made inside a rule would keep the rule's
// variables in a context allocated on every call, in the end pass too, where no wording is read.

function denseBackwardRule(gain: number): Text {
  return () => `dense: fan_out·var_w = ${fmt(gain)}`;
}

function linearForwardRule(kind: string, gain: number, biasVariance: number): Text {
  return () => `${kind}: fan_in·var_w = ${fmt(gain)}${biasVariance > 0 ? ` (+ bias variance ${fmt(biasVariance)})` : ""}`;
}

const ACCUMULATION_WORDS = new CountWords((kind, fanIn) => `${kind} products summed over ${fanIn} inputs per output`);

function accumulationDetail(kind: string, fanIn: number): Text {
  return ACCUMULATION_WORDS.of(kind, fanIn);
}

function weightSumRule(terms: number): Text {
  return () => `sum of ${terms} products (batch × positions) of input and gradient, plus the parts samples and positions share`;
}

function biasSumRule(terms: number): Text {
  return () => `sum of ${terms} gradients (batch × positions), plus the part they share`;
}
