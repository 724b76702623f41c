/**
 * Gated feed-forward, out = W_down·(φ(W_gate·x) ⊙ W_up·x): gate and up are Gaussian pre-activations
 * (Poole et al. 2016), the product has E[h²] = E[φ(g)²]·E[u²] for independent gate and up (at initialisation the
 * two projections are independent), and the down projection maps it back. The product of two Gaussians has
 * heavier tails than either (kurtosis 9 against 3), which the element maxima account for.
 * Backward: δ_up = φ(g)·δ_h, δ_gate = φ'(g)·u·δ_h, δ_x = W_gateᵀ δ_gate + W_upᵀ δ_up.
 */
import type { GraphLayer } from "../../graph/types.js";
import type { GatedFeedForwardLayer } from "../../spec/types.js";
import {
  NO_FACTORS,
  SOURCES,
  backwardSumHazard,
  crossCorrelationOf,
  diagonalPullback,
  factor,
  fmt,
  gradientSum,
  linearGradient,
  linearOutput,
  positionCorrelationOf,
  productTerms,
  sampleCorrelationOf,
  sharedOf,
  transposedHazard,
  weightOf,
  weightSumHazard,
} from "../common.js";
import type { Factor, AnalyticRule, BackwardResult, ForwardResult, Gradient, InnerGradient, OpContext, OpHazard, OpMixture, Signal, WeightGradientMoment } from "../types.js";
import { activationKappa } from "../activation/moments.js";
import { crossMoments } from "../activation/analytic.js";
import { densePullback } from "../dense/analytic.js";
import { gatedExcess, mappedExcess, sequenceExcessOf } from "../sequence-excess.js";

const SOURCE = "gated product of independent gate and up: E[φ(g)²]·E[u²] (mean field, Poole et al. 2016)";

/** What the gated feed-forward backward rule needs. */
export interface GatedStash {
  input: Signal;
  gate: Signal;
  up: Signal;
  product: Signal;
  /** E[φ(g)], E[φ(g)²] and E[φ'(g)²] */
  gateMean: number;
  gateSecond: number;
  gateDerivativeSecond: number;
  gateZeroFraction: number;
  /** two positions of one sample: E[φ(g)φ(g')] and E[φ'(g)φ'(g')] at the input's position correlation c, and c */
  positionCross: { value: number; derivative: number; correlation: number };
  /** two samples (at one position or two): the same at the input's sample correlation */
  sampleCross: { value: number; derivative: number; correlation: number };
}

// the gate activations whose value and derivative give scale mixtures (src/numeric/gated-mixture.ts): all but softmax
function isMixtureActivation(name: GatedFeedForwardLayer["activation"]): name is NonNullable<OpMixture["activation"]> {
  return name !== "softmax";
}

function slopeOf(spec: GatedFeedForwardLayer): number {
  // the spec has no slope for the gate; leaky-relu gates use the common default 0.01 (common practice)
  return spec.activation === "leaky-relu" ? 0.01 : 0;
}

function sizes(ctx: OpContext, layer: GraphLayer) {
  const spec = layer.spec as GatedFeedForwardLayer;
  const P = layer.input.layout === "features" ? layer.input.positions : 1;
  const D = layer.input.layout === "features" ? layer.input.features : 1;
  const hiddenShape = P === 1 ? [ctx.batch, spec.hidden] : [ctx.batch, P, spec.hidden];
  return { spec, P, D, hiddenShape, hiddenElements: ctx.batch * P * spec.hidden };
}

