/** Helpers shared by the analytic rules of several layer families. */
import { featureWidth } from "../graph/shape.js";
import type { GraphLayer, GraphWeight } from "../graph/types.js";
import type { InitSpec } from "../spec/types.js";
import type { BackwardResult, Curvature, Factor, ForwardResult, Gradient, InnerGradient, InnerTensor, OpHazard, RuleRecords, Signal, Text, WeightGradientMoment } from "./types.js";

/** Sources cited by more than one rule. */
export const SOURCES = {
  lengthMap: "Poole et al. 2016, length map",
  backward: "Schoenholz et al. 2017, backward recursion",
  weightGradient: "sum over batch and positions of input × gradient, independent signs (chain rule; common practice)",
  finiteWidth: "Hanin & Nica 2019, log-normal norm with variance κ·Σ1/width",
} as const;

/** κ of a linear map's squared norm: Var[g²]/E[g²]² = 2 for Gaussian g (SCIENCE.md §2.6). */
export const LINEAR_KAPPA = 2;

/** The factors of a rule in a phase without a ledger (OpContext.ledger false): one shared empty list. */
export const NO_FACTORS: readonly Factor[] = Object.freeze([]);

// The empty lists of a rule's result, shared (frozen: nothing adds to a result's lists once it is returned), so the rules
// of the commonest layers make no lists per layer and pass
export const NO_INNER = Object.freeze([]) as unknown as InnerTensor[];
export const NO_HAZARDS = Object.freeze([]) as unknown as OpHazard[];
export const NO_INNER_GRADIENTS = Object.freeze([]) as unknown as InnerGradient[];
export const NO_WEIGHT_GRADIENTS = Object.freeze([]) as unknown as WeightGradientMoment[];

/** A ledger factor. */
export function factor(ratio: number, rule: Text, source: string): Factor {
  return { ratio, rule, source };
}

/** Resolve lazy ledger wording. */
export function textOf(text: Text): string {
  return typeof text === "string" ? text : text();
}

/** The named weight of a layer; throws when the graph lacks it (a graph builder bug, not user input). */
export function weightOf(layer: GraphLayer, name: string): GraphWeight {
  const found = maybeWeight(layer, name);
  if (found === undefined) throw new RangeError(`layer ${layer.name} has no weight "${name}"`);
  return found;
}

/** The named weight, or undefined (optional biases). */
export function maybeWeight(layer: GraphLayer, name: string): GraphWeight | undefined {
  // a plain loop: called for every layer in both passes, where find() would make a closure each time
  const weights = layer.weights;
  for (let i = 0; i < weights.length; i++) {
    const w = weights[i] as GraphWeight;
    if (w.name === name) return w;
  }
  return undefined;
}

/**
 * Format a number for a ledger rule: 4 significant digits, exponent form when far from 1, written as every other
 * number headroom prints (1.638e4, not toExponential's 1.638e+4).
 * @example fmt(16384) // => "1.638e4"
 */
/**
 * The source of an initialisation's variance rule, as the ledger cites it: the paper that gives the rule of that kind,
 * or what the spec gives for a fixed scale.
 */
export function initSource(init: InitSpec | undefined): string {
  switch (init?.kind) {
    case "he":
      return "He et al. 2015, Delving Deep into Rectifiers: var = gain²·2/fan-in";
    case "glorot":
      return "Glorot & Bengio 2010: var = gain²·2/(fan-in + fan-out)";
    case "lecun":
      return "LeCun et al. 1998, Efficient BackProp: var = gain²/fan-in";
    case "orthogonal":
      // from memory: an orthogonal matrix's rows and columns have unit norm, so its entries have variance 1/max(n, m)
      return "Saxe et al. 2014 (orthogonal matrices): var = gain²/max(fan-in, fan-out)";
    case "normal":
      return "the spec's standard deviation: var = (gain·std)²";
    case "uniform":
      return "uniform on [−limit, limit]: var = (gain·limit)²/3";
    default:
      return "the spec's initial value";
  }
}

export function fmt(value: number): string {
  if (value === 0 || !Number.isFinite(value)) return String(value);
  const a = Math.abs(value);
  return a >= 1e4 || a < 1e-3 ? value.toExponential(3).replace("e+", "e") : Number(value.toPrecision(4)).toString();
}

