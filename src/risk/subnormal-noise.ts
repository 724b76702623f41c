/**
 * What a format's subnormal band costs a tensor in precision: the rounding noise its subnormal elements add, as a
 * share of the tensor's squared norm, and the limit that share is judged against (the ordinary rounding noise of a
 * format's normal range). A subnormal keeps fewer significant bits, but a band of many subnormals can still cost
 * less than ordinary rounding in a narrower significand: the count of subnormal elements says nothing about that.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { expAbove, hashWords, normalCdf, LN2 } from "./_math.js";
import { erf, normalLogSf } from "../numeric/normal.js";
import { elementLaw, isConstantLike, isEmpty, lawParameter, mixtureOf, ruleOverDraws, shapeCode } from "./laws.js";
import { fractionBelow } from "./profile.js";
import type { RangeLimits } from "./types.js";

/**
 * The rounding noise share Σ(round(x) − x)²/Σx² of values spread over the normal binades of a format with p
 * significand bits: 2^(−2(p−1))·(1 − 2^−2)/(24·ln 2). Within binade e the spacing is 2^(e−p+1) and the error of
 * round-to-nearest is taken uniform on ± half of it, variance spacing²/12 (the usual model of rounding errors as
 * uniform: common practice); relative to x² with
 * x = 2^e·m and m log-uniform on [1, 2) (Benford's law for values spread over binades), E[1/m²] = 3/(8·ln 2).
 * About 2.75e-6 for bfloat16 (p = 8), 4.3e-8 for binary16 (p = 11), 7.0e-4 for e4m3 (p = 4), 2.8e-3 for e5m2 (p = 3).
 */
export function normalRoundingNoise(precision: number): number {
  return (2 ** (-2 * (precision - 1)) * (1 - 2 ** -2)) / (24 * LN2);
}

/** The significand bits p of the format a range belongs to, from its unit roundoff 2^−p. */
export function precisionOf(limits: Pick<RangeLimits, "unitRoundoff">): number {
  return Math.round(-Math.log2(limits.unitRoundoff));
}

/**
 * The subnormal noise share above which a tensor stored in this format is at risk: the larger of `atRisk` (by default
 * bfloat16's normal rounding noise: its 8-bit significand trains as binary32 does, Kalamkar et al. 2019, "A Study of
 * BFLOAT16 for Deep Learning Training", so that much noise is what a subnormal may cost before it matters) and the
 * format's own normal rounding noise (a coarser format already pays more on every element).
 */
export function subnormalNoiseLimit(limits: Pick<RangeLimits, "unitRoundoff">, atRisk: number): number {
  // asked tensor after tensor for the same format and threshold: the last answer kept
  if (limits.unitRoundoff !== LIMIT_ASKED[0] || atRisk !== LIMIT_ASKED[1]) {
    LIMIT_ASKED[0] = limits.unitRoundoff;
    LIMIT_ASKED[1] = atRisk;
    LIMIT_ASKED[2] = Math.max(atRisk, normalRoundingNoise(precisionOf(limits)));
  }
  return LIMIT_ASKED[2] as number;
}
// the unit roundoff and threshold last asked of subnormalNoiseLimit, and its answer
const LIMIT_ASKED = new Float64Array(3).fill(Number.NaN);

/**
 * The expected rounding noise of a tensor's subnormal elements as a share of its squared norm, over draws of its scale:
 * per draw r (the nonzero elements' rms), E[#subnormal]·Δ²/12 / E[Σx²] = P(flush bound < |x| < smallest normal − Δ/2 | r)·
 * Δ²/(12·r²), Δ the smallest subnormal, which spaces the subnormals evenly (IEEE 754-2019 §3.3), so that each one's
 * error is uniform on ±Δ/2 (the model of {@link normalRoundingNoise}); averaged over draws as the other shares are.
 * 0 when the conversion flushes subnormals (there is no band) or the tensor is all zeros, and 0 where the noise is
 * under {@link NOISE_FLOOR} (a density bound settles most tensors without computing it).
 */
export function subnormalNoise(profile: MagnitudeProfile, limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">): number {
  if (isEmpty(profile) || !hasNoiseBand(limits)) return 0;
  // where the bound does not settle the tensor, the noise itself (two shares, see tilted) costs about what a bound by
  // the energy below the smallest normal would
  if (noiseBound(profile, limits) < NOISE_FLOOR) return 0;
  const noise = memoised(profile, limits);
  return noise < NOISE_FLOOR ? 0 : noise;
}

/**
 * Subnormal noise below this share of the squared norm is reported as 0: far under any limit (bfloat16's rounding
 * noise 2.75e-6, binary16's own 4.3e-8), and the 1e-12 absolute to which the other shares are integrated (README).
 */
export const NOISE_FLOOR = 1e-12;