export const gatedFeedForwardRule: AnalyticRule<GatedStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<GatedStash> {
    const { spec, P, D, hiddenShape, hiddenElements } = sizes(ctx, layer);
    const wg = weightOf(layer, "gate");
    const wu = weightOf(layer, "up");
    const wd = weightOf(layer, "down");
    const gateGain = ctx.variance(wg) * wg.fanIn;
    const upGain = ctx.variance(wu) * wu.fanIn;
    const gate = linearOutput(gateGain * input.q, input.logVar, spec.hidden, gateGain * sharedOf(input));
    const up = linearOutput(upGain * input.q, input.logVar, spec.hidden, upGain * sharedOf(input));
    const m = ctx.moments(spec.activation, gate.q, slopeOf(spec));
    const kappa = activationKappa(m);
    // gate and up of two positions are correlated like the input (c); the product's share is E[φ(g)φ(g')]·c·E[u²]
    const correlation = positionCorrelationOf(input);
    gate.positionCorrelation = correlation;
    up.positionCorrelation = correlation;
    const crossed = crossMoments(spec.activation, slopeOf(spec), gate.q, correlation, m);
    const positionCross = { value: crossed.value, derivative: crossed.derivative, correlation };
    // two samples' gates are correlated by c_s = shared/q at every pair of positions (a signal's cross-sample part is
    // the same at all positions), so the product's cross-sample moment is E[φ(g_n)φ(g_m)]·E[u_n u_m] (gate and up
    // independent: own algebra), not E[φ]²·E[u_n u_m], which holds only at c_s = 0
    const sampleCorrelation = sampleCorrelationOf(gate);
    const sampleCrossed = crossMoments(spec.activation, slopeOf(spec), gate.q, sampleCorrelation, m);
    const sampleCross = { value: sampleCrossed.value, derivative: sampleCrossed.derivative, correlation: sampleCorrelation };
    // one unit's gate and up read the same input through weights w_g, w_u, so over the data E[φ(g)·u] =
    // E[φ'(g)]·Cov(g, u) (Stein's lemma) with Cov(g, u) = Σ_i w_g,i·w_u,i·Var(x_i): a mean of the unit the same for every
    // sample and position, of random sign over units, whose square averages D·var_g·var_u·Var(x)²·E[φ']² (own algebra)
    const variance = Math.max(input.q - sharedOf(input), 0);
    const stein = m.derivativeMean * m.derivativeMean * wg.fanIn * ctx.variance(wg) * ctx.variance(wu) * variance * variance;
    const product: Signal = {
      q: m.second * up.q,
      shared: sampleCross.value * (up.shared ?? 0) + stein,
      mean: 0,
      zeroFraction: m.zeroFraction,
      shape: "gaussian",
      tail: "product",
      // the product's squared norm fluctuates like the gate's activation times the up projection (κ_f + 2 per width)
      logVar: input.logVar + (kappa.forward + 2) / spec.hidden,
      gaussian: false,
    };
    // an all-zero input (a zero-initialised layer below) leaves u = 0 and the product 0, with nothing shared: no stein share.
    // The stein share is E[φ']²·q·Var(ĉ)/m₂ of a pair whose realised input cosine ĉ scatters about its mean (E[φφ'] is
    // linear in ĉ to first order, and the up pair brings a second ĉ, so the pair averages E[ĉ²] = c² + Var(ĉ)): two
    // samples (c = 0) scatter by 1/D, two positions of one sequence at c by (1 − c²)²/D, the variance of a sample
    // correlation over D coordinates (Fisher 1915), which vanishes as c → 1 (own algebra; the constant 1/D put the
    // product's position correlation 0.01 over the simulation's at the measured c of 0.6–0.9, 20 draws)
    const scatter = (1 - correlation * correlation) ** 2;
    if (m.second > 0) product.positionCorrelation = Math.min((positionCross.value * correlation) / m.second + (product.q > 0 ? (stein * scatter) / product.q : 0), 1);
    const downGain = ctx.variance(wd) * wd.fanIn;
    const output = linearOutput(downGain * product.q, product.logVar, D, downGain * (product.shared ?? 0));
    output.positionCorrelation = product.positionCorrelation ?? 0;
    // in one sequence each unit's gate and up sit at means of their own, which scale its deviations (gatedExcess)
    if (P > 1) {
      const gated = gatedExcess(spec.activation, slopeOf(spec), gate.q, up.q, correlation, sequenceExcessOf(input, D), D, spec.hidden);
      if (gated !== undefined) {
        product.sequenceExcess = gated.excess;
        output.sequenceExcess = mappedExcess(gated.excess, spec.hidden, D);
        output.sequenceLinear = gated.linearShare;
      }
    }
    const ledger = ctx.ledger ? forwardLedger(spec, gateGain, upGain, m.second, gate.q, downGain) : undefined;
    const termSignal = (s: Signal, v: number): Signal => ({ ...s, q: s.q * v, mean: 0 });
    return {
      output,
      factors: ledger?.output ?? NO_FACTORS,
      role: "activation",
      inner: [
        { suffix: "gate", role: "pre-activation", shape: hiddenShape, elements: hiddenElements, signal: gate, factors: ledger?.gate ?? NO_FACTORS },
        { suffix: "up", role: "pre-activation", shape: hiddenShape, elements: hiddenElements, signal: up, factors: ledger?.up ?? NO_FACTORS },
        { suffix: "product", role: "activation", shape: hiddenShape, elements: hiddenElements, signal: product, factors: ledger?.product ?? NO_FACTORS },
      ],
      hazards: [
        {
          kind: "accumulation",
          input: termSignal(input, ctx.variance(wg)),
          inputElements: hiddenElements * D,
          output: gate,
          outputElements: hiddenElements,
          terms: D,
          guarded: false,
          detail: ctx.details ? () => `gate and up projections summed over ${D} inputs` : "",
        },
        {
          kind: "accumulation",
          input: termSignal(product, ctx.variance(wd)),
          inputElements: hiddenElements * D,
          output,
          outputElements: ctx.batch * P * D,
          terms: spec.hidden,
          guarded: false,
          detail: ctx.details ? () => `down projection summed over ${spec.hidden} hidden units` : "",
        },
      ],
      stash: {
        input,
        gate,
        up,
        product,
        gateMean: m.mean,
        gateSecond: m.second,
        gateDerivativeSecond: m.derivativeSecond,
        gateZeroFraction: m.zeroFraction,
        positionCross,
        sampleCross,
      },
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: GatedStash, output: Gradient): BackwardResult {
    const { spec, P, D, hiddenShape, hiddenElements } = sizes(ctx, layer);
    const wg = weightOf(layer, "gate");
    const wu = weightOf(layer, "up");
    const wd = weightOf(layer, "down");
    const downGain = ctx.variance(wd) * wd.fanOut;
    const productGradient = linearGradient(downGain * output.q, output.logVar, spec.hidden);
    const upQ = stash.gateSecond * productGradient.q;
    const gateQ = stash.gateDerivativeSecond * stash.up.q * productGradient.q;
    // two positions: δ_up shares E[φ(g)φ(g')]·(δ_h's share), δ_gate E[φ'(g)φ'(g')]·c·E[u²]·(δ_h's share)
    const hShare = positionCorrelationOf(output);
    productGradient.positionCorrelation = hShare;
    // W_downᵀ is the same for every sample and position: two samples' gradients keep what they share, at one position
    // or two (as dense's backward)
    if (output.shared !== undefined) productGradient.shared = downGain * output.shared;
    if (output.crossCorrelation !== undefined) productGradient.crossCorrelation = output.crossCorrelation;
    const hSample = sampleCorrelationOf(productGradient);
    const hCross = crossCorrelationOf(productGradient);
    const cross = stash.positionCross;
    const samples = stash.sampleCross;
    const upGradient: Gradient = { q: upQ, zeroFraction: stash.gateZeroFraction, shape: "gaussian", logVar: productGradient.logVar };
    const gateGradient: Gradient = { q: gateQ, zeroFraction: stash.gateZeroFraction, shape: "gaussian", logVar: productGradient.logVar };
    // δ_up = δ_h·φ(g) and δ_gate = δ_h·u·φ'(g) are, given g and u, Gaussian: scale mixtures over |φ(g)| and |u·φ'(g)|
    // (src/numeric/gated-mixture.ts), not Gaussians of their rms, for a Gaussian δ_h; a ReLU gate's exact zeros (g ≤ 0)
    // are its zero fraction, its nonzero part the normal product δ_h·|g| or δ_h·u
    const name = spec.activation;
    const zerosKnown = stash.gateZeroFraction === 0 || name === "relu";
    if (productGradient.shape === "gaussian" && zerosKnown && stash.gate.q > 0 && isMixtureActivation(name)) {
      const slope = name === "leaky-relu" ? { slope: slopeOf(spec) } : {};
      upGradient.shape = "gaussian-mixture";
      upGradient.mixture = { activation: name, inputVariance: stash.gate.q, ...slope, of: "value" };
      gateGradient.shape = "gaussian-mixture";
      gateGradient.mixture = { activation: name, inputVariance: stash.gate.q, ...slope, of: "gate" };
    }
    upGradient.positionCorrelation = stash.gateSecond > 0 ? Math.min((cross.value * hShare) / stash.gateSecond, 1) : 0;
    gateGradient.positionCorrelation = stash.gateDerivativeSecond > 0 ? Math.min((cross.derivative * cross.correlation * hShare) / stash.gateDerivativeSecond, 1) : 0;
    // two samples, at one position or two: δ_up pairs share E[φ(g)φ(g')]·E[δ_h δ_h'], δ_gate pairs
    // E[φ'(g)φ'(g')]·c_s·E[u²]·E[δ_h δ_h'], the forward pair taken at the sample correlation c_s (a signal's
    // cross-sample part is the same at every pair of positions) and independent of the gradient (own algebra, with
    // the gradient independence of Schoenholz et al. 2017)
    const upPair = samples.value / Math.max(stash.gateSecond, 1e-300);
    const gatePair = (samples.derivative * samples.correlation) / Math.max(stash.gateDerivativeSecond, 1e-300);
    if (productGradient.shared !== undefined) {
      upGradient.shared = upPair * hSample * upQ;
      gateGradient.shared = gatePair * hSample * gateQ;
    }
    upGradient.crossCorrelation = stash.gateSecond > 0 ? Math.min(upPair * hCross, 1) : 0;
    gateGradient.crossCorrelation = stash.gateDerivativeSecond > 0 ? Math.min(gatePair * hCross, 1) : 0;
    const gateMap = ctx.variance(wg) * wg.fanOut;
    const upMap = ctx.variance(wu) * wu.fanOut;
    const gatePart = gateMap * gateQ;
    const upPart = upMap * upQ;
    const inputQ = gatePart + upPart;
    const ratio = productGradient.q > 0 ? inputQ / productGradient.q : 0;
    const ledger = ctx.ledger ? backwardLedger(stash, downGain, ratio) : undefined;
    const inner: InnerGradient[] = [
      { suffix: "product", shape: hiddenShape, elements: hiddenElements, gradient: productGradient, factors: ledger?.product ?? NO_FACTORS },
      { suffix: "up", shape: hiddenShape, elements: hiddenElements, gradient: upGradient, factors: ledger?.up ?? NO_FACTORS },
      {
        suffix: "gate",
        shape: hiddenShape,
        elements: hiddenElements,
        gradient: gateGradient,
        factors: ledger?.gate ?? NO_FACTORS,
      },
    ];
    const N = ctx.batch * P;
    const aligned = alignedParts(stash, output, N, D, spec.hidden, ctx.variance(wg), ctx.variance(wu), ctx.variance(wd));
    const wgm = (weight: string, x: Signal, delta: Gradient, alignedQ: number): WeightGradientMoment => ({
      weight,
      q: gradientSum(ctx.batch, P, delta, x) + alignedQ,
      alignedQ,
      coherentQ: N * N * x.q * delta.q,
      terms: N,
      zeroFraction: 0,
      logVar: stash.input.logVar + productGradient.logVar,
      rule: ctx.ledger ? () => `sum of ${N} products (batch × positions) of input and gradient, plus the parts positions and samples share` : "",
    });
    const input = linearGradient(inputQ, productGradient.logVar, D);
    input.positionCorrelation = inputQ > 0 ? (gatePart * (gateGradient.positionCorrelation ?? 0) + upPart * (upGradient.positionCorrelation ?? 0)) / inputQ : 0;
    // δ_x = W_gateᵀ δ_gate + W_upᵀ δ_up: the pair moments of the two paths add, as their second moments do (own algebra:
    // W_gate and W_up are independent, so the terms that pair one path with the other average to zero)
    if (productGradient.shared !== undefined) input.shared = gateMap * (gateGradient.shared ?? 0) + upMap * (upGradient.shared ?? 0);
    input.crossCorrelation = inputQ > 0 ? (gatePart * (gateGradient.crossCorrelation ?? 0) + upPart * (upGradient.crossCorrelation ?? 0)) / inputQ : 0;
    // the sums this backward pass accumulates: W_downᵀ·δ over D outputs, the three weight gradients over batch ×
    // positions, and δ_x = W_gateᵀ·δ_gate + W_upᵀ·δ_up over 2·hidden terms (each path's products at its own mean square)
    const details = ctx.details;
    const hazards: OpHazard[] = [
      transposedHazard(details, ctx.variance(wd), output, wd.fanOut, productGradient, hiddenElements, "activation-gradient:product", "gated down Wᵀ·δ"),
      weightSumHazard(details, wg, "weight-gradient:gate", stash.input, gateGradient, N),
      weightSumHazard(details, wu, "weight-gradient:up", stash.input, upGradient, N),
      weightSumHazard(details, wd, "weight-gradient:down", stash.product, output, N),
      backwardSumHazard(details, productTerms(inputQ / (2 * spec.hidden), stash.gateZeroFraction, productGradient.logVar), 2 * spec.hidden, input, N * D, "input", "gated gate and up Wᵀ·δ"),
    ];
    return {
      input,
      factors: ledger?.input ?? NO_FACTORS,
      inner,
      weightGradients: [
        wgm("gate", stash.input, gateGradient, aligned.gate),
        wgm("up", stash.input, upGradient, aligned.up),
        wgm("down", stash.product, output, aligned.down),
      ],
      hazards,
    };
  },
};