/**
 * What an operation hazard sees of a signal whose second moment becomes q (the terms of a weighted sum): the signal's
 * fields, q and shape replaced, as a spread would give for every field a magnitude profile reads. Written out: a
 * spread over signals of many shapes is slow.
 */
export function hazardInput(s: Signal, q: number, shape: Signal["shape"]): Signal {
  return {
    q,
    mean: 0,
    zeroFraction: s.zeroFraction,
    shape,
    logVar: s.logVar,
    gaussian: true,
    bound: s.bound,
    elementLog2Spread: s.elementLog2Spread,
    tail: s.tail,
    shared: s.shared,
    positionCorrelation: s.positionCorrelation,
  };
}

/**
 * A copy of a gradient with every field of {@link Gradient} written out (absent ones undefined, which every reader
 * takes as absent), for rules that then replace a few: a spread with added keys makes a new hidden class per object
 * in V8, and the readers of such gradients go megamorphic.
 */
export function gradientCopy(g: Gradient): Gradient {
  return {
    q: g.q,
    zeroFraction: g.zeroFraction,
    shape: g.shape,
    logVar: g.logVar,
    elementLog2Spread: g.elementLog2Spread,
    bound: g.bound,
    fresh: g.fresh,
    shared: g.shared,
    positionCorrelation: g.positionCorrelation,
    crossCorrelation: g.crossCorrelation,
    allZero: g.allZero,
    windowMaximum: g.windowMaximum,
    windowGate: g.windowGate,
    reluGated: g.reluGated,
  };
}

/** The shared (per-feature batch mean²) part of a signal's second moment. */
export function sharedOf(signal: Signal): number {
  return signal.shared ?? signal.mean * signal.mean;
}

/**
 * A zero-mean Gaussian tensor made by a random linear map of the given output width. The fields the linear rules set
 * afterwards are keys from the start, undefined (which every reader takes as absent): a key added later moves the
 * object to a new hidden class and grows an out-of-object store, on every layer of both passes.
 */
export function linearOutput(q: number, logVar: number, width: number, shared = 0): Signal {
  return {
    q,
    shared,
    mean: 0,
    zeroFraction: 0,
    shape: "gaussian",
    logVar: logVar + LINEAR_KAPPA / width,
    fresh: { width, kappa: LINEAR_KAPPA },
    gaussian: true,
    positionCorrelation: undefined,
    correlationSquare: undefined,
    sharedLogVar: undefined,
    featureCovariance: undefined,
  };
}

/** A dense Gaussian gradient made by a transposed random linear map into the given width (its later fields as {@link linearOutput}'s). */
export function linearGradient(q: number, logVar: number, width: number): Gradient {
  return {
    q,
    zeroFraction: 0,
    shape: "gaussian",
    logVar: logVar + LINEAR_KAPPA / width,
    fresh: { width, kappa: LINEAR_KAPPA },
    cosineSquare: undefined,
    coupling: undefined,
    sharedLogVar: undefined,
    curvature: undefined,
    shared: undefined,
    positionCorrelation: undefined,
    crossCorrelation: undefined,
    // set below a homogeneous layer by the walk (src/magnitude/predict.ts tidyGradient)
    eulerSum: undefined,
  };
}

/**
 * The finite-width variance of a sum a + b of two tensors whose second moments are qa and qb, where b was
 * computed from a (so b's log-variance already contains `shared` of a's): linearise ln‖a+b‖² around the means.
 * Spread along a skip path is not re-accumulated (Hanin & Rolnick 2018): only the branch's own part is added,
 * weighted by its share of the sum, squared.
 */
export function sumLogVar(qa: number, va: number, qb: number, vb: number, shared: number): number {
  const total = qa + qb;
  if (!(total > 0)) return va;
  const wa = qa / total;
  const wb = qb / total;
  const own = Math.max(vb - shared * va, 0);
  return (wa + wb * shared) ** 2 * va + wb * wb * own;
}

function clampCorrelation(c: number): number {
  return Number.isFinite(c) ? Math.min(Math.max(c, -1), 1) : 0;
}