/**
 * An upper bound on {@link subnormalNoise}, cheap to take, or Infinity for a law it does not cover (log-normal,
 * constant, or capped under the smallest normal). A Gaussian magnitude's density is at most √(2/π)/r (a uniform one's
 * 1/(√3·r)), so P(band | r) ≤ that times the smallest normal h, and the share per draw at most c·h·Δ²/(12·r³) (c the
 * density's factor); over draws E[r^−3] = rms^−3·e^((3·S·ln 2)²/2) (the log-normal's moment).
 */
export function noiseBound(profile: MagnitudeProfile, limits: Pick<RangeLimits, "minNormal" | "smallest">): number {
  // a scale mixture's density is at most Σ wᵢ/cᵢ times the Gaussian's (each component's is at most √(2/π)/(r·cᵢ))
  const mixture = mixtureOf(profile);
  const density =
    profile.shape === "uniform"
      ? 1 / Math.sqrt(3)
      : profile.shape === "log-normal" || profile.shape === "constant"
        ? NaN
        : Math.sqrt(2 / Math.PI) * (mixture === undefined ? 1 : mixture.density);
  // a bound under the smallest normal puts the mass above it at the bound, inside the band: no density there
  const capped = profile.bound !== undefined && profile.bound > 0 && profile.bound < limits.minNormal;
  if (density !== density || capped) return Infinity;
  const spread = 3 * profile.log2Spread * LN2;
  return ((density * limits.minNormal * limits.smallest * limits.smallest) / (12 * profile.rms ** 3)) * Math.exp((spread * spread) / 2);
}

/**
 * Whether {@link subnormalNoise} is at most `limit`: by {@link noiseWithin} at half of it (the noise is computed within
 * 2e-7 of its integral's shares, far inside the other half), else by the number itself, so the answer is always the
 * comparison of the number.
 */
export function noiseAtMost(profile: MagnitudeProfile, limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">, limit: number): boolean {
  return noiseWithin(profile, limits, limit / 2) || subnormalNoise(profile, limits) <= limit;
}

/**
 * Whether the subnormal noise's draw integral is at most `target`, by bounds; false where they do not tell. A Gaussian
 * magnitude's density is at most c/r, c = √(2/π), so the band's share per draw is at most min(1, c·h/r), h the smallest
 * normal, and the noise share Δ²/(12r²) times that. Its mean over r = rms·2^{S·z}: without the cap {@link noiseBound};
 * with it, Δ²/(12·rms²)·(e^{2m²}·Φ(z* + 2m) + k·e^{9m²/2}·Q(z* + 3m)), k = c·h/rms, m = S·ln 2, z* = ln(k)/m (complete
 * the square on each side of z*, where k·e^{−m·z} = 1).
 */
export function noiseWithin(profile: MagnitudeProfile, limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">, target: number): boolean {
  if (isEmpty(profile) || !hasNoiseBand(limits)) return true;
  const shape = profile.shape;
  if (shape !== "gaussian" && shape !== "half-gaussian" && shape !== "bounded") return noiseBound(profile, limits) <= target;
  const spread = profile.log2Spread;
  return gaussianNoiseWithin(profile.rms, spread > 0 ? spread * LN2 : 0, profile.bound ?? 0, limits, target);
}

/**
 * {@link noiseWithin} of a Gaussian magnitude law with nonzero elements, from its numbers: the rms, m = S·ln 2 (0
 * without a spread) and the bound (0 for none), for a caller that has read them.
 */
export function gaussianNoiseWithin(
  rms: number,
  m: number,
  bound: number,
  limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">,
  target: number,
): boolean {
  if (!hasNoiseBand(limits)) return true;
  const h = limits.minNormal;
  // a bound under the smallest normal puts mass at the bound, inside the band: no density there
  if (bound > 0 && bound < h) return false;
  const delta = limits.smallest;
  const scale = (delta * delta) / (12 * rms * rms);
  const k = (GAUSSIAN_DENSITY * h) / rms;
  if (!(m > 0)) return scale * Math.min(1, k) <= target;
  // (the exponential by its bound first, src/risk/_math.ts expAbove: where that holds, so does the exponential's)
  if (scale * k * expAbove(4.5 * m * m) <= target || scale * k * Math.exp(4.5 * m * m) <= target) return true;
  const logK = Math.log(k);
  const crossing = logK / m;
  const capped = Math.exp(2 * m * m + normalLogSf(-(crossing + 2 * m)));
  const tail = Math.exp(logK + 4.5 * m * m + normalLogSf(crossing + 3 * m));
  return scale * (capped + tail) <= target;
}
const GAUSSIAN_DENSITY = Math.sqrt(2 / Math.PI);

