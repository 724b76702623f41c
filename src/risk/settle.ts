/**
 * Cheap bounds that settle a tensor's draw integrals (src/risk/profile.ts) before they are taken. Most tensors of a
 * large check sit far from a format's limits: a share of elements or of the squared norm below the flush bound, or a
 * probability of passing the overflow level, far under anything reported. A closed-form upper bound below
 * {@link SETTLED} reports such a number as 0, within 1e-12 absolute of the integral (the accuracy README gives the
 * shares); an overflow probability whose lower bound is above 1 − {@link SETTLED} is reported as 1. Only the Gaussian
 * magnitude laws (gaussian, half-gaussian, bounded below its bound) are settled; every other case returns
 * {@link UNSETTLED} and is integrated as before.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { normalLogSf, normalSf } from "../numeric/normal.js";
import { expAbove, LN2 } from "./_math.js";
import { nonzeroElements } from "./laws.js";
import { probabilityAnyAbove } from "./profile.js";
import type { RangeLimits } from "./types.js";

/**
 * A bound below this settles a number as 0 (and above 1 minus it as 1): a tenth of the 1e-12 absolute accuracy of the
 * integrals, leaving room for the rule that evaluates them to differ from the exact draw integral the bound holds
 * (a positive-weight rule on a grid of 1/8 standard deviation, within a factor 2 of the mass of any segment, as
 * src/risk/bounds.ts takes it).
 */
export const SETTLED = 1e-13;

/** What the settle functions return for a number they cannot settle: −1, a small integer (NaN would be a heap number per call). */
export const UNSETTLED = -1;

// The draw beyond which the draws carry less than SETTLED/4 of the mass, Q(7.65) = 1.0e-14: past it an integrand is
// at most 1 (an upper bound) or at least 0 (a lower one).
export const FAR_DRAW = 7.65;
const LOG_FAR_SHARE = Math.log(SETTLED / 4);
const LOG_SETTLED = Math.log(SETTLED);
// √(2/π): P(|Z| ≤ a) = erf(a/√2) ≤ √(2/π)·a, and E[Z²; |Z| ≤ a] ≤ √(2/π)·a³/3 (the density at most φ(0) = 1/√(2π)
// on both sides)
export const DENSITY = Math.sqrt(2 / Math.PI);
const LOG_ENOUGH = Math.log(32);
// 1/√(2π), the normal density's factor
const INV_SQRT_2PI = 1 / Math.sqrt(2 * Math.PI);

/**
 * Whether the profile's element law at threshold t is the Gaussian magnitude's for every draw: the shapes whose law
 * is erf/erfc of t/r (src/risk/laws.ts), with no bound at or below t.
 */
export function gaussianAt(profile: MagnitudeProfile, t: number): boolean {
  const shape = profile.shape;
  if (shape !== "gaussian" && shape !== "half-gaussian" && shape !== "bounded") return false;
  const bound = profile.bound;
  return bound === undefined || !(bound > 0) || t < bound;
}

/**
 * E_z[min(1, c·e^{−m·z})], z ~ N(0, 1), for c > 0 and m > 0 given as ln c: with z* = ln(c)/m the point where
 * c·e^{−m·z} = 1, it is Φ(z*) + c·e^{m²/2}·Q(z* + m) (complete the square: e^{−m·z}·φ(z) = e^{m²/2}·φ(z + m)). The
 * closed form of the shares' bounds here and in src/risk/decide.ts.
 */
export function capMean(logC: number, m: number): number {
  const crossing = logC / m;
  return normalSf(-crossing) + Math.exp(logC + (m * m) / 2 + normalLogSf(crossing + m));
}

