/**
 * Risk numbers of one magnitude profile: the format-independent statistics (the predicted largest and
 * smallest magnitudes) and the numbers that judge it against one format's range.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { exp2, normalSf, normalUpperQuantile, hashSlot, hashWords } from "./_math.js";
import {
  shapeCode,
  isConstantLike,
  isEmpty,
  nonzeroElements,
  gaussianBelowOverDraws,
  gaussianEnergyBelowOverDraws,
  gaussianLevelFactors,
  gaussianLevelsTabled,
  gaussianRowsOverDraws,
  lawMixtureCrossing,
  lawOverDraws,
  lawParameter,
} from "./laws.js";
import type { RangeLimits } from "./types.js";

/** Probability levels at which the predicted largest and smallest magnitudes are read. */
export interface QuantileLevels {
  /** the predicted max is the level the tensor's largest element exceeds with this probability per step */
  maxQuantile: number;
  /** the predicted low magnitude is this quantile of the nonzero magnitudes */
  lowQuantile: number;
}

/** The default levels: a max exceeded in one step in a thousand, and the 1% quantile of nonzero magnitudes. */
export const DEFAULT_QUANTILE_LEVELS: QuantileLevels = { maxQuantile: 1e-3, lowQuantile: 1e-2 };

/** Format-independent statistics of a profile. Magnitudes are 0 for an all-zero tensor. */
export interface ProfileStatistics {
  /** rms of the nonzero elements at the median draw */
  rms: number;
  /** the level the largest element exceeds with probability `maxQuantile` per step */
  max: number;
  /** the `lowQuantile` quantile of the nonzero magnitudes, over draws */
  low: number;
}

/** A profile's risk in one format. Binades are null when the tensor is all zeros. */
export interface ProfileRisk {
  /** share of the nonzero elements that round to zero: P(0 < |x| ≤ flush bound) */
  flushedFraction: number;
  /** share of the nonzero elements that round to a subnormal (0 when subnormals are flushed) */
  subnormalFraction: number;
  /** share of the squared norm carried by the flushed elements (the gradient energy lost) */
  flushedEnergy: number;
  /** probability that at least one element overflows (or, saturating, exceeds the largest finite value) in one step */
  overflowRisk: number;
  /** log2(largest finite / predicted max) */
  headroom: number | null;
  /** log2(predicted low magnitude / smallest representable magnitude) */
  footroom: number | null;
}

export { nonzeroElements } from "./laws.js";

/**
 * Probability that at least one nonzero element reaches t in one step, over draws of the scale:
 * E_r[1 − (1 − P(|x| ≥ t | r))^n] (independent elements; the draw integral as in {@link overDraws}).
 * `positiveOnly` counts only elements reaching +t (exp of a logit overflows on the positive side only).
 */
export function probabilityAnyAbove(profile: MagnitudeProfile, t: number, positiveOnly = false): number {
  if (isEmpty(profile)) return 0;
  // constant magnitudes: every element equals the drawn scale, so the event is log2 r ≥ log2 t (closed form)
  if (isConstantLike(profile)) return drawReaches(profile, t);
  // the Gaussian laws' sums (the step rule on shared remainder rows, or the bound far below the scale) cost less than
  // a miss of the draw table (three cache lines of its 5 MB) times the share of misses (83% in a fresh 1,000-layer
  // check): computed afresh, the same value bit for bit
  const shape = profile.shape;
  if (shape === "gaussian" || shape === "half-gaussian" || shape === "bounded") return lawOverDraws(profile, "any-above", t, positiveOnly);
  return drawIntegral(profile, positiveOnly ? ANY_ABOVE_POSITIVE : ANY_ABOVE, t);
}

// P(log2 r ≥ log2 t) for a constant-like profile: the draw's z must pass (log2 t − log2 rms)/spread
function drawReaches(profile: MagnitudeProfile, t: number): number {
  if (!(profile.log2Spread > 0)) return profile.rms >= t ? 1 : 0;
  return normalSf((Math.log2(t) - Math.log2(profile.rms)) / profile.log2Spread);
}

