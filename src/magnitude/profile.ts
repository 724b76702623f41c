/**
 * Turning propagated moments into magnitude profiles: the rms of the nonzero elements at the median draw, the
 * finite-width spread of that rms, and the expected largest element from the element shape's tail and the count.
 */
import { maxOfNormals } from "../ops/pool/analytic.js";
import type { OpElementShape, OpMixture, TailKind } from "../ops/types.js";
import { mixtureShareAbove, type ScaleMixture } from "../numeric/derivative-mixture.js";
import { fieldMixture } from "../numeric/gated-mixture.js";
import { erfc } from "../numeric/normal.js";
import { bisectDecreasing } from "../numeric/bisection.js";
import type { MagnitudeProfile } from "./types.js";

/** The moments a profile is made from (a forward Signal or a backward Gradient). */
export interface Moments {
  q: number;
  zeroFraction: number;
  shape: OpElementShape;
  logVar: number;
  bound?: number;
  elementLog2Spread?: number;
  tail?: TailKind;
  /** cross-sample second moment E[x_n·x_m] (a Signal's or Gradient's `shared`) */
  shared?: number;
  positionCorrelation?: number;
  mixture?: OpMixture;
  /** a gradient's row scale (Gradient.rows): its Gaussian or mixture elements are then scaled by √(χ²_k/k) too */
  rows?: number;
  rowCount?: number;
}

const EULER_GAMMA = 0.5772156649015329;

/**
 * Expected maximum of m independent N(0,1) values: quadrature of the order-statistic density below m = 64, the
 * refined extreme-value expansion a − (ln ln m + ln 4π)/(2a) + γ/a with a = √(2 ln m) above (SCIENCE.md §4: within
 * 1% of the exact value at m = 1e3).
 */
export function expectedMaxNormal(m: number): number {
  if (!(m > 1)) return 0;
  if (m < 64) {
    const k = Math.round(m);
    return maxOfNormals(k).m1;
  }
  const a = Math.sqrt(2 * Math.log(m));
  return a - (Math.log(Math.log(m)) + Math.log(4 * Math.PI)) / (2 * a) + EULER_GAMMA / a;
}

/** Expected largest |x| over n elements of rms 1 with Gaussian magnitudes: the max of 2n normals (both signs). */
export function expectedMaxAbsGaussian(n: number): number {
  if (n < 1) return 0;
  if (n < 1.5) return Math.sqrt(2 / Math.PI); // E|Z|
  return expectedMaxNormal(2 * n);
}

/**
 * Largest |xy| over n elements of a product of two independent unit Gaussians: the tail is
 * P(|XY| > t) = (2/π)∫_t^∞ K0 ≈ √(2/(π t))·e^(−t) (the density of XY is K0(|z|)/π), set equal to 1/n and solved.
 */
export function expectedMaxAbsProduct(n: number): number {
  if (n < 2) return expectedMaxAbsGaussian(n);
  const target = Math.log(n);
  let t = Math.max(target, 1);
  for (let i = 0; i < 50; i++) {
    // f(t) = t − ½ ln(2/(π t)) − ln n, f'(t) = 1 + 1/(2t)
    const f = t - 0.5 * Math.log(2 / (Math.PI * t)) - target;
    const step = f / (1 + 1 / (2 * t));
    t -= step;
    if (t <= 0) t = 1e-3;
    if (Math.abs(step) < 1e-12) break;
  }
  return Math.max(t, expectedMaxAbsGaussian(n));
}

/** log2 of the median of a log-normal element set whose rms is `rms` and log2 spread is `spread`. */
export function logNormalMedianLog2(rms: number, spread: number): number {
  // log2|x| ~ N(μ, σ²) ⇒ E[x²] = 2^(2μ + 2σ² ln 2), so log2 rms = μ + σ² ln 2
  return Math.log2(rms) - spread * spread * Math.LN2;
}

/**
 * The widest log2 spread a log-normal of rms `rms` over n elements can have while its expected largest element
 * (median + spread·E[max of n N(0,1)], SCIENCE.md §4) still reaches the bound, or the rms itself without one.
 * Wider, the law's second moment sits in elements larger than any of the n, or than the bound: softmax
 * probabilities whose E[p²] is held at 1/keys while the logits' spread grows without end (one key takes each
 * row) gave a largest element of 0 at logit rms 450. At this spread the largest reaches the bound and most
 * elements lie far below the rms, as concentrated probabilities do (common practice).
 */
