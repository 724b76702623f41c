/**
 * Pointwise activations: forward E[φ(z)²] and backward E[φ'(z)²] for z ~ N(0, q) (Poole et al. 2016;
 * Schoenholz et al. 2017), with the exact zeros of rectifiers and the bounds of tanh and sigmoid.
 * Softmax over the feature axis: E[p²] and the Jacobian's share E[S + S² − 2Σp³]/n of n independent N(0, q) logits
 * by quadrature (src/numeric/softmax.ts), ≈ e^q/n² while e^q ≪ n and → 1/n as the rows concentrate.
 */
import { featureWidth, positionCount, sampleElements } from "../../graph/shape.js";
import type { GraphLayer } from "../../graph/types.js";
import type { ActivationLayer, ActivationName } from "../../spec/types.js";
import { gaussLegendre, gaussianExpectationSplit } from "../../numeric/quadrature.js";
import { activationFunction } from "../../numeric/activations.js";
import { INV_SQRT_2PI, normalCdf, normalPdf } from "../../numeric/normal.js";
import { gaussianSoftmaxMoments } from "../../numeric/softmax.js";
import { attentionRowSums } from "../attention/analytic.js";
import { NO_FACTORS, NO_HAZARDS, NO_INNER, NO_INNER_GRADIENTS, NO_WEIGHT_GRADIENTS, SOURCES, backwardInto, crossCorrelationOf, diagonalPullback, forwardInto, eulerShare, factor, fmt, gradientSum, limitTangent, meanPairCorrelation, pairCorrelationsInto, positionCorrelationOf, sampleCorrelationOf } from "../common.js";
import type { Text, AnalyticRule, BackwardResult, ForwardResult, Gradient, OpContext, OpElementShape, Signal } from "../types.js";
import { backwardUnitKappa, forwardUnitKappa } from "../unit-pairs.js";
import { activationMoments, backwardKappa, forwardKappa, transientMoments } from "./moments.js";

/** What the activation backward rule needs. */
export interface ActivationStash {
  input: Signal;
  /** E[φ'²] over all elements (zeros of the input included) */
  derivativeSecond: number;
  /** E[φ'] over all elements (zeros of the input included) */
  derivativeMean: number;
  /** share of input elements where φ' = 0 (a ReLU's negative half) */
  derivativeZeroFraction: number;
  kappaBackward: number;
  /** E[φ'(u)·φ'(v)] for the pre-activations of two different samples (their correlation set by the input's shared part) */
  derivativeCross: number;
  /** E[φ'(u)·φ'(v)] for two positions of one sample */
  derivativeCrossPosition: number;
  /** share of features whose φ' is zero at every term of the batch × positions (a ReLU off for the whole batch) */
  allOff: number;
  /** softmax: E[p_j²·(δ_j − Σ_k p_k δ_k)²] per unit E[δ²], the Jacobian's share per element */
  probabilityJacobian?: number;
  /** leaky-relu: the negative slope */
  slope?: number;
  /** the activation's output, whose products with the gradient a rectifier sums for the layer below (Gradient.homogeneousSum) */
  output?: Signal;
}

const SOURCE = "Gaussian expectation of φ² and φ'² (Poole et al. 2016; Schoenholz et al. 2017)";
const SOFTMAX_SOURCE = "softmax of n independent N(0, q) logits, E[p²] and E[S + S² − 2Σp³] by quadrature (Cressie et al. 1981 Laplace transform)";

/**
 * φ(0) and φ'(0) for the zero elements of an input (ReLU'(0) = 0 as implementations define it), one function each:
 * a pair taken apart by destructuring runs the iterator protocol, much code for the optimising compiler.
 */
function valueAtZero(name: ActivationName): number {
  switch (name) {
    case "sigmoid":
      return 0.5;
    case "softplus":
      return Math.LN2;
    case "relu":
    case "leaky-relu":
    case "gelu":
    case "silu":
    case "tanh":
    case "identity":
    case "softmax":
      return 0;
  }
}

function derivativeAtZero(name: ActivationName, slope: number): number {
  switch (name) {
    case "relu":
    case "softmax":
      return 0;
    case "leaky-relu":
      return slope;
    case "gelu":
    case "silu":
    case "softplus":
      return 0.5;
    case "tanh":
    case "identity":
      return 1;
    case "sigmoid":
      return 0.25;
  }
}

/**
 * E[φ(u)φ(v)] and E[φ'(u)φ'(v)] for jointly Gaussian u, v of variance q and correlation c (two samples of a batch).
 * ReLU and leaky ReLU: the arc-cosine kernel, (q/2π)[sin θ + (π − θ) cos θ] with cos θ = c (Cho & Saul 2009), and
 * P(u > 0, v > 0) = (π − θ)/(2π) for the derivative. Others: the Hermite expansion Σ a_k² c^k with a_0 = E[φ],
 * a_1² = q·E[φ']² kept exactly and the higher terms lumped as c²·(E[φ²] − a_0² − a_1²) (exact at c = 0 and 1);
 * the derivative interpolates between E[φ']² and E[φ'²] (approximate).
 */
export function crossMoments(
  name: ActivationName,
  slope: number,
  q: number,
  c: number,
  m: { mean: number; second: number; derivativeMean: number; derivativeSecond: number },
): { value: number; derivative: number } {
  crossPair(name, slope, q, c, m);
  return { value: CROSS[0] as number, derivative: CROSS[1] as number };
}

/**
 * {@link crossMoments} written into CROSS (value, then derivative), for the forward rule, which reads the two numbers
 * at once: no pair object per call (two per activation layer of both passes). The same arithmetic.
 */
function crossPair(name: ActivationName, slope: number, q: number, c: number, m: { mean: number; second: number; derivativeMean: number; derivativeSecond: number }): void {
  const out = CROSS;
  if (name === "relu" || name === "leaky-relu") {
    const a = name === "relu" ? 0 : slope;
    const theta = Math.acos(c);
    const positive = (q / (2 * Math.PI)) * (Math.sin(theta) + (Math.PI - theta) * c); // E[relu(u) relu(v)]
    const both = (Math.PI - theta) / (2 * Math.PI); // P(u > 0, v > 0)
    // leaky: φ(x) = relu(x) − a·relu(−x); E[relu(u) relu(−v)] = (q/2π)[sin θ − θ cos θ]
    const mixed = (q / (2 * Math.PI)) * (Math.sin(theta) - theta * c);
    const opposite = theta / (2 * Math.PI);
    out[0] = positive * (1 + a * a) - 2 * a * mixed;
    out[1] = both * (1 + a * a) + 2 * a * opposite;
    return;
  }
  if (name === "identity") {
    out[0] = c * q;
    out[1] = 1;
    return;
  }
  const a0 = m.mean * m.mean;
  const a1 = q * m.derivativeMean * m.derivativeMean;
  const rest = Math.max(m.second - a0 - a1, 0);
  const dRest = Math.max(m.derivativeSecond - m.derivativeMean * m.derivativeMean, 0);
  out[0] = a0 + a1 * c + rest * c * c;
  out[1] = m.derivativeMean * m.derivativeMean + dRest * c * c;
}
/** crossPair's value and derivative, as raw doubles */
const CROSS = new Float64Array(2);