/**
 * The parts of the three weight gradients the loss's curvature M (at the layer's output) aligns, the same in every
 * micro-batch (see Curvature in ../types.ts): N²·E[x²]²·var_w·(row squares of the curvature the weights see). The down
 * projection sees M; the product's curvature is M_h = W_downᵀ·M·W_down; up sees diag(φ(g))·M_h·diag(φ(g)) (E[φ(g)²] on
 * its diagonal, E[φ(g)]² off it: independent units), gate diag(φ'(g)·u)·M_h·diag(φ'(g)·u) (E[φ'²]·E[u²] on the
 * diagonal; off it only the unit's own mean E[φ'(g)·u] = E[φ''(g)]·Cov(g, u), Stein's lemma as in the forward rule: of
 * random sign over units and of square O(1/D) against the diagonal's, so left out) (own algebra, as the activation's
 * pull-back)
 */
function alignedParts(stash: GatedStash, output: Gradient, N: number, D: number, hidden: number, wg: number, wu: number, wd: number): { gate: number; up: number; down: number } {
  const m = output.curvature;
  if (m === undefined) return { gate: 0, up: 0, down: 0 };
  const h = densePullback(m, wd, D, hidden);
  const upRows = diagonalPullback(h, stash.gateSecond, stash.gateMean * stash.gateMean).rowSquares;
  const gateDiagonal = stash.gateDerivativeSecond * stash.up.q;
  const x2 = stash.input.q * stash.input.q;
  return {
    down: N * N * stash.product.q * stash.product.q * wd * m.rowSquares,
    up: N * N * x2 * wu * upRows,
    gate: N * N * x2 * wg * gateDiagonal * gateDiagonal * h.diagonalSquare,
  };
}