export function widestLogNormalSpread(rms: number, bound: number | undefined, n: number): number {
  const a = expectedMaxNormal(n);
  // median = log2 rms − s²·ln 2 (logNormalMedianLog2); the largest at 2^L·rms solves ln 2·s² − a·s + L = 0
  const L = bound !== undefined && bound > rms ? Math.log2(bound / rms) : 0;
  const disc = a * a - 4 * Math.LN2 * L;
  return disc >= 0 ? (a + Math.sqrt(disc)) / (2 * Math.LN2) : a / Math.LN2;
}

/**
 * expectedMaxAbsGaussian by whole element count, in a small direct-mapped table: tensors of one network share a few
 * counts and each profile needs one, while counts that vary from layer to layer (fractional, or scaled by a share of
 * zeros) simply overwrite a slot. The stored value is the function's own, so results do not change. The slot is the top
 * 8 bits of n·⌊2^32/φ⌋ (Fibonacci hashing; Knuth, TAOCP vol. 3 §6.4): counts are mostly powers of two times a width,
 * which n mod 256 put all in slot 0 (8192, 4096, 65536, 256 and 2^20 on the 1,000-layer bench spec, every look-up missed).
 */
const GAUSSIAN_MAX_SLOTS = 256;
const gaussianMaxKey = new Float64Array(GAUSSIAN_MAX_SLOTS).fill(-1);
const gaussianMaxValue = new Float64Array(GAUSSIAN_MAX_SLOTS);
/** the last fractional count and its maximum, as raw doubles (module variables would box each one stored) */
const LAST_FRACTIONAL = new Float64Array([NaN, 0]);

function gaussianMaxOf(n: number): number {
  if (!(n >= 1 && n < 2147483648 && Number.isInteger(n))) {
    // a count scaled by a share of zeros is rarely met again, but a weight gradient's sum over micro-batches has its
    // per-micro-batch term's count, made right before it: the last such count is kept (the function's own value)
    const last = LAST_FRACTIONAL;
    if (n === last[0]) return last[1] as number;
    const max = expectedMaxAbsGaussian(n);
    last[0] = n;
    last[1] = max;
    return max;
  }
  const slot = Math.imul(n, 0x9e3779b1) >>> 24;
  if (gaussianMaxKey[slot] === n) return gaussianMaxValue[slot] as number;
  const max = expectedMaxAbsGaussian(n);
  gaussianMaxKey[slot] = n;
  gaussianMaxValue[slot] = max;
  return max;
}

// mixtureMax's bisection: at most 60 halvings, to 1e-10 of the largest element
const MAX_BISECTION = { maxSteps: 60, absTol: 0, relTol: 1e-10 };

/**
 * The expected largest |x| of n elements of a Gaussian scale mixture of rms 1, taken where the mixture's tail
 * Σ wᵢ·P(|Z| > m/cᵢ) equals a Gaussian's at its own expected largest element (the Gaussian's rule for one component),
 * by bisection: the tail falls as m grows, and at m = g·max cᵢ it is at most the Gaussian's.
 */
function mixtureMax(mixture: OpMixture, n: number): number {
  const law = fieldMixture(mixture);
  let byCount = MIXTURE_MAX.get(law);
  if (byCount === undefined) MIXTURE_MAX.set(law, (byCount = new Map()));
  const known = byCount.get(n);
  if (known !== undefined) return known;
  const g = gaussianMaxOf(n);
  const target = erfc(g / Math.SQRT2);
  // the scales fall along the components: the first is the widest; the search starts at that end, a quarter of it wide
  const widest = g * (law.scales[0] as number);
  const max = bisectDecreasing((m) => mixtureShareAbove(law, m), target, 0, widest, MAX_BISECTION, widest, widest / 4);
  if (byCount.size >= MIXTURE_MAX_COUNTS) byCount.clear();
  byCount.set(n, max);
  return max;
}