/**
 * Memo of allBelowZero in a direct-mapped table keyed on the bits of c and on n (a slot per hash; a collision replaces
 * the older entry): most calls of a fresh prediction miss, and a table look-up costs less than the maps by n and c it
 * replaces. A hit returns the very sum stored, so results do not change.
 */
const ALL_BELOW_SLOTS = 4096;
const allBelowC = new Float64Array(ALL_BELOW_SLOTS).fill(NaN);
const allBelowN = new Float64Array(ALL_BELOW_SLOTS);
const allBelowValue = new Float64Array(ALL_BELOW_SLOTS);
const allBelowProbe = new Float64Array(1);
const allBelowBits = new Uint32Array(allBelowProbe.buffer);

function allBelowSlot(c: number, n: number): number {
  allBelowProbe[0] = c;
  const h = Math.imul((allBelowBits[0] as number) ^ Math.imul(allBelowBits[1] as number, 0x9e3779b1), 0x85ebca6b) ^ Math.imul(n | 0, 0xc2b2ae35);
  return (h ^ (h >>> 15)) & (ALL_BELOW_SLOTS - 1);
}

const ALL_BELOW_LIMIT = 9;
const ALL_BELOW_PANELS = 12;

/**
 * The fixed parts of allBelowZero's composite rule, made once: the abscissae x and weights w, w·φ(x) (the
 * integrand's factor in s) and Φ(−x) (the factor in u). Each is the very expression the sum used, so results are
 * unchanged bit for bit.
 */
let allBelowTable: { x: Float64Array; w: Float64Array; wPdf: Float64Array; cdfBelow: Float64Array } | undefined;

function allBelowNodes(): NonNullable<typeof allBelowTable> {
  if (allBelowTable !== undefined) return allBelowTable;
  const rule = gaussLegendre(12);
  const width = (2 * ALL_BELOW_LIMIT) / ALL_BELOW_PANELS;
  const size = ALL_BELOW_PANELS * rule.nodes.length;
  const table = { x: new Float64Array(size), w: new Float64Array(size), wPdf: new Float64Array(size), cdfBelow: new Float64Array(size) };
  let k = 0;
  for (let p = 0; p < ALL_BELOW_PANELS; p++) {
    const mid = -ALL_BELOW_LIMIT + (p + 0.5) * width;
    for (let i = 0; i < rule.nodes.length; i++, k++) {
      const x = mid + 0.5 * width * (rule.nodes[i] as number);
      const w = 0.5 * width * (rule.weights[i] as number);
      table.x[k] = x;
      table.w[k] = w;
      table.wPdf[k] = w * normalPdf(x);
      table.cdfBelow[k] = normalCdf(-x);
    }
  }
  allBelowTable = table;
  return table;
}

/** Φ(−x_k)^n at allBelowZero's nodes, by n (a network has a few batch × positions counts), and where they reach zero. */
const belowPowerCache = new Map<number, BelowPowers>();

interface BelowPowers {
  power: Float64Array;
  end: number;
  /** M_m = Σ_k w_k·Φ(−x_k)^n·x_k^(2m), m = 0 … ALL_BELOW_MOMENTS − 1: the sum's series in 1/r² (allBelowSeries) */
  moments: Float64Array;
}

const ALL_BELOW_MOMENTS = 64;

function belowPowers(cdfBelow: Float64Array, n: number): BelowPowers {
  const hit = belowPowerCache.get(n);
  if (hit !== undefined) return hit;
  const power = new Float64Array(cdfBelow.length);
  let end = 0;
  for (let k = 0; k < cdfBelow.length; k++) {
    power[k] = Math.pow(cdfBelow[k] as number, n);
    if (power[k] !== 0) end = k + 1;
  }
  const { x, w } = allBelowNodes();
  const moments = new Float64Array(ALL_BELOW_MOMENTS);
  for (let k = 0; k < end; k++) {
    const x2 = (x[k] as number) * (x[k] as number);
    let term = (w[k] as number) * (power[k] as number);
    for (let m = 0; m < ALL_BELOW_MOMENTS; m++, term *= x2) moments[m] = (moments[m] as number) + term;
  }
  if (belowPowerCache.size >= 64) belowPowerCache.clear();
  const entry = { power, end, moments };
  belowPowerCache.set(n, entry);
  return entry;
}

/**
 * P(u_1 ≤ 0, …, u_n ≤ 0) for n standard Gaussians with common pairwise correlation c ≥ 0: writing
 * u_i = √c·s + √(1 − c)·e_i, it is E_s[Φ(−s·√(c/(1 − c)))^n], a one-dimensional integral over the shared component s
 * (the one-factor form of equicorrelated Gaussians, Dunnett & Sobel 1955, from memory; n = 2 is Sheppard's
 * 1/4 + arcsin(c)/2π). 2^−n at c = 0, 1/2 at c = 1. Negative c is taken as 0. Composite 12-point Gauss–Legendre on
 * [−9, 9], in s when r = √(c/(1 − c)) ≤ 1 and in u = r·s otherwise, so the integrand varies on a scale of 1 or more
 * (within about 1e-4 of an adaptive rule for n up to 2^18); memoised by (c, n).
 */
export function allBelowZero(c: number, n: number): number {
  if (!(n >= 1)) return 1;
  if (!(c > 0)) return Math.pow(2, -n);
  if (c >= 1) return 0.5;
  const slot = allBelowSlot(c, n);
  if (allBelowC[slot] === c && allBelowN[slot] === n) return allBelowValue[slot] as number;
  const r = Math.sqrt(c / (1 - c));
  const { x, w, wPdf, cdfBelow } = allBelowNodes();
  // in u, below −9 every u_i is surely ≤ 0 and the density integrates to Φ(−9/r)
  let sum = r > 1 ? normalCdf(-ALL_BELOW_LIMIT / r) : 0;
  // the unary plus (same value) makes the optimised loop keep the sum as a raw double: started from the inlined
  // normalCdf's result as it is, the loop boxed it in a new heap number at every node, most of what predict allocated
  // here for a big network
  sum = +sum;
  if (r > 1) {
    // Φ(−x)^n does not depend on c: taken from the table for n, up to its last nonzero entry (a zero term adds nothing)
    const powers = belowPowers(cdfBelow, n);
    const series = allBelowSeries(powers.moments, r);
    if (!Number.isNaN(series)) return remember(slot, c, n, sum + series);
    const { power, end } = powers;
    for (let k = 0; k < end; k++) sum += ((w[k] as number) / r) * normalPdf((x[k] as number) / r) * (power[k] as number);
  } else {
    for (let k = 0; k < x.length; k++) sum += (wPdf[k] as number) * Math.pow(normalCdf(-r * (x[k] as number)), n);
  }
  return remember(slot, c, n, sum);
}