// Whether E_z[min(1, c·e^{−m·z})], z ~ N(0, 1), m ≥ 0, c ≥ 0, is below SETTLED ({@link capMean}), not settled at once
// where its first term alone, Φ(z*), is above SETTLED. Without a spread, min(1, c). (A boolean: a double returned from
// a call is a heap number the collector has to take back, at every tensor.)
function capSettled(c: number, m: number): boolean {
  if (!(c > 0)) return true;
  if (!(m > 0)) return c < SETTLED;
  const logC = Math.log(c);
  const crossing = logC / m;
  if (crossing > -FAR_DRAW) return false;
  // where z* + m ≤ 0 the second term is at least half of c·e^{m²/2}: refused without the tails
  const shifted = crossing + m;
  if (shifted <= 0 && logC + (m * m) / 2 - LN2 >= LOG_SETTLED) return false;
  // settled without the tails where their upper bounds already are below SETTLED/2, which the tails computed (within
  // 1e-12 relative, Cody 1969 / ALGORITHM 715) keep below SETTLED: the same answer. Q(x) ≤ φ(x)/x for x > 0 (Mills
  // ratio, Gordon 1941; from memory); the second term is at most c·e^{m²/2} (Q ≤ 1), and where z* + m > 0 at most
  // φ(z*)/(z* + m), since ln c + m²/2 − (z* + m)²/2 = −z*²/2 when z*·m = ln c
  const far = -crossing;
  const first = (INV_SQRT_2PI * Math.exp(-(far * far) / 2)) / far;
  const second = shifted > 0 ? (INV_SQRT_2PI * Math.exp(-(crossing * crossing) / 2)) / shifted : Math.exp(logC + (m * m) / 2);
  if (first + second < SETTLED / 2) return true;
  return capMean(logC, m) < SETTLED;
}

/**
 * Whether E_z[min(1, c·e^{−m·z})], z ~ N(0, 1), is at most `target`: first by c·e^{m²/2} (the mean without the cap),
 * else by {@link capMean}. Without a spread, min(1, c).
 */
export function capWithin(c: number, m: number, target: number): boolean {
  if (!(c > 0)) return true;
  if (!(m > 0)) return Math.min(1, c) <= target;
  const x = (m * m) / 2;
  // the mean without the cap by a bound on its exponential first (expAbove: c·expAbove(x) ≤ target holds the computed
  // c·e^x under it too), which decides every mean more than 0.21% under the target; a check asks this tens of thousands
  // of times, nearly all far under it
  if (c * expAbove(x) <= target) return true;
  const free = c * Math.exp(x);
  if (free <= target) return true;
  const logC = Math.log(c);
  const told = capMeanTold(logC, m, target);
  return told !== UNTOLD ? told === 1 : capMean(logC, m) <= target;
}

/**
 * {@link capMean}(logC, m) ≤ target told by bounds on its two normal tails, without them (1 true, 0 false; UNTOLD where
 * the bounds do not decide). With z* = ln(c)/m ≤ 0 and w = z* + m ≥ 0, ln c + m²/2 − w²/2 = −z*²/2 (z*·m = ln c), so
 * the cap mean is φ(z*)·(R(−z*) + R(w)), R(x) = Q(x)/φ(x) the Mills ratio, which lies between 2/(x + √(x² + 4))
 * (Birnbaum 1942, Ann. Math. Statist. 13(2)) and 4/(3x + √(x² + 8)) (Sampford 1953, Ann. Math. Statist. 24(1); both
 * from memory, for x ≥ 0); where z* > 0 the first tail, Φ(z*), is above 1/2. A factor 1 ± 1e-9 on each bound leaves
 * room for the roundings of both ways of computing it (the tails within 1e-12 relative, Cody 1969; φ here within 1e-13
 * for |z*| < 36, where it stays far above the least normal double), so a decision here is the one capMean's number
 * takes: the same boolean for about a quarter of the work (a weighed check asks this some 4,000 times, most of them a
 * few times over or under the target).
 */
function capMeanTold(logC: number, m: number, target: number): number {
  const z = logC / m;
  if (z > 0) return 0.5 * (1 - 1e-9) > target ? 0 : UNTOLD;
  const w = z + m;
  if (!(w >= 0) || !(z > -36)) return UNTOLD;
  const density = INV_SQRT_2PI * Math.exp(-(z * z) / 2);
  const upper = density * (4 / (-3 * z + Math.sqrt(z * z + 8)) + 4 / (3 * w + Math.sqrt(w * w + 8)));
  if (upper * (1 + 1e-9) <= target) return 1;
  const lower = density * (2 / (-z + Math.sqrt(z * z + 4)) + 2 / (w + Math.sqrt(w * w + 4)));
  return lower * (1 - 1e-9) > target ? 0 : UNTOLD;
}
const UNTOLD = -1;

/**
 * The threshold t in units of the scale drawn at z₀, u₀ = (t/rms)·e^{−m·z₀} (m = S·ln 2; `a` is t/rms): the probability
 * that some of n nonzero elements reach t in a step, over draws, is at most Q(z₀) + n·e^{−u₀²/2}, as the integrand rises
 * with the draw and P(|Z| ≥ u) ≤ e^{−u²/2} (Chernoff). The bound {@link settledAnyAbove} takes at a far draw, and
 * src/risk/decide.ts at the draw its target sets.
 */