/**
 * Correlation between two samples of a batch, same feature: the shared part over q (a signal's mean² when unset).
 * Negative below a batch norm, whose gradient sums to zero over the batch.
 */
export function sampleCorrelationOf(s: Signal | Gradient): number {
  if (!(s.q > 0)) return 0;
  const shared = s.shared ?? ("mean" in s ? s.mean * s.mean : 0);
  return clampCorrelation(shared / s.q);
}

/** Correlation between two positions of one sample, same feature; at least the cross-sample correlation when unset. */
export function positionCorrelationOf(s: Signal | Gradient): number {
  return s.positionCorrelation === undefined ? sampleCorrelationOf(s) : clampCorrelation(s.positionCorrelation);
}

/** Correlation between two samples at two different positions, same feature; the sample correlation when unset. */
export function crossCorrelationOf(s: Signal | Gradient): number {
  // a signal has no such field: reading it gives undefined, as for a gradient without one (a load, where `in` looked the
  // key up on each of the many object shapes met here)
  const cross = (s as { crossCorrelation?: number }).crossCorrelation;
  return cross !== undefined ? clampCorrelation(cross) : sampleCorrelationOf(s);
}

/**
 * {@link sampleCorrelationOf}, {@link positionCorrelationOf} and {@link crossCorrelationOf} of one signal or gradient,
 * written into `out` at `at`, `at + 1`, `at + 2`: the same numbers, but as raw doubles, where each call the optimiser
 * did not inline boxed its result in a heap number (several per layer of both passes)
 */
export function pairCorrelationsInto(s: Signal | Gradient, out: Float64Array, at: number): void {
  // the three functions' arithmetic written out (clampCorrelation's too): a call the optimiser leaves out of line
  // returns its number boxed
  const q = s.q;
  let sample = 0;
  if (q > 0) {
    const c = (s.shared ?? ("mean" in s ? s.mean * s.mean : 0)) / q;
    sample = Number.isFinite(c) ? Math.min(Math.max(c, -1), 1) : 0;
  }
  out[at] = sample;
  const position = s.positionCorrelation;
  out[at + 1] = position === undefined ? sample : Number.isFinite(position) ? Math.min(Math.max(position, -1), 1) : 0;
  const cross = (s as { crossCorrelation?: number }).crossCorrelation;
  out[at + 2] = cross === undefined ? sample : Number.isFinite(cross) ? Math.min(Math.max(cross, -1), 1) : 0;
}

/** pairCorrelationsInto's scratch for gradientSum: the input's three, then the gradient's */
const SUM_PAIRS = new Float64Array(6);

/**
 * Mean correlation over all pairs of the batch × positions terms: two positions of one sample (ρ_position), one
 * position of two samples (ρ_sample), two positions of two samples (ρ_cross, by default ρ_sample).
 */
export function meanPairCorrelation(
  batch: number,
  positions: number,
  sampleCorrelation: number,
  positionCorrelation: number,
  crossCorrelation = sampleCorrelation,
): number {
  const terms = batch * positions;
  if (terms < 2) return 0;
  const pairs =
    (positions - 1) * clampCorrelation(positionCorrelation) +
    (batch - 1) * (clampCorrelation(sampleCorrelation) + (positions - 1) * clampCorrelation(crossCorrelation));
  return pairs / (terms - 1);
}

/**
 * E[(Σ_t a_t)²] for a sum over batch × positions terms of second moment q each, whose pairs are correlated by
 * ρ_position (two positions of one sample) or ρ_sample (two samples): N·q·(1 + (N − 1)·ρ̄), the variance of a sum of
 * N correlated terms with ρ̄ their mean pairwise correlation (common practice).
 */