function remember(slot: number, c: number, n: number, value: number): number {
  allBelowC[slot] = c;
  allBelowN[slot] = n;
  allBelowValue[slot] = value;
  return value;
}

/** The largest a·X² (a = 1/(2r²), X = 9 the nodes' reach) the series takes: its terms then grow to at most e^3 times the sum's. */
const ALL_BELOW_SERIES_REACH = 3;

/**
 * The node sum Σ_k (w_k/r)·φ(x_k/r)·Φ(−x_k)^n of allBelowZero for r² ≥ 81/6, as the series of e^(−a·x²), a = 1/(2r²):
 * φ(0)/r·Σ_m (−a)^m/m!·M_m with M_m the moments tabled by n (Taylor's series of the exponential, summed until a term
 * falls below 1e-17 of the sum once past its largest; the terms alternate and shrink from there, so the rest is below
 * the last). The same rule's sum to rounding (test/ops/all-below-table.test.ts holds it within 1e-12 relative), for
 * a few dozen products in place of an exponential per node; NaN where it does not apply (r too small).
 */
function allBelowSeries(moments: Float64Array, r: number): number {
  const a = 0.5 / (r * r);
  const reach = a * ALL_BELOW_LIMIT * ALL_BELOW_LIMIT;
  if (!(reach <= ALL_BELOW_SERIES_REACH)) return NaN;
  let sum = moments[0] as number;
  let factor = 1;
  for (let m = 1; m < ALL_BELOW_MOMENTS; m++) {
    factor *= -a / m;
    const term = factor * (moments[m] as number);
    sum += term;
    if (m > reach && Math.abs(term) <= 1e-17 * Math.abs(sum)) return (INV_SQRT_2PI / r) * sum;
  }
  return NaN;
}

/** Element shape of φ's output (its bound is {@link outputBound}'s: two functions, no pair object per layer). */
function outputShape(name: ActivationName, input: Signal): OpElementShape {
  switch (name) {
    case "relu":
      return "half-gaussian";
    case "tanh":
    case "sigmoid":
      return "bounded";
    case "identity":
      return input.shape;
    default:
      return "gaussian";
  }
}

/** The bound of φ's output elements, if any. */
function outputBound(name: ActivationName, input: Signal): number | undefined {
  return name === "tanh" || name === "sigmoid" ? 1 : name === "identity" ? input.bound : undefined;
}

/**
 * Forward rule of a pointwise activation on a (near-)Gaussian tensor; exported for gated feed-forward layers.
 * Zeros of the input (dropout, an earlier ReLU) are mapped through φ(0).
 */
export function pointwiseForward(
  ctx: OpContext,
  name: ActivationName,
  slope: number,
  input: Signal,
  positions = 1,
): { output: Signal; stash: ActivationStash; ratio: number; rule: Text } {
  const stash = pointwiseStash(ctx, name, slope, input, positions);
  const output = stash.output as Signal;
  const ratio = forwardRatio(input, output);
  return { output, stash, ratio, rule: ctx.ledger ? forwardRuleOf(name, input, ratio) : "" };
}

/** E[φ²]/E[x²] of the forward rule (0 for a zero input). */
function forwardRatio(input: Signal, output: Signal): number {
  return input.q > 0 ? output.q / input.q : 0;
}

/** The forward rule's ledger wording, at the nonzero elements' variance. */
function forwardRuleOf(name: ActivationName, input: Signal, ratio: number): Text {
  const keep = 1 - input.zeroFraction;
  return forwardRule(name, keep > 0 ? input.q / keep : 0, ratio, input.gaussian);
}

/**
 * {@link pointwiseForward}'s work: the stash, which holds the output too (its `output`), so the layer rule makes only
 * its own result object (no pair object in between, on every activation layer of both passes).
 */
function pointwiseStash(ctx: OpContext, name: ActivationName, slope: number, input: Signal, positions: number): ActivationStash {
  const keep = 1 - input.zeroFraction;
  const qNonzero = keep > 0 ? input.q / keep : 0;
  // the moments are read here and kept by none of the results: check's own function gives ReLU's in a reused object
  const m = ctx.moments === activationMoments ? transientMoments(name, qNonzero, slope) : ctx.moments(name, qNonzero, slope);
  const f0 = valueAtZero(name);
  const d0 = derivativeAtZero(name, slope);
  const q = keep * m.second + input.zeroFraction * f0 * f0;
  const mean = keep * m.mean + input.zeroFraction * f0;
  const derivativeSecond = keep * m.derivativeSecond + input.zeroFraction * d0 * d0;
  const derivativeMean = keep * m.derivativeMean + input.zeroFraction * d0;
  const zeroFraction = (f0 === 0 ? input.zeroFraction : 0) + keep * m.zeroFraction;
  let logVar = input.logVar;
  const unitKappa = input.fresh === undefined ? 0 : forwardUnitKappa(name, slope, qNonzero, input.fresh.unit, forwardKappa(m));
  if (input.fresh !== undefined) logVar = Math.max(logVar + (unitKappa - input.fresh.kappa) / input.fresh.width, 0);
  const shape = outputShape(name, input);
  const bound = outputBound(name, input);
  // two samples' pre-activations u, v have correlation c = shared/q; E[φ(u)φ(v)] is the shared part of the output
  const correlation = qNonzero > 0 && input.shared !== undefined ? Math.min(Math.max(input.shared / input.q, -1), 1) : 0;
  crossPair(name, slope, qNonzero, correlation, m);
  const crossValue = CROSS[0] as number;
  const crossDerivative = CROSS[1] as number;
  const shared = keep * keep * crossValue + (1 - keep * keep) * f0 * f0;
  // two positions of one sample: the same map at their correlation (Poole et al. 2016, correlation map)
  pairCorrelationsInto(input, INPUT_PAIRS, 0);
  const positionCorrelation = INPUT_PAIRS[1] as number;
  // (the same moments when the two correlations agree: one sample per position)
  if (positionCorrelation !== correlation) crossPair(name, slope, qNonzero, positionCorrelation, m);
  const positionValue = CROSS[0] as number;
  const positionDerivative = CROSS[1] as number;
  const positionShared = keep * keep * positionValue + (1 - keep * keep) * f0 * f0;
  // the fields set below are keys from the start, undefined where absent (as linearOutput's)
  const output: Signal = {
    q,
    mean,
    shared: Math.min(shared, q),
    zeroFraction,
    shape,
    logVar,
    gaussian: name === "identity" ? input.gaussian : false,
    positionCorrelation: undefined,
    bound: undefined,
    fresh: undefined,
    correlationSquare: undefined,
    allZero: undefined,
    featureCovariance: undefined,
  };
  if (q > 0) output.positionCorrelation = Math.min(positionShared / q, 1);
  const channelShared = input.channelShared;
  if (channelShared !== undefined && input.zeroFraction === 0 && input.q > channelShared && (name === "relu" || name === "leaky-relu")) {
    // the channel's mean² over batch and pixels is E[φ(u)φ(u')] for two of its elements, which share only the channel's
    // mean, at correlation channelShared/q (Cho & Saul 2009, as for `shared` above)
    const channelCorrelation = Math.max(channelShared / input.q, 0);
    output.channelShared = Math.min(crossMoments(name, slope, qNonzero, channelCorrelation, m).value, output.shared as number);
    const within = input.q - channelShared;
    const position = Math.min(Math.max((positionCorrelation * input.q - channelShared) / within, 0), 1);
    output.channelSpread = { slope: name === "relu" ? 0 : slope, between: Math.max(channelShared, 0), within, q, position };
    if (input.fresh !== undefined) output.channelSpread.unit = { kappa: unitKappa, width: input.fresh.width };
  }
  if (bound !== undefined) output.bound = bound;
  if (name === "leaky-relu" && input.gaussian && input.zeroFraction === 0 && Math.abs(input.mean) < 1e-12) output.rectifier = { slope: slope ?? 0, preQ: input.q };
  if (name === "identity" && input.fresh !== undefined) output.fresh = input.fresh;
  const cosineSquare = input.correlationSquare;
  if (cosineSquare !== undefined && q > 0) {
    // two samples' output cosine r(c) = shared/q at their input cosine c; its slope is keep²·q·E[φ'(u)φ'(v)]/E[φ²]
    // (Price 1958), so E[r²] = r(c̄)² + r'(c̄)²·Var(c) to first order (the delta method)
    const r = Math.min(shared, q) / q;
    const slopeAt = (keep * keep * qNonzero * crossDerivative) / q;
    output.correlationSquare = Math.min(Math.max(r * r + slopeAt * slopeAt * Math.max(cosineSquare - correlation * correlation, 0), 0), 1);
  }
  const derivativeZeroFraction = name === "relu" ? input.zeroFraction + keep * 0.5 : 0;
  // a ReLU unit is off for the whole step when its pre-activation is ≤ 0 at every term
  const allOff = name === "relu" && qNonzero > 0 ? allBelowZero(meanPairCorrelation(ctx.batch, positions, INPUT_PAIRS[0] as number, positionCorrelation), ctx.batch * positions) : 0;
  if (allOff > 0) output.allZero = allOff;
  // two features' covariance to first order: Cov(φ(u_i), φ(u_j)) = E[φ']²·Cov(u_i, u_j) (Price's theorem, Gaussian u);
  // the field holds its square over q², hence E[φ']⁴
  if (input.featureCovariance !== undefined && q > 0) output.featureCovariance = (fourthPower(derivativeMean) * input.featureCovariance * input.q * input.q) / (q * q);
  return {
    input,
    derivativeSecond,
    derivativeMean,
    derivativeZeroFraction,
    kappaBackward: backwardKappa(m),
    derivativeCross: keep * keep * crossDerivative + (1 - keep * keep) * d0 * d0,
    derivativeCrossPosition: keep * keep * positionDerivative + (1 - keep * keep) * d0 * d0,
    allOff,
    slope,
    output,
  };
}