/**
 * mixtureMax by law and element count: fieldMixture gives one law object per field, and a network's layers share a
 * few of each (a residual stack's every gradient below a narrow head: 642 profiles, 2 laws and counts), while each
 * bisection sums the law ~40 times. The stored value is the function's own, so results do not change.
 */
const MIXTURE_MAX = new WeakMap<ScaleMixture, Map<number, number>>();
const MIXTURE_MAX_COUNTS = 64;

/** Expected largest element magnitude of n nonzero elements (the fields of the moments it reads, passed one by one). */
function maxElementOf(
  shape: OpElementShape,
  tail: TailKind | undefined,
  elementLog2Spread: number | undefined,
  bound: number | undefined,
  rms: number,
  n: number,
  mixture: OpMixture | undefined,
): number {
  if (!(rms > 0) || n < 1) return 0;
  let max: number;
  switch (shape) {
    case "gaussian-mixture":
      max = rms * (mixture === undefined ? gaussianMaxOf(n) : mixtureMax(mixture, n));
      break;
    case "gaussian":
    case "half-gaussian":
      max = rms * (tail === "product" ? expectedMaxAbsProduct(n) : gaussianMaxOf(n));
      break;
    case "uniform":
      max = rms * Math.sqrt(3) * (n / (n + 1));
      break;
    case "constant":
      max = rms;
      break;
    case "bounded":
      max = rms * gaussianMaxOf(n);
      break;
    case "log-normal": {
      const spread = elementLog2Spread ?? 0;
      max = Math.pow(2, logNormalMedianLog2(rms, spread) + spread * expectedMaxNormal(n));
      break;
    }
  }
  return bound !== undefined ? Math.min(max, bound) : max;
}

/**
 * A magnitude profile from propagated moments over `elements` elements.
 * rms is that of the nonzero elements at the median draw: ln of a squared norm is N(−V/2, V) relative to its mean
 * (SCIENCE.md §2.6), so the median rms is √(q/(1 − zero)) · e^(−V/4), and the standard deviation of log2(rms) is
 * √V/(2 ln 2).
 */
export function profileOf(m: Moments, elements: number): MagnitudeProfile {
  // each field is read once: the moments come in many object shapes, so every read is a slow lookup
  const rows = m.rows;
  const shape = m.shape;
  if (rows !== undefined && (shape === "gaussian" || shape === "gaussian-mixture")) {
    const rowCount = m.rowCount;
    const mixture = rowScaled(shape === "gaussian-mixture" ? m.mixture : undefined, rows, rowCount);
    return profileFrom(m.q, m.zeroFraction, "gaussian-mixture", m.logVar, m.bound, m.elementLog2Spread, m.tail, m.shared, m.positionCorrelation, elements, mixture);
  }
  return profileFrom(m.q, m.zeroFraction, shape, m.logVar, m.bound, m.elementLog2Spread, m.tail, m.shared, m.positionCorrelation, elements, m.mixture);
}

/**
 * The mixture field of a row-scaled profile: `base` (an activation's factor, or none) with the row scale, the same object
 * as the last call's for the same base and row scale (a gradient's profiles come one after another, and every gradient
 * of a stack without activation factors has the same field), so the risk laws' cache by field object finds it again: a
 * new object per profile built the laws' memo key once per profile. Nothing writes a profile's mixture field.
 */
function rowScaled(base: OpMixture | undefined, rows: number, rowCount: number | undefined): OpMixture {
  const last = lastRowScaled;
  if (last !== undefined && last.base === base && last.field.rows === rows && last.field.rowCount === rowCount) return last.field;
  // every key in the base's own order (JSON leaves the undefined ones out): one object layout, where a spread made one per base
  const field: OpMixture =
    base !== undefined ? { activation: base.activation, inputVariance: base.inputVariance, slope: base.slope, of: base.of, rows, rowCount } : { rows, rowCount };
  lastRowScaled = { base, field };
  return field;
}
let lastRowScaled: { base: OpMixture | undefined; field: OpMixture } | undefined;

/**
 * e^(−V/4), the median draw's factor on the rms at ln-variance V ≥ 0 (SCIENCE.md §2.6), for the last two V asked:
 * profiles of one V come in runs (a weight gradient's combined, per-micro-batch and summed profiles and its coherent
 * rms; a layer's output and the sum of the layer below that reads it), about half of a prediction's exponentials. The
 * value kept is the very exponential, so results do not change.
 */
