/**
 * 2-D convolution: a dense map per output pixel with fan-in in-channels × k² (SCIENCE.md §2.1: "conv is the same
 * with fan-in k²c"). Backward, each input pixel feeds out-channels × (output pixels per input pixel) × k² outputs,
 * which is out-channels × k² at stride 1. Zero padding leaves a border pixel fewer taps inside the image, both ways.
 */
import { positionCount, sampleElements } from "../../graph/shape.js";
import type { GraphLayer } from "../../graph/types.js";
import type { Conv2dLayer } from "../../spec/types.js";
import { crossCorrelationOf, factor, fmt, maybeWeight, positionCorrelationOf, sampleCorrelationOf, sharedOf, weightOf } from "../common.js";
import { type DenseStash, gradientPairs, linearBackward, linearForward, transposedUnitSpread } from "../dense/analytic.js";
import type { Text, AnalyticRule, BackwardResult, ForwardResult, Gradient, OpContext, Signal } from "../types.js";
import { linearUnitKappa, unitPairs } from "../unit-pairs.js";
import { conv2dGeometry } from "./kernel.js";

const PADDING_SOURCE = "zero padding: a border pixel sums only the taps inside the image (own algebra, the conv's definition)";

/** Per image axis, for each kernel tap, the number of output pixels at which that tap reads inside the image. */
export interface TapCounts {
  rows: number[];
  columns: number[];
  outRows: number;
  outColumns: number;
  kernel: number;
}

export function tapCounts(layer: GraphLayer): TapCounts | undefined {
  const spec = layer.spec as Conv2dLayer;
  if (layer.input.layout !== "image") return undefined;
  const g = conv2dGeometry(1, layer.input.channels, layer.input.height, layer.input.width, spec.channels, spec.kernel, spec.stride, spec.padding);
  const axis = (size: number, out: number, before: number): number[] => {
    const counts: number[] = [];
    for (let t = 0; t < g.kernel; t++) {
      let c = 0;
      for (let o = 0; o < out; o++) {
        const i = o * g.stride - before + t;
        if (i >= 0 && i < size) c++;
      }
      counts.push(c);
    }
    return counts;
  };
  return { rows: axis(g.height, g.outHeight, g.padTop), columns: axis(g.width, g.outWidth, g.padLeft), outRows: g.outHeight, outColumns: g.outWidth, kernel: g.kernel };
}

/**
 * Share of an output pixel's k² taps that read inside the image, averaged over output pixels (`inside`, 1 without
 * padding), and (1/k²)·Σ_k (c_k/P)² with c_k the output pixels at which tap k is inside (`channelMean`): a channel's
 * mean over the batch and pixels is Σ_k w_k·(c_k/P)·m for an input of mean m, whose square averages to
 * fan_in·var_w·m² times it (own algebra: independent weights).
 */
export function paddingShares(t: TapCounts): { inside: number; channelMean: number } {
  const axis = (counts: number[], out: number): { inside: number; channelMean: number } => {
    let sum = 0;
    let squares = 0;
    for (const c of counts) {
      sum += c;
      squares += (c / out) * (c / out);
    }
    return { inside: sum / (out * t.kernel), channelMean: squares / t.kernel };
  };
  const r = axis(t.rows, t.outRows);
  const c = axis(t.columns, t.outColumns);
  return { inside: r.inside * c.inside, channelMean: r.channelMean * c.channelMean };
}

/**
 * One channel's sum of squares over the T = batch × pixels terms, Σ_t (w_c·p_t + b_c)², is a Gaussian quadratic form
 * in the channel's own weights: Var/E² = 2·tr G²/(tr G)² = 2·(1/T + the pairs' mean E[c²]), c the cosine of two
 * terms' patches with the bias (moments of a Gaussian quadratic form, as the dense layer's batch spread); a patch of
 * fan_in values whose mean cosine is c̄ spreads by (1 − c̄²)²/fan_in about it (Fisher 1915). For unrelated patches it
 * is about 2/fan_in, where a dense map's one-sample rule counts 2 per channel (own algebra; He et al. 2015
 * initialisation: ‖w_c‖² is var·χ² of fan_in). The channels are independent given the input, so the tensor's mean
 * square gains this κ/channels in ln-variance (Hanin & Nica 2019's κ/width, with the channel's κ), and the pairs go on
 * to the activation, which sums its own f(w_c·p_t) over the same terms (UnitPairs)
 */