/** pointwiseGradient's pair correlations of the gradient at its output (pairCorrelationsInto) */
const GRADIENT_PAIRS = new Float64Array(3);

/** pointwiseStash's pair correlations of its input (pairCorrelationsInto) */
const INPUT_PAIRS = new Float64Array(3);

/**
 * x ** 4 for the last x asked: a stack's rectifiers have one E[φ'] (1/2 for ReLU on a dense layer's output), so most
 * layers ask the same power again. The value kept is the very power, so results do not change.
 */
function fourthPower(x: number): number {
  const memo = FOURTH_POWER;
  if (x !== memo[0]) {
    memo[0] = x;
    memo[1] = x ** 4;
  }
  return memo[1] as number;
}
/** the last x and its power, as raw doubles (module variables would box each one stored) */
const FOURTH_POWER = new Float64Array([NaN, NaN]);

/**
 * Gradient.coupling below a pointwise unit. The output meets the spread of the transposed maps below only through the
 * part of each unit's output that moves with its input, φ(u) − φ(0): φ(0) (a sigmoid's 1/2) stays whatever those maps
 * draw. Scaling that part by λ moves ln E[φ²] by d ln E[φ²]/d ln λ² = E[φ·(φ − φ(0))]/E[φ²] at λ = 1, so the seed's
 * elasticity with respect to it is e times that (chain rule; own algebra); 1 where φ(0) = 0. A 30-layer sigmoid stack's
 * gradients spread 1.44× as wide as the float64 simulation measured (101 draws) when the whole e was carried below.
 */
function carriedCoupling(name: ActivationName, out: Signal | undefined, coupling: { elasticity: number; budget: number }): { elasticity: number; budget: number } {
  const f0 = valueAtZero(name);
  if (f0 === 0 || out === undefined || !(out.q > 0)) return coupling;
  const share = Math.min(Math.max(1 - (f0 * out.mean) / out.q, 0), 1);
  return { elasticity: coupling.elasticity * share, budget: coupling.budget };
}

/** Backward rule of a pointwise activation: E[δ_in²] = E[φ'²]·E[δ_out²] (gradient independence). */
export function pointwiseBackward(name: string, stash: ActivationStash, output: Gradient, ledger: boolean): { gradient: Gradient; ratio: number; rule: Text } {
  const gradient = pointwiseGradient(name, stash, output, ledger);
  return { gradient, ratio: BACKWARD_RATIO[0] as number, rule: backwardText };
}

/**
 * The ratio and wording of the last {@link pointwiseGradient}: the layer rule reads them right after the call, so it
 * makes no triple object (on every activation layer of both passes); the wording is "" without a ledger.
 */
const BACKWARD_RATIO = new Float64Array(1);
let backwardText: Text = "";