export function correlatedSum(
  batch: number,
  positions: number,
  q: number,
  sampleCorrelation: number,
  positionCorrelation: number,
  crossCorrelation = sampleCorrelation,
): number {
  const terms = batch * positions;
  const pairs = (terms - 1) * meanPairCorrelation(batch, positions, sampleCorrelation, positionCorrelation, crossCorrelation);
  const factor = 1 + pairs;
  // a sum forced to zero (a gradient below batch norm summed over its batch and pixels) has no second moment left:
  // pair correlations that cancel the 1 to within the rounding of their own sum leave only that rounding (a few ulp of
  // 1 + |pairs|; own algebra), which would stand for a gradient of about 1e-8 of the terms' rms
  if (factor <= 64 * Number.EPSILON * (1 + Math.abs(pairs))) return 0;
  return terms * q * factor;
}

/**
 * E[S·S'] for the sums S, S' of two different micro-batches (or workers) of `batch` samples: every pair of their terms
 * is a pair of two samples, of correlation ρ_sample at one position and ρ_cross at two, as within one batch (the samples
 * are drawn alike and the weights are the same). A negative pair correlation is a batch norm's constraint that each
 * batch's sum is zero, which does not reach across batches: none is counted then (Ioffe & Szegedy 2015, per-batch
 * statistics).
 */
export function betweenBatches(batch: number, positions: number, q: number, sampleCorrelation: number, crossCorrelation = sampleCorrelation): number {
  return batch * batch * positions * q * Math.max(sampleCorrelation + (positions - 1) * crossCorrelation, 0);
}

/** {@link betweenBatches} for a weight gradient's terms x·δ (or δ alone, as for a bias), paired as in {@link gradientSum}. */
export function gradientBetween(batch: number, positions: number, delta: Gradient, input?: Signal): number {
  if (input === undefined) return betweenBatches(batch, positions, delta.q, sampleCorrelationOf(delta), crossCorrelationOf(delta));
  return betweenBatches(batch, positions, input.q * delta.q, sampleCorrelationOf(input) * sampleCorrelationOf(delta), crossCorrelationOf(input) * crossCorrelationOf(delta));
}

/**
 * E[(Σ_t x_t·δ_t)²] for a weight gradient summed over batch × positions: pairs of terms add E[x x']·E[δ δ'] (the
 * parts samples and positions share, input and gradient taken as independent: Schoenholz et al. 2017); with δ alone
 * (`input` omitted), the sum of the gradient itself, as for a bias.
 */
export function gradientSum(batch: number, positions: number, delta: Gradient, input?: Signal): number {
  const pairs = SUM_PAIRS;
  pairCorrelationsInto(delta, pairs, 3);
  if (input === undefined) return correlatedSum(batch, positions, delta.q, pairs[3] as number, pairs[4] as number, pairs[5] as number);
  pairCorrelationsInto(input, pairs, 0);
  const sample = (pairs[0] as number) * (pairs[3] as number);
  const cross = (pairs[2] as number) * (pairs[5] as number);
  return correlatedSum(batch, positions, input.q * delta.q, sample, (pairs[1] as number) * (pairs[4] as number), cross);
}

/**
 * The square of a channel's share of Gradient.eulerSum, E[S]² for S = Σ z·δ over one channel's batch × positions: the
 * channels of a layer are alike, so each holds 1/channels of the sum over all of them (Euler's theorem); what S spreads
 * about that mean is gradientSum's count (own algebra)
 */
export function eulerShare(g: Gradient, layer: GraphLayer): number {
  const total = g.eulerSum;
  const channels = featureWidth(layer.output);
  if (total === undefined || !(channels > 0)) return 0;
  const share = total / channels;
  return share * share;
}

/**
 * The loss's curvature seen through a random diagonal map D (a pointwise derivative, a dropout mask): E[D·M·D] with
 * E[d_i²] = `onDiagonal` and E[d_i·d_j] = `offDiagonal` for i ≠ j, M's entries taken as independent of D (as Curvature).
 */
export function diagonalPullback(m: Curvature, onDiagonal: number, offDiagonal: number): Curvature {
  const diagonalSquare = onDiagonal * onDiagonal * m.diagonalSquare;
  const pulled: Curvature = {
    diagonal: onDiagonal * m.diagonal,
    diagonalSquare,
    rowSquares: diagonalSquare + offDiagonal * offDiagonal * Math.max(m.rowSquares - m.diagonalSquare, 0),
  };
  keepMarks(m, pulled);
  return pulled;
}