function unitSpread(ctx: OpContext, layer: GraphLayer, input: Signal, output: Signal): void {
  const fresh = output.fresh;
  if (fresh === undefined || !(output.q > 0) || !(input.q > 0)) return;
  const w = weightOf(layer, "weight");
  const biasWeight = maybeWeight(layer, "bias");
  const b = (biasWeight === undefined ? 0 : ctx.variance(biasWeight)) / output.q;
  const a = 1 - b;
  const fanIn = Math.max(w.fanIn, 1);
  const overlap = paddedOverlap(layer);
  // the cosine of two zero-padded patches is the unpadded one times f (see paddedOverlap): its mean and E[c²] over the
  // pairs, each weighted by the two terms' variances (own algebra)
  const pairs = (mean: number, f: OverlapMoments): { mean: number; deviation: number } => {
    const deviation = (a * (1 - mean * mean)) / Math.sqrt(fanIn);
    const m = a * mean * f.mean + b;
    const square = a * a * mean * mean * f.square + deviation * deviation * f.square + 2 * a * b * mean * f.mean + b * b;
    return { mean: m, deviation: Math.sqrt(Math.max(square - m * m, 0)) };
  };
  const unit = unitPairs(ctx.batch, positionCount(layer.output), pairs(positionCorrelationOf(input), overlap.same), pairs(sampleCorrelationOf(input), overlap.other));
  const kappa = linearUnitKappa(unit);
  output.logVar = input.logVar + kappa / fresh.width;
  output.fresh = { width: fresh.width, kappa, unitKappa: kappa, unit };
}

/** A pair class's mean of f and of f² (weighted as in paddedOverlap). */
interface OverlapMoments {
  mean: number;
  square: number;
}

const NO_PADDING = { same: { mean: 1, square: 1 }, other: { mean: 1, square: 1 } };

/**
 * Two output pixels t, t' read their patches' taps inside the image, S_t and S_t' (zero padding), so the cosine of the
 * two patches over the weights is the unpadded patches' times f = |S_t ∩ S_t'|/√(|S_t|·|S_t'|), and a pair's term
 * variances weigh by |S_t|·|S_t'| in the channel's sum (Var/E² of Σ_t u_t² is Σ_tt' q_t·q_t'·g(c_tt')/(Σ_t q_t)²; exact
 * for a positively homogeneous activation's g). The moments of f over two pixels of one sample (t ≠ t', `same`) and over
 * any two pixels of two samples (`other`); the sets are products of one interval per axis, so each sum is the product of
 * the axes' (own algebra). Without padding f = 1.
 */
function paddedOverlap(layer: GraphLayer): { same: OverlapMoments; other: OverlapMoments } {
  const spec = layer.spec as Conv2dLayer;
  if (layer.input.layout !== "image" || spec.padding === "valid" || spec.padding === 0) return NO_PADDING;
  const g = conv2dGeometry(1, layer.input.channels, layer.input.height, layer.input.width, spec.channels, spec.kernel, spec.stride, spec.padding);
  // per axis: Σ_oo' √(n_o·n_o')·m_oo', Σ_oo' m_oo'², (Σ_o n_o)² and Σ_o n_o², n_o the taps inside at output o and m_oo'
  // the taps inside at both
  const axis = (size: number, out: number, before: number): { root: number; square: number; all: number; diagonal: number } => {
    const lo: number[] = [];
    const hi: number[] = [];
    for (let o = 0; o < out; o++) {
      const start = o * g.stride - before;
      lo.push(Math.max(0, -start));
      hi.push(Math.min(g.kernel - 1, size - 1 - start));
    }
    let root = 0;
    let square = 0;
    let total = 0;
    let diagonal = 0;
    for (let o = 0; o < out; o++) {
      const n = Math.max(hi[o]! - lo[o]! + 1, 0);
      total += n;
      diagonal += n * n;
      for (let p = 0; p < out; p++) {
        const both = Math.max(Math.min(hi[o]!, hi[p]!) - Math.max(lo[o]!, lo[p]!) + 1, 0);
        root += Math.sqrt(n * Math.max(hi[p]! - lo[p]! + 1, 0)) * both;
        square += both * both;
      }
    }
    return { root, square, all: total * total, diagonal };
  };
  const r = axis(g.height, g.outHeight, g.padTop);
  const c = axis(g.width, g.outWidth, g.padLeft);
  const all = r.all * c.all;
  const diagonal = r.diagonal * c.diagonal;
  if (!(all > 0)) return NO_PADDING;
  const other = { mean: (r.root * c.root) / all, square: (r.square * c.square) / all };
  const apart = all - diagonal;
  const same = apart > 0 ? { mean: (r.root * c.root - diagonal) / apart, square: (r.square * c.square - diagonal) / apart } : other;
  return { same, other };
}