/** {@link pointwiseBackward}'s gradient; its ratio and wording left in BACKWARD_RATIO and backwardText. */
function pointwiseGradient(name: string, stash: ActivationStash, output: Gradient, ledger: boolean): Gradient {
  let kappaBackward = stash.kappaBackward;
  let derivativeSecond = stash.derivativeSecond;
  let derivativeZeroFraction = stash.derivativeZeroFraction;
  let rule: Text = ledger ? backwardRule(name, stash.derivativeSecond) : "";
  // E[φ'φ'] for two samples and for two positions, which carry the gradient's shared parts
  let sampleCross = stash.derivativeCross;
  let positionCross = stash.derivativeCrossPosition;
  if (output.channelGate !== undefined) {
    // a batch norm above divides each channel by its own variance, and the channels nearly off weigh most: E[φ'²] and
    // the E[φ'φ'] of two samples and of two positions weighed so
    derivativeSecond = output.channelGate.derivativeSecond;
    sampleCross = output.channelGate.pair;
    positionCross = output.channelGate.positionPair;
    if (ledger) rule = channelGateRule(name, derivativeSecond);
  }
  const k = output.windowMaximum;
  if (k !== undefined && (name === "relu" || name === "leaky-relu")) {
    // a max-pool after a rectifier passes its gradient to the window's maximum, which is on the positive side
    // unless all k inputs are off: P = off^k for independent inputs (max(φ(x)) = φ(max x) for increasing φ)
    const z = stash.input.zeroFraction;
    const gate = output.windowGate;
    const allOff = gate?.off ?? Math.pow(z + (1 - z) / 2, k);
    const a = name === "relu" ? 0 : (stash.slope ?? 0);
    derivativeSecond = 1 - allOff + a * a * allOff;
    derivativeZeroFraction = name === "relu" ? allOff : 0;
    // the gate is this nearly constant φ', so its κ = 3·E[φ'⁴]/E[φ'²]² − 1 (as activationKappa) is near a linear map's 2
    kappaBackward = derivativeSecond > 0 ? (3 * (1 - allOff + a ** 4 * allOff)) / (derivativeSecond * derivativeSecond) - 1 : 2;
    if (ledger) rule = maxPoolRule(name, k, allOff, derivativeSecond);
    // the arg-max gates of two terms are nearly always on, so nearly independent
    sampleCross = derivativeSecond * derivativeSecond;
    positionCross = sampleCross;
    if (gate !== undefined) {
      // unless the channels' means set them apart (the pool's windowGate): φ' = a + (1 − a)·on at each maximum
      const pair = (bothOn: number): number => a * a + 2 * a * (1 - a) * (1 - allOff) + (1 - a) * (1 - a) * bothOn;
      sampleCross = pair(gate.bothOnSamples);
      positionCross = pair(gate.bothOnPositions);
    }
  }
  let logVar = output.logVar;
  const fresh = output.fresh;
  if (fresh !== undefined) {
    // a convolution's channels sum their terms' pairs (src/ops/unit-pairs.ts); elsewhere one term's κ
    const pre = stash.input;
    const unit = fresh.unit === undefined ? undefined : { q: pre.q, zeroFraction: pre.zeroFraction, same: positionCorrelationOf(pre), other: sampleCorrelationOf(pre), unit: pre.fresh?.unit };
    const kappa = unit === undefined ? kappaBackward : backwardUnitKappa(name as ActivationName, stash.slope ?? 0, unit, fresh.unit, kappaBackward, k !== undefined);
    logVar = Math.max(logVar + (kappa - fresh.kappa) / fresh.width, 0);
  }
  const zeroFraction = 1 - (1 - derivativeZeroFraction) * (1 - output.zeroFraction);
  // the fields set below are keys from the start, undefined where absent (as linearGradient's)
  const gradient: Gradient = {
    q: derivativeSecond * output.q,
    zeroFraction,
    shape: "gaussian",
    logVar,
    sharedLogVar: undefined,
    coupling: undefined,
    cosineSquare: undefined,
    shared: undefined,
    positionCorrelation: undefined,
    crossCorrelation: undefined,
    allZero: undefined,
    reluGated: undefined,
    curvature: undefined,
    // set after the rule by the layer rule (a rectifier's sum) and the walk (tidyGradient): keys from the start too
    homogeneousSum: undefined,
    eulerSum: undefined,
  };
  // δ·φ'(x) with a Gaussian δ independent of x ~ N(0, q) is a Gaussian scale mixture over |φ'(x)| (gradient
  // independence, Schoenholz et al. 2017); GELU' and SiLU' cross zero and tanh', sigmoid' and softplus' fade in their
  // saturated tails, so it holds more values near zero than a Gaussian of its rms (flushed shares up to 2.9x a
  // Gaussian's at q = 1 and 140x at q = 4, tanh most: a seeded Monte Carlo, src/numeric/derivative-mixture.ts). Zeros in the
  // input or a pool's or batch norm's gate change the law of φ': left Gaussian there
  const input = stash.input;
  const mixes = output.shape === "gaussian" && k === undefined && output.channelGate === undefined && input.zeroFraction === 0 && input.q > 0;
  // a leaky ReLU's φ' is 1 or the slope on either half of a zero-mean x: exactly two Gaussians, half the elements each,
  // |slope| apart in scale (slope 0.01: half the elements 6.6 binades below the rest, which a Gaussian would not flush)
  const a = stash.slope ?? 0;
  if (mixes && (name === "gelu" || name === "silu" || name === "tanh" || name === "sigmoid" || name === "softplus")) {
    gradient.shape = "gaussian-mixture";
    gradient.mixture = { activation: name, inputVariance: input.q };
  } else if (mixes && name === "leaky-relu" && a !== 0 && Math.abs(a) !== 1 && input.gaussian && Math.abs(input.mean) < 1e-12) {
    gradient.shape = "gaussian-mixture";
    gradient.mixture = { activation: name, inputVariance: input.q, slope: a };
  }
  if (output.sharedLogVar !== undefined) gradient.sharedLogVar = Math.max(output.sharedLogVar + (logVar - output.logVar), 0);
  if (output.coupling !== undefined) gradient.coupling = carriedCoupling(name as ActivationName, stash.output, output.coupling);
  // φ' gates two samples' gradients alike where their pre-activations agree: the cosine scales by E[φ'(u)φ'(v)]/E[φ'²]
  // (φ' taken as independent of δ, as the backward rule does)
  if (output.cosineSquare !== undefined && derivativeSecond > 0) gradient.cosineSquare = Math.min((sampleCross / derivativeSecond) ** 2 * output.cosineSquare, 1);
  let ratio = derivativeSecond;
  if (output.shared !== undefined) gradient.shared = sampleCross * output.shared;
  const pairs = GRADIENT_PAIRS;
  pairCorrelationsInto(output, pairs, 0);
  if (derivativeSecond > 0) gradient.positionCorrelation = Math.min((positionCross * (pairs[1] as number)) / derivativeSecond, 1);
  // two samples at two positions: the derivatives pair as two samples' do
  if (output.crossCorrelation !== undefined && derivativeSecond > 0) gradient.crossCorrelation = Math.min((sampleCross * output.crossCorrelation) / derivativeSecond, 1);
  const allZero = 1 - (1 - stash.allOff) * (1 - (output.allZero ?? 0));
  if (allZero > 0) gradient.allZero = allZero;
  // Euler's theorem: u·φ'(u) = φ(u) for a positively homogeneous φ, so Σ u·δ_u = Σ φ(u)·δ_φ
  if (output.homogeneousSum !== undefined && (name === "relu" || name === "leaky-relu")) gradient.homogeneousSum = output.homogeneousSum;
  if (name === "relu" && k === undefined) gradient.reluGated = { sample: pairs[0] as number, position: pairs[1] as number, cross: pairs[2] as number };
  const curvature = output.curvature;
  if (curvature !== undefined && k === undefined) {
    // M'' = Φ'·M·Φ' with Φ' = diag(φ'): on the diagonal E[φ'²] (a smooth unit's φ·φ'' too: hessianDiagonal), off it
    // E[φ'_i·φ'_j] = E[φ']² (two units of one sample, independent weights) (derived, as Curvature)
    const d2 = stash.derivativeSecond;
    const off = stash.derivativeMean * stash.derivativeMean;
    gradient.curvature = diagonalPullback(curvature, HOMOGENEOUS.has(name) ? d2 : hessianDiagonal(name, stash), off);
    // the gradient holds M_ii·φ(u_i) of its own unit, which φ'(u_i) does not gate independently: its square is
    // E[φ'²φ²]·E[M_ii²], not E[φ'²]·E[φ²]·E[M_ii²], and two samples' pair likewise (selfPair) where the dense layer
    // above handed on their pair; elsewhere its mean over the data, E[φ'φ]·M_ii, is the same for every sample (a
    // shared part the bias gradient sums coherently)
    selfMoments(name, stash, curvature.centred === true);
    const selfMean = SELF[0] as number;
    const selfSecond = SELF[1] as number;
    const selfOutputSecond = SELF[2] as number;
    gradient.q = Math.max(gradient.q + curvature.diagonalSquare * (selfSecond - d2 * selfOutputSecond), 0);
    if (output.q > 0) ratio = gradient.q / output.q;
    if (ledger) rule = selfGateRule(name, derivativeSecond, ratio);
    const skip = curvature.skip;
    let skipMean = 0;
    let own = curvature.diagonalSquare;
    if (skip !== undefined) {
      // the skip's part g of the gradient is linear in the block's input, jointly Gaussian with u: E[φ'(u)·g] =
      // E[φ'']·Cov(u, g) and Cov(φ(u), g) = E[φ']·Cov(u, g) (Stein's lemma), not E[φ'φ] times A's diagonal; below, u's
      // own Cov(u, φ'(u)·g) = E[φ' + u·φ'']·Cov(u, g) (own algebra, Stein's lemma twice)
      const stein = skipStein(name, stash);
      skipMean = stein.second * skip.covariance;
      own = Math.max(own - skip.diagonalSquare, 0);
      // the residual seed wrote that part on the branch output, as x's best linear estimate from φ(u), which holds
      // r = E[φ']²·q_u/E[φ²] of what u holds of x (Stein's lemma; r ≤ 1 by Cauchy–Schwarz): below, where u sees all
      // of it, the part is 1/r as large (own algebra: x's linear estimate from u, not from φ(u))
      const r = selfOutputSecond > 0 ? Math.min((off * stash.input.q) / selfOutputSecond, 1) : 1;
      const grow = r > 0 ? 1 / (r * r) : 1;
      const rowSquares = grow * (d2 * d2 * skip.diagonalSquare + off * off * Math.max(skip.rowSquares - skip.diagonalSquare, 0));
      const diagonalSquare = grow * d2 * d2 * skip.diagonalSquare;
      gradient.curvature.rowSquares += rowSquares * (1 - 1 / grow);
      gradient.curvature.diagonalSquare += diagonalSquare * (1 - 1 / grow);
      gradient.curvature.skip = { rowSquares, diagonalSquare, covariance: stein.below * skip.covariance };
    }
    const ownPair = curvature.paired === true ? own * selfPair(name, stash, selfMean, selfSecond, sampleCross, curvature.centred === true) : own * selfMean * selfMean;
    gradient.shared = Math.min((gradient.shared ?? 0) + ownPair + skipMean, gradient.q);
    // below this unit the self parts read y ≈ J·h through φ'(h)·h in place of φ(h): a saturating φ makes that path
    // outgrow the output (a chaotic tanh stack: ×χ per layer), which the curvature must not pass on as the gradient's
    // (the rectifiers and the identity have φ'(h)·h = φ(h) exactly: nothing to limit)
    if (!HOMOGENEOUS.has(name) && selfOutputSecond > 0) limitTangent(gradient.curvature, tangentSecond(name, stash) / selfOutputSecond, (d2 * stash.input.q) / selfOutputSecond);
  }
  BACKWARD_RATIO[0] = ratio;
  backwardText = rule;
  return gradient;
}