export function medianFactor(logVar: number): number {
  const memo = MEDIAN_FACTORS;
  if (logVar === memo[0]) return memo[1] as number;
  if (logVar === memo[2]) {
    const factor = memo[3] as number;
    memo[2] = memo[0] as number;
    memo[3] = memo[1] as number;
    memo[0] = logVar;
    memo[1] = factor;
    return factor;
  }
  const factor = Math.exp(-logVar / 4);
  memo[2] = memo[0] as number;
  memo[3] = memo[1] as number;
  memo[0] = logVar;
  memo[1] = factor;
  return factor;
}
/** the last V and its factor, then the one before: raw doubles (module variables would box each one stored) */
const MEDIAN_FACTORS = new Float64Array([NaN, 1, NaN, 1]);

/**
 * {@link profileOf} for moments with no bound, element spread, tail or shared parts (weights, weight gradients and
 * their sums, loss values): the same arithmetic, with no moments object to make and read.
 */
export function plainProfile(q: number, zeroFraction: number, shape: OpElementShape, logVar: number, elements: number): MagnitudeProfile {
  return profileFrom(q, zeroFraction, shape, logVar, undefined, undefined, undefined, undefined, undefined, elements);
}

function profileFrom(
  q: number,
  givenZeroFraction: number,
  givenShape: OpElementShape,
  givenLogVar: number,
  bound: number | undefined,
  givenSpread: number | undefined,
  tail: TailKind | undefined,
  shared: number | undefined,
  given: number | undefined,
  elements: number,
  mixture?: OpMixture,
): MagnitudeProfile {
  // a mixture shape without its mixture is the Gaussian it mixes
  const shape = givenShape === "gaussian-mixture" && mixture === undefined ? "gaussian" : givenShape;
  const zeroFraction = Math.min(Math.max(givenZeroFraction, 0), 1);
  const keep = 1 - zeroFraction;
  const logVar = Math.max(givenLogVar, 0);
  const meanRms = keep > 0 && q > 0 ? Math.sqrt(q / keep) : 0;
  let rms = meanRms * medianFactor(logVar);
  if (bound !== undefined && rms > bound) rms = bound;
  let elementLog2Spread = givenSpread;
  if (shape === "log-normal" && elementLog2Spread !== undefined && elementLog2Spread > 0 && rms > 0) {
    const widest = widestLogNormalSpread(rms, bound, elements * keep);
    if (elementLog2Spread > widest) elementLog2Spread = widest;
  }
  const log2Spread = Math.sqrt(logVar) / (2 * Math.LN2);
  const maxElement = maxElementOf(shape, tail, elementLog2Spread, bound, rms, elements * keep, mixture);
  const sampleCorrelation = shared !== undefined && shared !== 0 && q > 0 ? Math.min(Math.max(shared / q, -1), 1) : undefined;
  const positionCorrelation = given !== undefined && given !== 0 ? given : undefined;
  // a literal with every key, absent ones undefined, in the order the JSON output has always had them, so every profile
  // has one hidden class and JSON leaves the undefined keys out. A literal, not a copy of a template: V8 tracks a
  // literal's allocation site, sees a prediction's profiles outlive young collections (it is kept for the whole check) and
  // then allocates them in the old generation, where no scavenge copies them. Each allocation costs more there, but on
  // the 1,000-layer spec a check ran ~0.77x the scavenges with ~0.6-0.7x their pause, and ~0.9-0.95x the process's
  // processor time (Dec 2026, against a template's copy, which stays young; bench/compare/check-memory.mjs). The copy had
  // been measured against the literal with 3 warm-up checks and no count of scavenges (whole check 0.98x / 1.02x)
  const profile: MagnitudeProfile = {
    elements,
    zeroFraction,
    shape,
    rms,
    log2Spread,
    meanSquare: q,
    maxElement,
    bound,
    elementLog2Spread: shape === "log-normal" ? (elementLog2Spread ?? 0) : undefined,
    mixture: shape === "gaussian-mixture" ? mixture : undefined,
    sampleCorrelation,
    positionCorrelation,
    coherentRms: undefined,
  };
  return profile;
}