export const conv2dRule: AnalyticRule<DenseStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<DenseStash> {
    const result = linearForward(ctx, layer, input, "conv2d");
    unitSpread(ctx, layer, input, result.output);
    const taps = tapCounts(layer);
    if (taps === undefined) return result;
    const { inside, channelMean } = paddingShares(taps);
    const out = result.output;
    const w = weightOf(layer, "weight");
    const biasWeight = maybeWeight(layer, "bias");
    const bias = biasWeight === undefined ? 0 : ctx.variance(biasWeight);
    // E[y_p²] = var_w·Σ_{taps inside at p} E[x²]: the weights' part of q, its per-pixel mean² and what two pixels share
    // scale by the share of taps inside (own algebra: independent weights, zero padding)
    const weighted = out.q - bias;
    const sharedWeighted = Math.max(sharedOf(out) - bias, 0);
    const before = out.q;
    out.q = weighted * inside + bias;
    out.shared = sharedWeighted * inside + bias;
    // the channel's mean over batch and pixels weighs tap k by the share of pixels it reaches (own algebra, see paddingShares)
    const gain = ctx.variance(w) * w.fanIn;
    const channelIn = input.channelShared ?? sharedOf(input);
    out.channelShared = Math.min(gain * channelIn * channelMean + bias, out.shared);
    // two pixels share the input's fluctuation part through the taps inside, and the per-pixel means as the pairs of an
    // average over all P² pixel pairs (the channel's mean²) less its P diagonal ones: (P·channel − per-pixel)/(P − 1)
    const pixels = taps.outRows * taps.outColumns;
    const fluctuation = gain * inside * Math.max(positionCorrelationOf(input) * input.q - sharedOf(input), 0);
    const means = pixels > 1 ? Math.max((pixels * (out.channelShared - bias) - (out.shared - bias)) / (pixels - 1), 0) : out.shared - bias;
    if (out.q > 0) out.positionCorrelation = Math.min((fluctuation + means + bias) / out.q, 1);
    if (inside < 1 && ctx.ledger) {
      return { ...result, factors: [...result.factors, factor(before > 0 ? out.q / before : 0, () => `conv2d: share of taps inside the padded image = ${fmt(inside)}`, PADDING_SOURCE)] };
    }
    return result;
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: DenseStash, output: Gradient): BackwardResult {
    const w = weightOf(layer, "weight");
    const inChannels = w.shape[1] ?? 1;
    const taps = tapCounts(layer);
    const inside = taps === undefined ? 1 : paddingShares(taps).inside;
    // connections per input element = (output elements × in-channels × k² × share of taps inside) / input elements
    const connections = (sampleElements(layer.output) * w.fanIn * inside) / sampleElements(layer.input);
    const variance = ctx.variance(w);
    const gain = variance * connections;
    const result = linearBackward(ctx, layer, stash, output, gain, ctx.ledger ? conv2dBackwardRule(connections, variance, gain) : "", inChannels, variance);
    if (result.input !== undefined) transposedUnitSpread(result.input, output, inChannels, gradientPairs(ctx.batch, positionCount(layer.output), positionCount(layer.input), w.fanOut, output, false), false);
    if (taps === undefined) return result;
    const pixels = taps.outRows * taps.outColumns;
    const leak = borderLeak(ctx.batch, taps, output);
    if (leak !== 0 && result.input !== undefined) leakChannelSum(ctx.batch, variance * (w.shape[0] ?? 1) * leak, result.input, layer);
    // tap k's weight gradient sums x·δ over V_k only, where the rule counts every output pixel: its second moment is
    // the same sum over v_k pixels (pairs paired as in gradientSum), averaged over the k² taps (own algebra)
    const weightGradient = result.weightGradients[0];
    if (weightGradient !== undefined && weightGradient.weight === "weight") {
      const x = stash.input;
      const q = x.q * output.q;
      const rp = positionCorrelationOf(x) * positionCorrelationOf(output);
      const rs = sampleCorrelationOf(x) * sampleCorrelationOf(output);
      const rc = crossCorrelationOf(x) * crossCorrelationOf(output);
      const whole = subsetSum(ctx.batch, pixels, q, rp, rs, rc);
      let change = 0;
      for (const r of taps.rows) for (const c of taps.columns) change += subsetSum(ctx.batch, r * c, q, rp, rs, rc) - whole;
      weightGradient.q = Math.max(weightGradient.q + change / (taps.kernel * taps.kernel), 0);
    }
    return result;
  },
};