const HOMOGENEOUS: ReadonlySet<string> = new Set(["relu", "leaky-relu", "identity"]);

function channelGateRule(name: string, derivativeSecond: number): Text {
  return () => `${name}: E[φ'²] of each channel weighed by the batch norm's 1/(var_c + ε) = ${fmt(derivativeSecond)}`;
}

function selfGateRule(name: string, derivativeSecond: number, ratio: number): Text {
  return () => `${name}: E[φ'²] = ${fmt(derivativeSecond)}, with the unit's own output the loss's curvature holds in its gradient: ${fmt(ratio)}`;
}

/**
 * The curvature's diagonal below a smooth activation. A layer's gradient holds v·tr(∂δ/∂u)·x along its input x
 * (Stein's lemma over its weights), and ∂δ_i/∂u_i = φ'_i²·M_ii + φ''_i·g_i with g_i holding M_ii·φ(u_i): a mean of
 * M_ii·E[φ'² + φ·φ''] = M_ii·E[u·φ·φ']/q (own algebra, Stein's lemma; the length map's slope, Schoenholz et al. 2017
 * ξ_q), not the Gauss–Newton E[φ'²]. Where E[φ·φ''] < 0 (tanh, sigmoid) limitTangent's bound already stands for it.
 */
function hessianDiagonal(name: string, stash: ActivationStash): number {
  const input = stash.input;
  const keep = 1 - input.zeroFraction;
  const q = keep > 0 ? input.q / keep : 0;
  if (!(q > 0)) return stash.derivativeSecond;
  const { f, df } = activationFunction(name as ActivationName, stash.slope);
  const d0 = derivativeAtZero(name as ActivationName, stash.slope ?? 0);
  const hessian = (keep * gaussianExpectationSplit((u) => u * df(u) * f(u), q)) / q + input.zeroFraction * d0 * d0;
  return Math.max(hessian, stash.derivativeSecond);
}

/** E[(φ'(u)·u)²] of an activation's input u (its zeros give 0) */
function tangentSecond(name: string, stash: ActivationStash): number {
  const input = stash.input;
  const keep = 1 - input.zeroFraction;
  const q = keep > 0 ? input.q / keep : 0;
  if (!(q > 0)) return 0;
  const { df } = activationFunction(name as ActivationName, stash.slope);
  return keep * gaussianExpectationSplit((u) => (u * df(u)) ** 2, q);
}

/**
 * The tangent φ'(u)·u an activation passes up for a perturbation along its own input u, against its output φ(u):
 * E[(φ'(u)·u)²], E[φ'(u)·u·φ(u)] and E[φ(u)²] (zeros of the input counted as zeros of all three: φ'(0)·0 = 0). For the
 * positively homogeneous ones φ'(u)·u = φ(u) (Euler's theorem), so the three are E[φ²]; quadrature for the others.
 */