/**
 * What a pulled-back curvature keeps of the one above it besides its statistics: whether it is indefinite and its
 * tangent marks (Curvature.tangentExcess, tangentAbove, tangentAlong). Dense layers and pointwise maps keep them; a
 * residual sum works them out for its input where it can follow its branch (src/ops/residual/analytic.ts blockMarks);
 * the families that build their own matrix (norms, flatten, attention, other residual sums) start again at 1.
 */
export function keepMarks(from: Curvature, to: Curvature): void {
  if (from.indefinite === true) to.indefinite = true;
  if (from.tangentExcess !== undefined) to.tangentExcess = from.tangentExcess;
  if (from.tangentAbove !== undefined) to.tangentAbove = from.tangentAbove;
  if (from.tangentAlong !== undefined) to.tangentAlong = from.tangentAlong;
}

/** The share of y along J·h that a curvature's statistics carry: min(1, along²/excess) (Curvature.tangentAlong). */
export function tangentShare(excess: number, along = 1): number {
  return Math.min(1, (along * along) / excess);
}

/**
 * The curvature `m` below a pointwise layer (already pulled through Φ'), for self parts that read y ≈ J·h: the tangent
 * path from its input u grows by `own` = E[(φ'(u)·u)²]/E[φ²] through this layer and by `independent` = E[φ'²]·E[u²]/E[φ²]
 * where it arrives from further down (both 1 for ReLU, leaky ReLU and the identity: φ'(u)·u = φ(u)). Its statistics are
 * rescaled to carry min(1, 1/excess) of the excess (see Curvature.tangentExcess; own algebra, Cauchy–Schwarz on y's
 * share along J·h).
 */
export function limitTangent(m: Curvature, own: number, independent: number): void {
  if (!(own > 0) || !(independent > 0) || !Number.isFinite(own) || !Number.isFinite(independent)) return;
  const above = m.tangentAbove ?? 1;
  const before = m.tangentExcess ?? 1;
  // where φ'(u)·u outgrows φ(u) near 0 (SiLU, GELU: by φ''(0)·u²/2) the two still point alike and y's share along J·h
  // stays near 1 (pre-norm SiLU blocks measured so: test/magnitude/skip-projection.test.ts): only a unit that shrinks
  // the tangent (a saturating one) counts here
  const after = Math.min(own, 1) * above;
  const scale = tangentShare(after, m.tangentAlong) / tangentShare(before, m.tangentAlong);
  if (scale !== 1) {
    const root = Math.sqrt(scale);
    m.diagonal *= root;
    m.diagonalSquare *= scale;
    m.rowSquares *= scale;
    if (m.skip !== undefined) m.skip = { rowSquares: m.skip.rowSquares * scale, diagonalSquare: m.skip.diagonalSquare * scale, covariance: m.skip.covariance * root };
  }
  m.tangentExcess = after;
  m.tangentAbove = above * independent;
}

/**
 * The terms of a sum a backward rule accumulates: products of two independent factors, E[(a·b)²] = E[a²]·E[b²] (zero
 * where either is, spread over draws by both), taken as Gaussian as the forward rules' products are (hazardInput).
 */
export function productTerms(q: number, zeroFraction: number, logVar: number): Gradient {
  return { q, zeroFraction: Math.min(Math.max(zeroFraction, 0), 1), shape: "gaussian", logVar };
}

/**
 * A weight gradient summed over the batch × positions `terms` of one micro-batch: products x·δ of the layer's input (or
 * whatever the weight multiplies) and the gradient it meets, in the accumulate format (chain rule; common practice).
 */
export function weightSumHazard(details: boolean, weight: GraphWeight, makes: string, x: Signal | Gradient, delta: Gradient, terms: number): OpHazard {
  return {
    kind: "accumulation",
    input: productTerms(x.q * delta.q, 1 - (1 - x.zeroFraction) * (1 - delta.zeroFraction), x.logVar + delta.logVar),
    inputElements: weight.elements * terms,
    terms,
    guarded: false,
    detail: details ? weightSumWords(makes, terms) : "",
    makes,
  };
}