/**
 * E[(Σ_{n, p∈V} δ)²] over N samples and v pixels of a gradient with pair correlations ρ_p, ρ_s, ρ_c (common practice).
 * common.ts correlatedSum without its clamp at 0: the taps' partial sums are taken as differences from the whole sum,
 * which a batch norm below drives to zero (or, in rounding, just under it), and a clamp there would bias them.
 */
function subsetSum(batch: number, v: number, q: number, rp: number, rs: number, rc: number): number {
  return batch * v * q * (1 + (v - 1) * rp + (batch - 1) * (rs + (v - 1) * rc));
}

/**
 * Σ_k of what the output pixels V_k at which tap k reads inside sum of the gradient, less the share v_k/P of the whole
 * sum that the per-pixel rule gives each tap: zero without padding (every V_k is all pixels) and for independent terms;
 * below a batch norm, whose gradient sums to zero over all pixels, the border taps' partial sums are all there is
 * (own algebra).
 */
function borderLeak(batch: number, taps: TapCounts, output: Gradient): number {
  const pixels = taps.outRows * taps.outColumns;
  const rp = positionCorrelationOf(output);
  const rs = sampleCorrelationOf(output);
  const rc = crossCorrelationOf(output);
  const whole = subsetSum(batch, pixels, output.q, rp, rs, rc);
  let leak = 0;
  for (const r of taps.rows) {
    for (const c of taps.columns) {
      const v = r * c;
      if (v > 0 && v < pixels) leak += subsetSum(batch, v, output.q, rp, rs, rc) - (v / pixels) * whole;
    }
  }
  return leak;
}

/**
 * The input gradient's sum over batch and pixels, per channel, is Σ_k w_k·Σ_{n, p∈V_k} δ_p: it gains var_w·C_out·
 * borderLeak beyond what the per-pixel rule passes on, which sets the input's correlation between samples at two
 * pixels (own algebra: independent weights).
 */
function leakChannelSum(batch: number, added: number, input: Gradient, layer: GraphLayer): void {
  const pixelsIn = positionCount(layer.input);
  if (batch < 2 || pixelsIn < 2 || !(input.q > 0)) return;
  const ps = positionCorrelationOf(input);
  const ss = sampleCorrelationOf(input);
  const cs = crossCorrelationOf(input);
  const total = Math.max(subsetSum(batch, pixelsIn, input.q, ps, ss, cs) + added, 0);
  const between = (total / (batch * pixelsIn * input.q) - 1 - (pixelsIn - 1) * ps) / (batch - 1);
  input.crossCorrelation = Math.min(Math.max((between - ss) / (pixelsIn - 1), -1), 1);
}

/** The backward wording, made only with a ledger and holding only its numbers. */
function conv2dBackwardRule(connections: number, variance: number, gain: number): Text {
  return () => `conv2d: outputs fed per input·var_w = ${fmt(connections)}·${fmt(variance)} = ${fmt(gain)}`;
}