export function tangentMoments(name: string, stash: ActivationStash): { tangent: number; cross: number; output: number } {
  const input = stash.input;
  const keep = 1 - input.zeroFraction;
  const q = keep > 0 ? input.q / keep : 0;
  const at = activationFunction(name as ActivationName, stash.slope);
  const zeroOutput = input.zeroFraction * at.f(0) * at.f(0);
  if (!(q > 0)) return { tangent: 0, cross: 0, output: zeroOutput };
  if (HOMOGENEOUS.has(name)) {
    const a = name === "leaky-relu" ? (stash.slope ?? 0) : name === "identity" ? 1 : 0;
    const output = (keep * q * (1 + a * a)) / 2;
    return { tangent: output, cross: output, output };
  }
  const { f, df } = at;
  return {
    tangent: tangentSecond(name, stash),
    cross: keep * gaussianExpectationSplit((u) => u * df(u) * f(u), q),
    output: keep * gaussianExpectationSplit((u) => f(u) * f(u), q) + zeroOutput,
  };
}

/**
 * (E[φ'']/E[φ'])² and (E[φ' + u·φ'']/E[φ'])² of an activation's input u, the two from E[u·φ'] = q·E[φ''] and
 * E[u²·φ'] = q·E[φ' + u·φ''] (Stein's lemma), which hold for the rectifiers' kinks too; 0 where E[φ'] = 0
 */

function skipStein(name: string, stash: ActivationStash): { second: number; below: number } {
  const input = stash.input;
  const keep = 1 - input.zeroFraction;
  const q = keep > 0 ? input.q / keep : 0;
  const mean = stash.derivativeMean;
  if (!(q > 0) || !(Math.abs(mean) > 0)) return { second: 0, below: 0 };
  const { df } = activationFunction(name as ActivationName, stash.slope);
  const second = (keep * gaussianExpectationSplit((u) => u * df(u), q)) / q / mean;
  const below = (keep * gaussianExpectationSplit((u) => u * u * df(u), q)) / q / mean;
  return { second: second * second, below: below * below };
}

// crossMoments reads no moments for the rectifiers
const NO_MOMENTS = { mean: 0, second: 0, derivativeMean: 0, derivativeSecond: 0 };

/**
 * What two samples' gradients share of their own units' part M_ii·φ(u) beyond what the independent rule gates:
 * E[g(u_a)·g(u_b)] − E[φ'(u_a)φ'(u_b)]·E[φ(u_a)φ(u_b)] for g = φ'·φ, the pre-activations at the samples' correlation c
 * (the dense layer above handed the pair M_ii²·E[φ(u_a)φ(u_b)] on, which the rule multiplied by E[φ'φ'], as it does the
 * rest; own algebra). A rectifier's g is a leaky ReLU of slope a² (the identity's is u), paired in closed form (Cho &
 * Saul 2009, as crossMoments); a smooth or centred one's by the Hermite expansion crossMoments uses: E[g]² + E[u·g]²·c/q
 * + the rest of E[g²] at c² (Mehler's formula, the first two terms exact). Without the part above it was E[g]² alone,
 * and a deep ReLU stack's weight gradients were up to 0.6 binade low (measured Dec 2026, 16 draws)
 */
function selfPair(name: string, stash: ActivationStash, selfMean: number, selfSecond: number, sampleCross: number, centred: boolean): number {
  const input = stash.input;
  const keep = 1 - input.zeroFraction;
  const q = keep > 0 ? input.q / keep : 0;
  const out = stash.output;
  if (!(q > 0) || out === undefined) return selfMean * selfMean;
  const c = input.shared !== undefined ? Math.min(Math.max(input.shared / input.q, -1), 1) : 0;
  const at = activationFunction(name as ActivationName, stash.slope);
  // E[(φ_a − c0)(φ_b − c0)] = E[φ_aφ_b] − c0² for c0 = E[φ] (the centred curvature's), E[φ_aφ_b] itself otherwise
  const c0 = centred ? keep * gaussianExpectationSplit(at.f, q) + input.zeroFraction * at.f(0) : 0;
  const outPair = (out.shared ?? out.mean * out.mean) - c0 * c0;
  let pair: number;
  if (!centred && HOMOGENEOUS.has(name)) {
    const a = name === "leaky-relu" ? (stash.slope ?? 0) : name === "identity" ? 1 : 0;
    crossPair("leaky-relu", a * a, q, c, NO_MOMENTS);
    pair = keep * keep * (CROSS[0] as number);
  } else {
    const ug = (keep * gaussianExpectationSplit((u) => u * at.df(u) * (at.f(u) - c0), q)) / Math.sqrt(q);
    const a0 = selfMean * selfMean;
    const a1 = ug * ug;
    pair = a0 + a1 * c + Math.max(selfSecond - a0 - a1, 0) * c * c;
  }
  return pair - sampleCross * outPair;
}

/**
 * E[φ'(u)·φ(u)], E[φ'(u)²·φ(u)²] and E[φ(u)²] of an activation's input u, written into SELF (its zeros mapped through φ(0), φ'(0)):
 * closed forms for the rectifiers and the identity (half-normal moments), quadrature for the smooth ones.
 */
function selfMoments(name: string, stash: ActivationStash, centred: boolean): void {
  const input = stash.input;
  const keep = 1 - input.zeroFraction;
  const q = keep > 0 ? input.q / keep : 0;
  const a = name === "leaky-relu" ? (stash.slope ?? 0) : name === "identity" ? 1 : 0;
  const at = activationFunction(name as ActivationName, stash.slope);
  // a curvature whose rows sum to zero (a layer norm's centring above) sees only φ − E[φ]: M·(E[φ]·1) = 0
  const c = centred ? keep * gaussianExpectationSplit(at.f, q) + input.zeroFraction * at.f(0) : 0;
  let mean: number;
  let second: number;
  let outputSecond: number;
  if (!centred && HOMOGENEOUS.has(name)) {
    // E[u·1(u>0)] = √(q/2π), E[u²·1(u>0)] = q/2; φ'φ = u on the positive side, a²·u on the negative
    mean = (1 - a * a) * Math.sqrt(q / (2 * Math.PI));
    second = (q * (1 + a * a * a * a)) / 2;
    outputSecond = (q * (1 + a * a)) / 2;
  } else {
    const { f, df } = at;
    mean = gaussianExpectationSplit((u) => df(u) * (f(u) - c), q);
    second = gaussianExpectationSplit((u) => (df(u) * (f(u) - c)) ** 2, q);
    outputSecond = gaussianExpectationSplit((u) => (f(u) - c) ** 2, q);
  }
  // an element the input holds at zero maps to φ(0)·φ'(0) (relu'(0) = 0 as implementations define it)
  const zeroValue = (at.f(0) - c) * at.df(0);
  const zeroOutput = (at.f(0) - c) * (at.f(0) - c);
  SELF[0] = keep * mean + input.zeroFraction * zeroValue;
  SELF[1] = keep * second + input.zeroFraction * zeroValue * zeroValue;
  SELF[2] = keep * outputSecond + input.zeroFraction * zeroOutput;
}
/** selfMoments' E[φ'φ], E[φ'²φ²] and E[φ²], as raw doubles (read right after the call: no object per layer) */
const SELF = new Float64Array(3);