/** Expected share of nonzero elements at or below t, over draws. */
export function fractionBelow(profile: MagnitudeProfile, t: number): number {
  if (isEmpty(profile)) return 0;
  if (isConstantLike(profile)) {
    if (!(profile.log2Spread > 0)) return profile.rms <= t ? 1 : 0;
    return normalSf((Math.log2(profile.rms) - Math.log2(t)) / profile.log2Spread);
  }
  if (gaussianBelowBound(profile, t)) {
    const closed = gaussianBelowOverDraws(t / profile.rms, profile.log2Spread);
    if (!Number.isNaN(closed)) return closed;
    // read off the shared rows for less than the draw table's look-up costs (the same value lawOverDraws gives)
    const rows = gaussianRowsOverDraws("below", Math.log2(t) - Math.log2(profile.rms), profile.log2Spread);
    if (!Number.isNaN(rows)) return rows;
  }
  return drawIntegral(profile, BELOW, t);
}

// Whether the element law at threshold t is the Gaussian's for every draw (no bound at or below t), with a spread
// (without one the law is evaluated once anyway).
function gaussianBelowBound(profile: MagnitudeProfile, t: number): boolean {
  if (!(profile.log2Spread > 0)) return false;
  if (profile.shape !== "gaussian" && profile.shape !== "half-gaussian" && profile.shape !== "bounded") return false;
  return profile.bound === undefined || !(profile.bound > 0) || t < profile.bound;
}

/**
 * Expected share of the squared norm carried by elements at or below t, over draws (each draw's share
 * weighted equally: the share, not the absolute energy, is what a user compares with a tolerance).
 */
export function energyBelow(profile: MagnitudeProfile, t: number): number {
  if (isEmpty(profile)) return 0;
  if (isConstantLike(profile)) return fractionBelow(profile, t);
  if (gaussianBelowBound(profile, t)) {
    const closed = gaussianEnergyBelowOverDraws(t / profile.rms, profile.log2Spread);
    if (!Number.isNaN(closed)) return closed;
    const rows = gaussianRowsOverDraws("energy-below", Math.log2(t) - Math.log2(profile.rms), profile.log2Spread);
    if (!Number.isNaN(rows)) return rows;
  }
  return drawIntegral(profile, ENERGY_BELOW, t);
}

// The draw integrals of lawOverDraws are the costly part of the risk numbers, and the same profile meets the same
// threshold again and again: in every format of a tensor, in the hazard and loss-scale checks, in the many specs of
// a batch that share layers. A direct-mapped table keyed on the bits of everything lawOverDraws reads (the
// measure, the profile's seven law fields, the threshold) returns its earlier result, bit for bit; a collision
// replaces the older entry, so the table never grows.
const ANY_ABOVE = 0;
const ANY_ABOVE_POSITIVE = 1;
const BELOW = 2;
const ENERGY_BELOW = 3;
const MEASURES = ["any-above", "any-above", "below", "energy-below"] as const;
const DRAW_SLOTS = 1 << 16;
const DRAW_KEY = 9;
const DRAW_KEYS = new Float64Array(DRAW_SLOTS * DRAW_KEY);
const DRAW_KEY_WORDS = new Int32Array(DRAW_KEYS.buffer);
const DRAW_VALUES = new Float64Array(DRAW_SLOTS);
// per slot the key's whole hash with its low bit set (0: empty): most look-ups in a fresh check miss, and a differing
// tag settles that without reading the key from the large key table (a cache miss of its own)
const DRAW_TAGS = new Int32Array(DRAW_SLOTS);
const DRAW_PROBE = new Float64Array(DRAW_KEY);
const DRAW_PROBE_WORDS = new Int32Array(DRAW_PROBE.buffer);