/**
 * A transposed map's products w·δ (weights of variance `variance`, independent of δ) summed over `terms` outputs per
 * element of the gradient it makes (`made`, `elements` of them): δ_in = Wᵀ·δ_out sums fan-out terms (Schoenholz et al.
 * 2017, backward recursion).
 */
export function transposedHazard(details: boolean, variance: number, delta: Gradient, terms: number, made: Gradient, elements: number, makes: string, what: string): OpHazard {
  return backwardSumHazard(details, productTerms(variance * delta.q, delta.zeroFraction, delta.logVar), terms, made, elements, makes, what);
}

/** A backward sum of `terms` products of moments `products` per element of the gradient it makes (`made`, `elements`). */
export function backwardSumHazard(details: boolean, products: Gradient, terms: number, made: Gradient, elements: number, makes: string, what: string): OpHazard {
  return {
    kind: "accumulation",
    input: products,
    inputElements: elements * terms,
    output: made,
    outputElements: elements,
    terms,
    guarded: false,
    detail: details ? transposedWords(what, terms) : "",
    makes,
  };
}

/**
 * New hazard records for OpContext.ruleRecords, in the key order of the records the functions above make (a
 * forward accumulation as linearForward's, weightSumHazard's, backwardSumHazard's, linearBackward's moments), each one
 * written whole on every use.
 */
export function ruleRecords(): RuleRecords {
  const signal = hazardInput({ q: 0, mean: 0, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true }, 0, "gaussian");
  // the moments' key order as linearBackward's literals (the bias has no alignedQ)
  const weight: WeightGradientMoment = { weight: "weight", q: 0, alignedQ: 0, betweenQ: 0, coherentQ: 0, terms: 0, zeroFraction: 0, logVar: 0, rule: "" };
  const bias: WeightGradientMoment = { weight: "bias", q: 0, betweenQ: 0, coherentQ: 0, terms: 0, zeroFraction: 0, logVar: 0, rule: "" };
  // the results' key order as the rules' literals (a pointwise backward result has no hazards)
  const forward: ForwardResult = { output: signal, factors: NO_FACTORS, role: "activation", inner: NO_INNER, hazards: NO_HAZARDS, stash: undefined };
  const linearBackward: BackwardResult = { input: undefined, factors: NO_FACTORS, inner: NO_INNER_GRADIENTS, weightGradients: NO_WEIGHT_GRADIENTS, hazards: NO_HAZARDS };
  const pointwiseBackward: BackwardResult = { input: undefined, factors: NO_FACTORS, inner: NO_INNER_GRADIENTS, weightGradients: NO_WEIGHT_GRADIENTS };
  return {
    forward,
    linearBackward,
    pointwiseBackward,
    weight,
    bias,
    weightOnly: [weight],
    weightAndBias: [weight, bias],
    accumulation: [{ kind: "accumulation", input: signal, inputElements: 0, output: signal, outputElements: 0, terms: 0, guarded: false, detail: "" }],
    sums: [
      { kind: "accumulation", input: productTerms(0, 0, 0), inputElements: 0, terms: 0, guarded: false, detail: "", makes: "" },
      { kind: "accumulation", input: productTerms(0, 0, 0), inputElements: 0, output: signal, outputElements: 0, terms: 0, guarded: false, detail: "", makes: "" },
    ],
  };
}

/** A rule's forward result written into the records (see OpContext.ruleRecords). */
export function forwardInto<S>(records: RuleRecords, output: Signal, factors: readonly Factor[], role: ForwardResult["role"], inner: InnerTensor[], hazards: OpHazard[], stash: S): ForwardResult<S> {
  const result = records.forward as ForwardResult<S>;
  result.output = output;
  result.factors = factors;
  result.role = role;
  result.inner = inner;
  result.hazards = hazards;
  result.stash = stash;
  return result;
}

/**
 * A rule's backward result written into one of the records' results (records.linearBackward, whose caller then sets
 * its hazards, or records.pointwiseBackward): no inner gradients, as the rules that fill records have none.
 */
export function backwardInto(result: BackwardResult, input: Gradient, factors: readonly Factor[], weightGradients: BackwardResult["weightGradients"]): BackwardResult {
  result.input = input;
  result.factors = factors;
  result.inner = NO_INNER_GRADIENTS;
  result.weightGradients = weightGradients;
  return result;
}