/** The forward ledger factors, made only with a ledger: the gate, up and product tensors' and the output's. */
function forwardLedger(spec: GatedFeedForwardLayer, gateGain: number, upGain: number, productSecond: number, gateQ: number, downGain: number) {
  const upFactor = factor(upGain, () => `up: fan_in·var_w = ${fmt(upGain)}`, SOURCES.lengthMap);
  const productFactor = factor(productSecond, () => `gated product: E[${spec.activation}(g)²] = ${fmt(productSecond)} at q_gate = ${fmt(gateQ)}`, SOURCE);
  const downFactor = factor(downGain, () => `down: fan_in·var_w = ${fmt(downGain)}`, SOURCES.lengthMap);
  return {
    gate: [factor(gateGain, () => `gate: fan_in·var_w = ${fmt(gateGain)}`, SOURCES.lengthMap)],
    up: [upFactor],
    product: [upFactor, productFactor],
    output: [upFactor, productFactor, downFactor],
  } satisfies Record<string, Factor[]>;
}

/** The backward ledger factors, made only with a ledger: the product, up and gate gradients' and the input's. */
function backwardLedger(stash: GatedStash, downGain: number, ratio: number) {
  const downFactor = factor(downGain, () => `down: fan_out·var_w = ${fmt(downGain)}`, SOURCES.backward);
  const gateSecond = stash.gateSecond;
  const gateDerivativeSecond = stash.gateDerivativeSecond;
  const upQ = stash.up.q;
  return {
    product: [downFactor],
    up: [downFactor, factor(gateSecond, () => `up: E[φ(g)²] = ${fmt(gateSecond)}`, SOURCE)],
    gate: [downFactor, factor(gateDerivativeSecond * upQ, () => `gate: E[φ'(g)²]·E[u²] = ${fmt(gateDerivativeSecond)}·${fmt(upQ)}`, SOURCE)],
    input: [downFactor, factor(ratio, () => `gate and up paths back to the input = ${fmt(ratio)}`, SOURCES.backward)],
  } satisfies Record<string, Factor[]>;
}