// lawOverDraws(profile, MEASURES[measure], t, measure === ANY_ABOVE_POSITIVE), through the table
function drawIntegral(profile: MagnitudeProfile, measure: number, t: number): number {
  const shape = shapeCode(profile.shape);
  // without a spread the integral is one evaluation of the law, cheaper than the table's look-up
  if (shape < 0 || !(profile.log2Spread > 0)) return lawOverDraws(profile, MEASURES[measure] as (typeof MEASURES)[number], t, measure === ANY_ABOVE_POSITIVE);
  const bound = profile.bound;
  // a mixture's key stands where a log-normal's element spread does (no profile has both)
  const elementSpread = shape === 6 ? lawParameter(profile) : profile.elementLog2Spread;
  // which optional fields are present goes with the measure into the first key
  DRAW_PROBE[0] = measure + (bound === undefined ? 0 : 4) + (elementSpread === undefined ? 0 : 8);
  DRAW_PROBE[1] = shape;
  DRAW_PROBE[2] = profile.elements;
  DRAW_PROBE[3] = profile.zeroFraction;
  DRAW_PROBE[4] = profile.rms;
  DRAW_PROBE[5] = profile.log2Spread;
  DRAW_PROBE[6] = bound === undefined ? 0 : bound;
  DRAW_PROBE[7] = elementSpread === undefined ? 0 : elementSpread;
  DRAW_PROBE[8] = t;
  const hash = hashWords(DRAW_PROBE_WORDS);
  const slot = hash & (DRAW_SLOTS - 1);
  const tag = hash | 1;
  const at = slot * 2 * DRAW_KEY;
  if (DRAW_TAGS[slot] === tag) {
    let same = true;
    for (let i = 0; i < 2 * DRAW_KEY; i++) {
      if (DRAW_KEY_WORDS[at + i] !== DRAW_PROBE_WORDS[i]) {
        same = false;
        break;
      }
    }
    if (same) return DRAW_VALUES[slot] as number;
  }
  const value = lawOverDraws(profile, MEASURES[measure] as (typeof MEASURES)[number], t, measure === ANY_ABOVE_POSITIVE);
  DRAW_KEYS.set(DRAW_PROBE, slot * DRAW_KEY);
  DRAW_VALUES[slot] = value;
  DRAW_TAGS[slot] = tag;
  return value;
}

// The levels of profileStatistics in binades from the rms (kept as the factors 2^level) depend on the element law, the element count, the
// spread and the quantile levels only; many tensors (and every plan of a comparison) share them. An open-addressing
// table on those six numbers (no string key per call), cleared when half full, so a long-running batch worker does
// not grow without end.
const LEVEL_SLOTS = 1 << 16;
const LEVEL_KEYS = new Float64Array(LEVEL_SLOTS * 6).fill(NaN);
const LEVEL_VALUES = new Float64Array(LEVEL_SLOTS * 2);
const LEVELS_LIMIT = LEVEL_SLOTS >> 1;
let levelCount = 0;
const KEY = new Float64Array(6);
const KEY_WORDS = new Int32Array(KEY.buffer);
// the slot holding KEY, or the empty slot where it goes
function levelSlot(): number {
  let slot = hashSlot(KEY_WORDS, LEVEL_SLOTS);
  for (;;) {
    const at = slot * 6;
    const first = LEVEL_KEYS[at] as number;
    if (first !== first) return slot;
    if (
      first === KEY[0] &&
      LEVEL_KEYS[at + 1] === KEY[1] &&
      LEVEL_KEYS[at + 2] === KEY[2] &&
      LEVEL_KEYS[at + 3] === KEY[3] &&
      LEVEL_KEYS[at + 4] === KEY[4] &&
      LEVEL_KEYS[at + 5] === KEY[5]
    ) {
      return slot;
    }
    slot = (slot + 1) & (LEVEL_SLOTS - 1);
  }
}

// the two factors gaussianLevelFactors writes
const FACTORS = new Float64Array(2);