export const activationRule: AnalyticRule<ActivationStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<ActivationStash> {
    const spec = layer.spec as ActivationLayer;
    if (spec.activation === "softmax") return softmaxForward(ctx, layer, input);
    const stash = pointwiseStash(ctx, spec.activation, spec.slope, input, positionCount(layer.input));
    const output = stash.output as Signal;
    let factors = NO_FACTORS;
    if (ctx.ledger) {
      const ratio = forwardRatio(input, output);
      factors = [factor(ratio, forwardRuleOf(spec.activation, input, ratio), SOURCE)];
    }
    const records = ctx.ruleRecords;
    if (records !== undefined) return forwardInto(records, output, factors, "activation", NO_INNER, NO_HAZARDS, stash);
    return { output, factors, role: "activation", inner: NO_INNER, hazards: NO_HAZARDS, stash };
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: ActivationStash, output: Gradient): BackwardResult {
    const spec = layer.spec as ActivationLayer;
    const ratio = stash.probabilityJacobian;
    if (ratio !== undefined) {
      // softmax Jacobian diag(p) − p pᵀ: δ_in,j = p_j(δ_j − Σ p_k δ_k); E[S + S² − 2Σp³]/n for independent δ of one
      // variance (own algebra, as attention's rows), not E[p²], which leaves out the centring
      return {
        input: { q: ratio * output.q, zeroFraction: output.zeroFraction, shape: "gaussian", logVar: output.logVar },
        factors: ctx.ledger ? [factor(ratio, softmaxBackwardRule(ratio), SOFTMAX_SOURCE)] : NO_FACTORS,
        inner: [],
        weightGradients: [],
      };
    }
    const gradient = pointwiseGradient(spec.activation, stash, output, ctx.ledger);
    const factors = ctx.ledger ? [factor(BACKWARD_RATIO[0] as number, backwardText, SOURCES.backward)] : NO_FACTORS;
    const gate = output.channelGate;
    if (gate !== undefined && ctx.batch > 1 && gradient.q > 0) {
      // the norm's x̂ term takes N·q·correction from each channel's gated sum over batch × pixels (Gradient.channelGate):
      // the (B − 1)·P pairs of two samples, at one position or two, lose it (own algebra)
      const lost = gate.correction / ((ctx.batch - 1) * positionCount(layer.input));
      gradient.shared = (gradient.shared ?? 0) - gradient.q * lost;
      if (gradient.crossCorrelation !== undefined) gradient.crossCorrelation -= lost;
    }
    const name = spec.activation;
    if ((name === "relu" || name === "leaky-relu") && gradient.homogeneousSum === undefined && output.windowMaximum === undefined && gate === undefined && output.curvature === undefined && stash.output !== undefined) {
      // Euler's theorem, u·φ'(u) = φ(u): Σ u·δ_u = Σ φ(u)·g over batch × positions, which the linear layer below holds along
      // its unit's own weights (as a max pool's sum); its pairs share the output's mean, E[x·φ'(w·x)] = E[φ'']·Cov(x, u) ≠ 0
      // for a rectifier (Stein's lemma), a part the same in every sample that the pairs of input and gradient miss. Not
      // where the loss's curvature is carried: the sum also holds its part there, which the layer below adds as its own
      gradient.homogeneousSum = gradientSum(ctx.batch, positionCount(layer.output), output, stash.output) + eulerShare(output, layer);
    }
    const records = ctx.ruleRecords;
    if (records !== undefined) return backwardInto(records.pointwiseBackward, gradient, factors, NO_WEIGHT_GRADIENTS);
    return { input: gradient, factors, inner: NO_INNER_GRADIENTS, weightGradients: NO_WEIGHT_GRADIENTS };
  },
};

/** Softmax probabilities over n entries from logits of variance q: second moment, spread and rms. */
export function softmaxMoments(q: number, n: number): { second: number; elementLog2Spread: number } {
  // E[p²] of n independent N(0, q) logits by the Laplace-transform quadrature, as attention and the loss take it
  // (Cressie et al. 1981; src/numeric/softmax.ts), not the log-normal min(e^q/n², 1/n)
  const second = gaussianSoftmaxMoments(q, Math.max(n, 1)).second;
  return { second, elementLog2Spread: Math.sqrt(q) / Math.LN2 };
}

function softmaxForward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<ActivationStash> {
  const n = featureWidth(layer.input);
  const logitVariance = Math.max(input.q - input.mean * input.mean, 0);
  const { second, elementLog2Spread } = softmaxMoments(logitVariance, n);
  const jacobian = attentionRowSums(n, false, logitVariance).centredSquares / n;
  const output: Signal = {
    q: second,
    mean: 1 / n,
    zeroFraction: 0,
    shape: "log-normal",
    elementLog2Spread,
    bound: 1,
    logVar: 0,
    gaussian: false,
  };
  return {
    output,
    factors: ctx.ledger ? [factor(input.q > 0 ? second / input.q : 0, softmaxForwardRule(n, second, logitVariance), SOFTMAX_SOURCE)] : NO_FACTORS,
    role: "activation",
    inner: [],
    hazards: [
      {
        kind: "softmax-exp",
        input,
        inputElements: ctx.batch * sampleElements(layer.input),
        terms: n,
        guarded: true,
        detail: ctx.details ? softmaxDetail(n) : "",
      },
    ],
    stash: { input, derivativeSecond: 0, derivativeMean: 0, derivativeZeroFraction: 0, kappaBackward: 2, derivativeCross: 0, derivativeCrossPosition: 0, allOff: 0, probabilityJacobian: Number.isFinite(jacobian) ? jacobian : second },
  };
}

// The wording makers below hold only the numbers they print: a closure made inside a rule would keep the rule's
// variables in a context allocated on every call, in the end pass too, where no wording is read.

function forwardRule(name: ActivationName, qNonzero: number, ratio: number, gaussian: boolean): Text {
  return () => `${name}: E[φ²]/q at q = ${fmt(qNonzero)} is ${fmt(ratio)}${gaussian ? "" : " (input not Gaussian: approximate)"}`;
}

function backwardRule(name: string, derivativeSecond: number): Text {
  return () => `${name}: E[φ'²] = ${fmt(derivativeSecond)}`;
}

function maxPoolRule(name: string, k: number, allOff: number, derivativeSecond: number): Text {
  return () => `${name} before a max-pool of ${k}: the arg-max is off with probability ${fmt(allOff)}, E[φ'²] = ${fmt(derivativeSecond)}`;
}

function softmaxBackwardRule(ratio: number): Text {
  return () => `softmax: E[p_j²·(δ_j − Σ p δ)²]/E[δ²] = ${fmt(ratio)}`;
}

function softmaxForwardRule(n: number, second: number, logitVariance: number): Text {
  return () => `softmax over ${n}: E[p²] = ${fmt(second)} at logit variance ${fmt(logitVariance)}`;
}

function softmaxDetail(n: number): Text {
  return () => `exp of ${n} scores per softmax (row maximum assumed subtracted)`;
}