// whether the format keeps a band of subnormals to round into: values from the flush bound up to the smallest normal,
// spaced by a smallest subnormal below it (IEEE 754-2019 §3.3); without one there is no subnormal noise
function hasNoiseBand(limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">): boolean {
  return limits.flushBound < limits.minNormal && limits.smallest < limits.minNormal;
}

/**
 * Whether the subnormal noise's draw integral is at least `target`, by a lower bound; false where it does not tell.
 * For a Gaussian magnitude law with nonzero elements, from {@link gaussianNoiseWithin}'s numbers (rms, m = S·ln 2 and
 * the bound, 0 for none). With the weight 1/r² moved into the draw as {@link tilted} moves it, the integral is
 * Δ²·e^{2m²}/(12·rms²) times the mass P(a < r′·e^{m·z}·|X| < b), r′ = rms·e^{−2m²}, z ~ N(0, 1) and |X| a standard
 * Gaussian magnitude, a the flush bound, b = h − Δ/2. Given |X| = x the mass is g = Φ(β − s) − Φ(α − s), s = ln(x)/m,
 * α, β = ln(a/r′)/m, ln(b/r′)/m: a window of fixed width, whose slope in s, φ(α − s) − φ(β − s), is positive below
 * s = (α + β)/2 and negative past it, so g rises then falls and on a cell of x is at least the lower of its ends. The
 * mass is then at least Σ P(x_j < |X| < x_{j+1})·min(g(x_j), g(x_{j+1})) over NOISE_CELLS' cells, the rest of |X|'s
 * mass left out. Φ as _math.ts gives it (within 1.2e-7 relative): the mass so summed is within 3e-7 of the bound's,
 * which NOISE_MASS_FLOOR and the caller's margin leave room for.
 */
export function gaussianNoiseAbove(
  rms: number,
  m: number,
  bound: number,
  limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">,
  target: number,
): boolean {
  if (!(m > 0) || !hasNoiseBand(limits)) return false;
  const h = limits.minNormal;
  // the band's shares are the Gaussian's below a bound only: a bound under h caps elements inside it
  if (bound > 0 && bound < h) return false;
  const delta = limits.smallest;
  const lnMoved = Math.log(rms) - 2 * m * m;
  const alpha = (Math.log(limits.flushBound) - lnMoved) / m;
  const beta = (Math.log(h - delta / 2) - lnMoved) / m;
  const logs = NOISE_CELL_LOGS;
  const shares = NOISE_CELL_SHARES;
  let s = (logs[0] as number) / m;
  let previous = normalCdf(beta - s) - normalCdf(alpha - s);
  let mass = 0;
  for (let j = 0; j < shares.length; j++) {
    s = (logs[j + 1] as number) / m;
    const next = normalCdf(beta - s) - normalCdf(alpha - s);
    mass += (shares[j] as number) * (next < previous ? next : previous);
    previous = next;
  }
  return mass >= NOISE_MASS_FLOOR && ((delta * delta) / (12 * rms * rms)) * Math.exp(2 * m * m) * mass >= target;
}
// The cells of |X| that gaussianNoiseAbove sums: from 1/5 to 3, about 83% of a Gaussian magnitude's mass, cut at 0.7
// (fitted to the noisy gradients of a deep ReLU network at spreads of 2 to 3 binades, where the two cells come within
// a factor 1.2–2 of the integral), by ln x and P(x_j < |X| < x_{j+1}) = erf(x_{j+1}/√2) − erf(x_j/√2)
const NOISE_CELLS = [0.2, 0.7, 3];
const NOISE_CELL_LOGS = new Float64Array(NOISE_CELLS.map((x) => Math.log(x)));
const NOISE_CELL_SHARES = new Float64Array(NOISE_CELLS.length - 1).map((_, j) => erf((NOISE_CELLS[j + 1] as number) / Math.SQRT2) - erf((NOISE_CELLS[j] as number) / Math.SQRT2));
/**
 * The least mass gaussianNoiseAbove bounds a noise by: the two shares whose difference the noise takes are each within
 * 2e-7 of their integral where the rows serve them (README, src/risk/laws.ts), so past 1e-3 the mass as worked out is
 * within 0.04% of the integral's
 */
const NOISE_MASS_FLOOR = 1e-3;

// The same profile meets the same band again and again (each loss scale a search tries, each check of a batch that
// shares layers): a direct-mapped table on the bits of everything the integral reads returns its earlier result, a
// collision replacing the older entry, as the draw table of src/risk/profile.ts does.
const SLOTS = 1 << 15;
const KEY = 8;
const KEYS = new Float64Array(SLOTS * KEY).fill(NaN);
const VALUES = new Float64Array(SLOTS);
const PROBE = new Float64Array(KEY);
const PROBE_WORDS = new Int32Array(PROBE.buffer);