/** The format-independent statistics of a profile at the given quantile levels. */
export function profileStatistics(
  profile: MagnitudeProfile,
  levels: QuantileLevels = DEFAULT_QUANTILE_LEVELS,
): ProfileStatistics {
  if (isEmpty(profile)) return { rms: 0, max: 0, low: 0 };
  if (isConstantLike(profile)) {
    // every element equals the drawn scale: read both levels off the draw distribution directly
    const spread = profile.log2Spread > 0 ? profile.log2Spread : 0;
    return {
      rms: profile.rms,
      max: profile.rms * exp2(spread * normalUpperQuantile(levels.maxQuantile)),
      low: profile.rms * exp2(-spread * normalUpperQuantile(levels.lowQuantile)),
    };
  }
  if (gaussianLevelsTabled(profile) && levels.maxQuantile > 0 && levels.maxQuantile < 1 && levels.lowQuantile > 0 && levels.lowQuantile < 1) {
    // read off the level tables afresh: a fresh 1,000-layer check missed the memo below for half its 7,500 look-ups,
    // and each look-up reads a 3 MB table; the same values bit for bit (the tables' points never depend on what was
    // computed before)
    const bound = profile.bound;
    gaussianLevelFactors(profile, levels.maxQuantile, levels.lowQuantile, FACTORS);
    let max = profile.rms * (FACTORS[0] as number);
    let low = profile.rms * (FACTORS[1] as number);
    if (bound !== undefined && bound > 0) {
      max = Math.min(max, bound);
      low = Math.min(low, bound);
    }
    return { rms: profile.rms, max, low };
  }
  const n = nonzeroElements(profile);
  // the largest element at the median scale passes 2^v·rms with probability anyOf(P(|x| ≥ 2^v·rms), n); a bound
  // breaks the scale family, so solve without it and cap the levels at the bound afterwards
  const bound = profile.bound;
  // the codes of the draw table; bounded is the Gaussian's law here (the bound is applied after the table)
  KEY[0] = shapeCode(profile.shape === "bounded" ? "gaussian" : profile.shape);
  KEY[1] = lawParameter(profile);
  KEY[2] = n;
  KEY[3] = profile.log2Spread;
  KEY[4] = levels.maxQuantile;
  KEY[5] = levels.lowQuantile;
  let slot = levelSlot();
  if (LEVEL_KEYS[slot * 6] !== LEVEL_KEYS[slot * 6]) {
    const max = lawMixtureCrossing(profile, "any-above", levels.maxQuantile);
    const low = lawMixtureCrossing(profile, "below", levels.lowQuantile);
    if (levelCount >= LEVELS_LIMIT) {
      LEVEL_KEYS.fill(NaN);
      levelCount = 0;
      slot = levelSlot();
    }
    LEVEL_KEYS.set(KEY, slot * 6);
    // the factors 2^level themselves: a hit then costs two products, not two powers
    LEVEL_VALUES[slot * 2] = exp2(max);
    LEVEL_VALUES[slot * 2 + 1] = exp2(low);
    levelCount++;
  }
  let max = profile.rms * (LEVEL_VALUES[slot * 2] as number);
  let low = profile.rms * (LEVEL_VALUES[slot * 2 + 1] as number);
  if (bound !== undefined && bound > 0) {
    max = Math.min(max, bound);
    low = Math.min(low, bound);
  }
  return { rms: profile.rms, max, low };
}

/**
 * The range of a format as the risk numbers see it, given the plan's conversion options.
 * Overflow level: the RNE overflow threshold (IEEE 754-2019 rounding of values past the largest finite
 * value; SCIENCE.md §1.1), or for a saturating conversion the largest finite value itself, past which values
 * are clipped (OCP 8-bit specification; counted from max finite, conservative by half an ulp).
 * Lower bounds: half the smallest subnormal rounds to zero (SCIENCE.md §1.1); when subnormals are flushed
 * (SCIENCE.md §1.2, bfloat16 on much hardware) everything below the smallest normal becomes zero.
 */