export function farThreshold(a: number, m: number, z0: number): number {
  return a * Math.exp(-m * z0);
}

/**
 * 0 when the expected share of nonzero elements at or below t ({@link fractionBelow}) is provably under SETTLED,
 * else UNSETTLED. Per draw r the share is erf(t/(r√2)) ≤ √(2/π)·t/r, with t/r = (t/rms)·e^{−S·ln2·z}.
 */
export function settledBelow(profile: MagnitudeProfile, t: number): number {
  if (!gaussianAt(profile, t)) return UNSETTLED;
  const spread = profile.log2Spread > 0 ? profile.log2Spread : 0;
  return capSettled((DENSITY * t) / profile.rms, spread * LN2) ? 0 : UNSETTLED;
}

/**
 * 0 when the expected share of the squared norm at or below t ({@link energyBelow}) is provably under SETTLED, else
 * UNSETTLED: per draw at most √(2/π)·(t/r)³/3.
 */
export function settledEnergyBelow(profile: MagnitudeProfile, t: number): number {
  if (!gaussianAt(profile, t)) return UNSETTLED;
  const spread = profile.log2Spread > 0 ? profile.log2Spread : 0;
  const a = t / profile.rms;
  return capSettled((DENSITY / 3) * a * a * a, 3 * spread * LN2) ? 0 : UNSETTLED;
}

/**
 * Whether the expected share of the squared norm at or below t ({@link energyBelow}) is at most `target`, by the bound
 * of {@link settledEnergyBelow} ({@link capWithin}); false where it cannot tell (not a Gaussian law at t).
 */
export function energyBelowAtMost(profile: MagnitudeProfile, t: number, target: number): boolean {
  if (!gaussianAt(profile, t)) return false;
  const a = t / profile.rms;
  return capWithin((DENSITY / 3) * a * a * a, 3 * (profile.log2Spread > 0 ? profile.log2Spread : 0) * LN2, target);
}

/**
 * 0 or 1 when the probability that some of the n nonzero elements reach t in a step ({@link probabilityAnyAbove},
 * both signs) is provably within SETTLED of it, else UNSETTLED. The integrand rises with the draw. Above: at most
 * Q(z₀) + n·P(|Z| ≥ u₀) at z₀ = FAR_DRAW, u₀ the threshold in units of the scale drawn there, with
 * P(|Z| ≥ u) ≤ e^{−u²/2} (Chernoff). Below: at least (1 − Q(z₀))·(1 − e^{−n·p₁}), p₁ = P(|Z| ≥ u₁) at −z₀, with
 * P(|Z| ≥ u) ≥ 2φ(u)·u/(u² + 1) (Gordon's inequality, Gordon 1941, Ann. Math. Statist. 12(3); from memory) and
 * P(|Z| ≥ u) ≥ 1 − √(2/π)·u (the density at most φ(0)), the larger of the two.
 */
export function settledAnyAbove(profile: MagnitudeProfile, t: number, n: number): number {
  if (!gaussianAt(profile, t)) return UNSETTLED;
  if (!(t > 0) || !(n > 0)) return UNSETTLED;
  const spread = profile.log2Spread > 0 ? profile.log2Spread : 0;
  const a = t / profile.rms;
  const far = spread * LN2 * FAR_DRAW;
  const logN = Math.log(n);
  // highest draw: the threshold's distance from the largest scale that matters
  const high = farThreshold(a, spread * LN2, FAR_DRAW);
  if (logN - (high * high) / 2 < LOG_FAR_SHARE) return 0;
  // lowest draw: even the smallest scale that matters passes t somewhere in the tensor, with near certainty
  const low = a * Math.exp(far);
  const logTail = Math.max(Math.log((2 * low) / (low * low + 1)) - (low * low) / 2 - 0.5 * Math.log(2 * Math.PI), Math.log1p(-Math.min(1, DENSITY * low)));
  if (logN + logTail >= LOG_ENOUGH) return 1;
  return UNSETTLED;
}

/**
 * The overflow probability of a profile with nonzero elements as a tensor's numbers report it (src/risk/tensor.ts,
 * settledRisk): settled by {@link settledAnyAbove} where it decides, else integrated.
 */
export function overflowRiskOf(profile: MagnitudeProfile, limits: RangeLimits): number {
  const settled = settledAnyAbove(profile, limits.overflowLevel, nonzeroElements(profile));
  return settled >= 0 ? settled : probabilityAnyAbove(profile, limits.overflowLevel);
}