function memoised(profile: MagnitudeProfile, limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">): number {
  PROBE[0] = shapeCode(profile.shape);
  PROBE[1] = profile.rms;
  PROBE[2] = profile.log2Spread;
  PROBE[3] = profile.bound ?? -1;
  PROBE[4] = profile.shape === "gaussian-mixture" ? lawParameter(profile) : (profile.elementLog2Spread ?? -1);
  PROBE[5] = limits.flushBound;
  PROBE[6] = limits.minNormal;
  PROBE[7] = limits.smallest;
  const slot = hashWords(PROBE_WORDS) & (SLOTS - 1);
  const at = slot * KEY;
  let same = true;
  for (let i = 0; i < KEY; i++) {
    if (KEYS[at + i] !== PROBE[i]) {
      same = false;
      break;
    }
  }
  if (same) return VALUES[slot] as number;
  const value = tilted(profile, limits);
  KEYS.set(PROBE, at);
  VALUES[slot] = value;
  return value;
}

/** {@link subnormalNoise} by the draw integral itself, with no bound to skip it (what the tests hold the bound to). */
export function integral(profile: MagnitudeProfile, limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">): number {
  const delta = limits.smallest;
  const low = limits.flushBound;
  // values within Δ/2 under the smallest normal round up to it: a small part of binary16's band (1/2048), 1/8 of e5m2's
  const high = limits.minNormal - delta / 2;
  const noise = (delta * delta) / 12;
  if (isConstantLike(profile)) return constantNoise(profile.rms, profile.log2Spread, low, high, noise);
  const law = elementLaw(profile);
  return ruleOverDraws(profile.rms, profile.log2Spread, (r) => (Math.max(0, law.below(r, high) - law.below(r, low)) * noise) / (r * r));
}

/**
 * {@link integral} by a change of measure: with r = rms·2^(S·z), the weight 1/r² is rms^−2·e^(−c·z), c = 2·S·ln 2, and
 * E[e^(−c·z)·F(z)] = e^(c²/2)·E[F(z − c)] (complete the square), so the draw integral of P(band | r)/r² is e^(c²/2)/rms²
 * times the band's share for the scale moved to rms·2^(−S·c): two shares {@link fractionBelow} gives by its closed forms
 * and tables, not a quadrature of their own (exact in the draw; within the shares' accuracy, 1e-6).
 */
function tilted(profile: MagnitudeProfile, limits: Pick<RangeLimits, "flushBound" | "minNormal" | "smallest">): number {
  const spread = profile.log2Spread;
  if (isConstantLike(profile) || !(spread > 0)) return integral(profile, limits);
  const delta = limits.smallest;
  const c = 2 * spread * LN2;
  // the fields the shares read, in one literal (a spread of the whole profile copies every field, one by one)
  const moved: MagnitudeProfile = {
    elements: profile.elements,
    zeroFraction: profile.zeroFraction,
    shape: profile.shape,
    rms: profile.rms * 2 ** (-spread * c),
    log2Spread: spread,
    bound: profile.bound,
    elementLog2Spread: profile.elementLog2Spread,
    mixture: profile.mixture,
  };
  const mass = fractionBelow(moved, limits.minNormal - delta / 2) - fractionBelow(moved, limits.flushBound);
  return Math.min(1, Math.max(0, ((delta * delta) / 12 / (profile.rms * profile.rms)) * Math.exp((c * c) / 2) * mass));
}

// Every element equals the drawn scale r = rms·2^(S·z), z ~ N(0, 1): the share is noise/r² for the draws whose r lies in
// the band. E[e^(−c·z); a < z < b] = e^(c²/2)·(Φ(b + c) − Φ(a + c)) with c = 2·S·ln 2 (the Gaussian's shifted moment:
// complete the square), which the quadrature would resolve poorly at the band's two steps.
function constantNoise(rms: number, spread: number, low: number, high: number, noise: number): number {
  if (!(spread > 0)) return rms > low && rms < high ? noise / (rms * rms) : 0;
  const a = Math.log2(low / rms) / spread;
  const b = Math.log2(high / rms) / spread;
  const c = 2 * spread * LN2;
  const mass = normalCdf(b + c) - normalCdf(a + c);
  return Math.min(1, Math.max(0, (noise / (rms * rms)) * Math.exp((c * c) / 2) * mass));
}

/**
 * The smallest j in 1..most for which `fits(j)` holds, or null. `fits` must be false at 0 and, past the first j where
 * it holds, hold for every larger j: the noise of a subnormal band first grows with the scale (elements leave the
 * flushed range) and then falls (they leave the band and the norm grows), so "at most the limit" holds on a tail.
 */
export function smallestStep(most: number, fits: (j: number) => boolean): number | null {
  if (!(most >= 1) || !fits(most)) return null;
  let lo = 0;
  let hi = most;
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (fits(mid)) hi = mid;
    else lo = mid;
  }
  return hi;
}