export function rangeLimits(
  format: {
    name: RangeLimits["format"];
    maxFinite: number;
    overflowThreshold: number;
    minNormal: number;
    minSubnormal: number;
    flushBound: number;
    unitRoundoff: number;
  },
  options: { saturate: boolean; flushSubnormals: boolean },
): RangeLimits {
  return {
    format: format.name,
    maxFinite: format.maxFinite,
    overflowLevel: options.saturate ? format.maxFinite : format.overflowThreshold,
    saturates: options.saturate,
    flushBound: options.flushSubnormals ? format.minNormal : format.flushBound,
    minNormal: format.minNormal,
    smallest: options.flushSubnormals ? format.minNormal : format.minSubnormal,
    unitRoundoff: format.unitRoundoff,
  };
}

/**
 * Judge one profile against one format's range. `statistics` comes from {@link profileStatistics} and is
 * shared by every format.
 * @example profileRisk(gaussianProfile(1e-3), binary16Limits, stats).flushedFraction // => 2.378e-5 (SCIENCE.md §4)
 */
export function profileRisk(
  profile: MagnitudeProfile,
  limits: RangeLimits,
  statistics: ProfileStatistics = profileStatistics(profile),
): ProfileRisk {
  if (isEmpty(profile)) {
    return {
      flushedFraction: 0,
      subnormalFraction: 0,
      flushedEnergy: 0,
      overflowRisk: 0,
      headroom: null,
      footroom: null,
    };
  }
  const flushedFraction = fractionBelow(profile, limits.flushBound);
  const belowNormal = limits.flushBound >= limits.minNormal ? flushedFraction : fractionBelow(profile, limits.minNormal);
  return {
    flushedFraction,
    subnormalFraction: Math.max(0, belowNormal - flushedFraction),
    flushedEnergy: energyBelow(profile, limits.flushBound),
    overflowRisk: probabilityAnyAbove(profile, limits.overflowLevel),
    headroom: Math.log2(limits.maxFinite / statistics.max),
    footroom: Math.log2(statistics.low / limits.smallest),
  };
}

/** Whether two profiles describe the same element distribution (the risk numbers read no other field). */
export function sameDistribution(a: MagnitudeProfile, b: MagnitudeProfile): boolean {
  return (
    a === b ||
    (a.rms === b.rms &&
      a.log2Spread === b.log2Spread &&
      a.shape === b.shape &&
      a.elements === b.elements &&
      a.zeroFraction === b.zeroFraction &&
      a.bound === b.bound &&
      a.elementLog2Spread === b.elementLog2Spread &&
      sameMixture(a.mixture, b.mixture))
  );
}

/** Whether two profiles' scale mixtures are one (both absent, or the same activation, input variance and product). */
function sameMixture(a: MagnitudeProfile["mixture"], b: MagnitudeProfile["mixture"]): boolean {
  return a === b || (a !== undefined && b !== undefined && a.activation === b.activation && a.inputVariance === b.inputVariance && a.slope === b.slope && a.of === b.of && a.rows === b.rows && a.rowCount === b.rowCount);
}

/** A copy of the profile with its scale multiplied by a factor (a loss scale, a per-tensor scale). */
export function scaleProfile(profile: MagnitudeProfile, factor: number): MagnitudeProfile {
  if (factor === 1) return profile;
  const scaled: MagnitudeProfile = { ...profile, rms: profile.rms * factor };
  if (profile.bound !== undefined) scaled.bound = profile.bound * factor;
  return scaled;
}

/**
 * The profile times a factor, as {@link scaleProfile} makes it, with only the fields the risk numbers read
 * (those {@link sameDistribution} compares) in one fixed layout: every profile the risk functions see then has
 * the same shape, whatever propagation fields the prediction carried.
 */
export function riskProfile(profile: MagnitudeProfile, factor = 1): MagnitudeProfile {
  const bound = profile.bound;
  // every key always present (undefined when the prediction has none), so the view has one layout
  return {
    elements: profile.elements,
    zeroFraction: profile.zeroFraction,
    shape: profile.shape,
    rms: profile.rms * factor,
    log2Spread: profile.log2Spread,
    bound: bound === undefined ? undefined : bound * factor,
    elementLog2Spread: profile.elementLog2Spread,
    mixture: profile.mixture,
  };
}