/**
 * linearForward's accumulation hazard written into the records (the same numbers as a new one): the products w·x of a
 * signal `input` whose second moment becomes `q` (hazardInput's fields), summed over `terms` per output element.
 */
export function accumulationInto(records: RuleRecords, input: Signal, q: number, inputElements: number, output: Signal, outputElements: number, terms: number, detail: Text): OpHazard[] {
  const list = records.accumulation;
  const h = list[0] as OpHazard;
  const m = h.input as Signal;
  m.q = q;
  m.mean = 0;
  m.zeroFraction = input.zeroFraction;
  m.shape = "gaussian";
  m.logVar = input.logVar;
  m.gaussian = true;
  m.bound = input.bound;
  m.elementLog2Spread = input.elementLog2Spread;
  m.tail = input.tail;
  m.shared = input.shared;
  m.positionCorrelation = input.positionCorrelation;
  h.inputElements = inputElements;
  h.output = output;
  h.outputElements = outputElements;
  h.terms = terms;
  h.guarded = false;
  h.detail = detail;
  return list;
}

/**
 * linearBackward's two sums written into the records (the same numbers as weightSumHazard's and transposedHazard's):
 * the weight gradient's products x·δ over `terms`, then δ_in = Wᵀ·δ over the weight's fan-out into `made`.
 */
export function linearSumsInto(
  records: RuleRecords,
  details: boolean,
  weight: GraphWeight,
  x: Signal | Gradient,
  delta: Gradient,
  terms: number,
  variance: number,
  made: Gradient,
  elements: number,
  what: string,
): OpHazard[] {
  const list = records.sums;
  const sum = list[0] as OpHazard;
  setProductTerms(sum.input as Gradient, x.q * delta.q, 1 - (1 - x.zeroFraction) * (1 - delta.zeroFraction), x.logVar + delta.logVar);
  sum.inputElements = weight.elements * terms;
  sum.terms = terms;
  sum.guarded = false;
  sum.detail = details ? weightSumWords("weight-gradient", terms) : "";
  sum.makes = "weight-gradient";
  const fanOut = weight.fanOut;
  const transposed = list[1] as OpHazard;
  setProductTerms(transposed.input as Gradient, variance * delta.q, delta.zeroFraction, delta.logVar);
  transposed.inputElements = elements * fanOut;
  transposed.output = made;
  transposed.outputElements = elements;
  transposed.terms = fanOut;
  transposed.guarded = false;
  transposed.detail = details ? transposedWords(what, fanOut) : "";
  transposed.makes = "input";
  return list;
}

/** productTerms' fields written into `g`. */
function setProductTerms(g: Gradient, q: number, zeroFraction: number, logVar: number): void {
  g.q = q;
  g.zeroFraction = Math.min(Math.max(zeroFraction, 0), 1);
  g.shape = "gaussian";
  g.logVar = logVar;
}

/**
 * Words that depend on a name and a count alone, made once for a run of calls with the same pair: a stack of like
 * layers gives every site of a kind the same words, where a closure per site made a string of its own for each. (The
 * judgement's `Words`, src/risk/words.ts, keeps sentences by six keys; the layer rules sit below it and key by two.)
 */
export class CountWords {
  private name = "";
  private count = NaN;
  private text = "";

  constructor(private readonly make: (name: string, count: number) => string) {}

  of(name: string, count: number): string {
    if (name !== this.name || count !== this.count) {
      this.text = this.make(name, count);
      this.name = name;
      this.count = count;
    }
    return this.text;
  }
}

const WEIGHT_SUM_WORDS = new CountWords((makes, terms) => `${makes}: ${terms} products of input and gradient (batch × positions of one micro-batch) summed`);
const TRANSPOSED_WORDS = new CountWords((what, terms) => `${what}: backward products summed over ${terms} terms per gradient element`);

function weightSumWords(makes: string, terms: number): Text {
  return WEIGHT_SUM_WORDS.of(makes, terms);
}

function transposedWords(what: string, terms: number): Text {
  return TRANSPOSED_WORDS.of(what, terms);
}
