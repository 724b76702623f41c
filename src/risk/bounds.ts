/**
 * Cheap bounds on the draw integrals of src/risk/profile.ts, for searches that only compare a share with a
 * tolerance (the loss-scale window, the dynamic-scale simulation). Internal to the risk and scale modules: not
 * re-exported by src/risk/index.ts.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { anyOf, exp2, LN2, normalSf } from "./_math.js";
import { elementLaw, INNER_DRAW_OUTSIDE, isConstantLike, isEmpty, lawOverDrawsBounds, nonzeroElements, type ElementLaw } from "./laws.js";
import { energyBelow, fractionBelow, probabilityAnyAbove } from "./profile.js";
import { capMean, DENSITY } from "./settle.js";

/**
 * Bounds [low, high] on {@link energyBelow}(profile, t) from the integrand at the extreme draws and at ±4
 * standard deviations (it is monotone in the scale): four evaluations instead of the integral, for searches that
 * only compare the share with a tolerance.
 */
export function energyBelowBounds(profile: MagnitudeProfile, t: number): [number, number] {
  if (isEmpty(profile)) return [0, 0];
  if (isConstantLike(profile)) {
    const value = fractionBelow(profile, t);
    return [value, value];
  }
  // shares are compared with tolerances of 1e-3 and more: the inner bounds decide most of them
  return lawOverDrawsBounds(profile, "energy-below", t, true);
}

/**
 * Bounds [low, high] on {@link probabilityAnyAbove}(profile, t) from the integrand at the two extreme draws (it is
 * monotone in the scale).
 */
export function probabilityAnyAboveBounds(profile: MagnitudeProfile, t: number): [number, number] {
  if (isEmpty(profile) || isConstantLike(profile)) {
    const value = probabilityAnyAbove(profile, t);
    return [value, value];
  }
  return lawOverDrawsBounds(profile, "any-above", t, false);
}

// Upper bounds on the draw integrals of src/risk/profile.ts by segments of draws, one standard deviation wide:
// every integrand there is monotone in the draw, so a segment contributes at most its mass times the integrand at
// its worse end. The segments are visited from the integrand's large end and the visit stops once the integrand has
// fallen so far that everything beyond adds under a twentieth (bounded by the integrand there times the mass left).
// The result is multiplied by a factor that covers the difference between the true draw integral and the rule that
// evaluates it (a positive-weight rule on ±9 standard deviations, or a closed form of the same integral), whose
// weight on any segment is far within twice the segment's mass (the bounds hold with 1.2; checked in test/scale/recommend-bounds.test.ts).
const RULE_FACTOR = 2;
const SEGMENT_LIMIT = 9;
// MASS_ABOVE[j] = P(z > j − 9), j = 0 … 18
const MASS_ABOVE = Array.from({ length: 2 * SEGMENT_LIMIT + 1 }, (_, j) => normalSf(j - SEGMENT_LIMIT));

// Σ over unit segments of the draws of mass × the integrand at the segment's larger-valued end; `rising`: the
// integrand grows with the draw (visited from +9 down), else it falls (visited from −9 up). The integrand is the
// law's any-of-n-above at t (`anyAbove`) or its energy below t, picked here rather than by a closure per call.
function segmentBound(profile: MagnitudeProfile, rising: boolean, law: ElementLaw, t: number, n: number, anyAbove: boolean): number {
  const step = exp2(profile.log2Spread);
  // beyond ±9 the integrand is at most 1
  let sum = MASS_ABOVE[2 * SEGMENT_LIMIT]!;
  let r = profile.rms * exp2(profile.log2Spread * (rising ? SEGMENT_LIMIT : -SEGMENT_LIMIT));
  for (let j = 2 * SEGMENT_LIMIT; j > 0; j--) {
    const value = anyAbove ? anyOf(law.above(r, t), n) : law.energyBelow(r, t);
    // the segment next to the end just evaluated, toward the small end: mass P(j − 10 < |z| beyond …) by symmetry
    const mass = MASS_ABOVE[j - 1]! - MASS_ABOVE[j]!;
    sum += mass * value;
    // everything further toward the small end: at most the integrand here times the mass there
    const rest = value * (1 - MASS_ABOVE[j - 1]!);
    if (rest <= sum / 20 || j === 1) return Math.min(1, RULE_FACTOR * (sum + rest));
    r = rising ? r / step : r * step;
  }
  return 1;
}

/**
 * An upper bound on {@link probabilityAnyAbove}(profile, t) from its integrand at a few draws: far tighter than
 * the extreme-draw bound where the probability is small, for a fraction of the integral's evaluations; exact where
 * the probability is a closed form.
 */
export function probabilityAnyAboveUpper(profile: MagnitudeProfile, t: number): number {
  if (isEmpty(profile) || isConstantLike(profile) || !(profile.log2Spread > 0)) return probabilityAnyAbove(profile, t);
  return segmentBound(profile, true, elementLaw(profile), t, nonzeroElements(profile), true);
}

/**
 * An upper bound on {@link energyBelow}(profile, t) from its integrand at a few draws (the share falls as the draw
 * rises), as {@link probabilityAnyAboveUpper}: it settles most comparisons of a small share with a tolerance. For the
 * Gaussian magnitude law at t (no bound at or below it) it is the closed form of src/risk/settle.ts instead, far
 * tighter and cheaper: per draw r the share is E[Z²; |Z| ≤ a] ≤ √(2/π)·a³/3 (the density at most φ(0)) and at most 1,
 * a = t/r = (t/rms)·e^{−S·ln2·z}, so over the draws it is at most E_z[min(1, c·e^{−3S·ln2·z})] (capMean: two normal
 * tails; within 1–1.3× of the share on the 1,000-layer spec's gradients, where the segments were 5× to far above it),
 * widened for what evaluates the integral: a thousandth where the share tables or the series do, else RULE_FACTOR, as
 * the segments take it.
 */
export function energyBelowUpper(profile: MagnitudeProfile, t: number): number {
  if (isEmpty(profile) || isConstantLike(profile) || !(profile.log2Spread > 0)) return energyBelow(profile, t);
  const shape = profile.shape;
  const a = t / profile.rms;
  if ((shape === "gaussian" || shape === "half-gaussian") && a > 0 && a < Infinity && !(profile.bound !== undefined && profile.bound > 0 && !(t < profile.bound))) {
    const cap = capMeanFast(LOG_ENERGY_DENSITY + 3 * Math.log(a), 3 * profile.log2Spread * LN2);
    // where the share is at most a half and the spread one the share tables hold, the value is read off them (src/risk/
    // laws.ts: interpolated in log share, within 2e-7 of the integral relative, test/risk/share-tables.test.ts) or taken
    // from the small ratios' series (the integral itself): far less room than the rule's factor covers it
    const tight = cap * (1 + TABLE_ROOM);
    if (tight <= 0.5 && profile.log2Spread >= TABLE_SPREADS[0] && profile.log2Spread <= TABLE_SPREADS[1]) return tight;
    return Math.min(1, RULE_FACTOR * cap);
  }
  return segmentBound(profile, false, elementLaw(profile), t, 0, false);
}
/**
 * Whether {@link energyBelowUpper} takes its closed form for this profile at every positive finite t/rms: a Gaussian or
 * half-Gaussian law with a spread and no bound, neither empty nor constant (the window's searches then ask it before
 * the cheap bounds, src/scale/recommend.ts flushedEnergyUpperFirst).
 */
export function energyBelowUpperClosed(profile: MagnitudeProfile): boolean {
  const shape = profile.shape;
  return (
    (shape === "gaussian" || shape === "half-gaussian") &&
    !(profile.bound !== undefined && profile.bound > 0) &&
    profile.log2Spread > 0 &&
    profile.rms > 0 &&
    profile.rms < Infinity &&
    !isEmpty(profile) &&
    !isConstantLike(profile)
  );
}
/**
 * log2 of a threshold below which {@link energyBelowUpper} is within `tolerance` (so, being an upper bound, is the share
 * it bounds), for a profile that takes its closed form ({@link energyBelowUpperClosed}); −∞ for any other. Worked out
 * once per profile instead of the closed form's four tails per threshold: E_z[min(1, c·e^{−m·z})] ≤ E_z[(c·e^{−m·z})^θ] =
 * c^θ·e^{θ²m²/2} for every θ in [0, 1] (min(1, y) ≤ y^θ; Chernoff 1952), which at the best θ = min(1, −ln c/m²) is
 * e^{E(ln c)} with E(L) = −L²/(2m²) for −m² ≤ L ≤ 0, else L + m²/2, rising in L; energyBelowUpper is at most twice its
 * closed form (the rule's factor) and that form within 1e-6 of capMean, so 2·1.01·e^{E} ≤ tolerance suffices. The
 * threshold is then the largest t whose ln c = ln(√(2/π)/3) + 3·ln(t/rms) reaches the L where E(L) =
 * ln(tolerance/2.02), less a millionth of a binade for the rounding of ln(t/rms) and of this arithmetic (both far below
 * it).
 */
export function energyBelowWithinLog2(profile: MagnitudeProfile, tolerance: number): number {
  if (!energyBelowUpperClosed(profile) || !(tolerance > 0)) return -Infinity;
  return energyBelowWithinLog2Of(Math.log2(profile.rms), profile.log2Spread, tolerance);
}
/**
 * {@link energyBelowWithinLog2} from log2 of the rms and the spread, for a law the closed form takes at them: rising in
 * the rms and falling in the spread (E rises with m at every L ≤ 0, being the least over θ of θL + θ²m²/2), so the
 * threshold of a smaller rms and a wider spread holds for the profile itself.
 */
export function energyBelowWithinLog2Of(rmsLog2: number, log2Spread: number, tolerance: number): number {
  const m = 3 * log2Spread * LN2;
  // (one tolerance for every tensor of a search: its logarithm taken once, the same double)
  if (tolerance !== MOST_FOR[0]) {
    MOST_FOR[0] = tolerance;
    MOST_FOR[1] = Math.log(tolerance / (2 * 1.01));
  }
  const most = MOST_FOR[1]!;
  // the largest ln c with E(ln c) ≤ most (E is continuous at −m², where both forms give −m²/2)
  const logC = most <= (-m * m) / 2 ? most - (m * m) / 2 : -m * Math.sqrt(-2 * most);
  const log2T = rmsLog2 + (logC - LOG_ENERGY_DENSITY) / (3 * LN2) - 1e-6;
  return log2T === log2T ? log2T : -Infinity;
}
// the tolerance energyBelowWithinLog2Of last took, and the logarithm it takes of it
const MOST_FOR = Float64Array.of(NaN, NaN);
// settle.ts capMean, E_z[min(1, c·e^{−m·z})] = Φ(z*) + c·e^{m²/2}·Q(z* + m) (z* = ln(c)/m), from the fast tails of
// _math.ts (relative error below 1.2e-7 each, hence the 3e-7 of room) instead of the accurate tail and its logarithm:
// the factor c·e^{m²/2} taken whole, and capMean itself where it overflows
function capMeanFast(logC: number, m: number): number {
  const crossing = logC / m;
  const v = normalSf(-crossing) + Math.exp(logC + (m * m) / 2) * normalSf(crossing + m);
  return v < Infinity ? v * (1 + 3e-7) : capMean(logC, m);
}
// ln(√(2/π)/3): E[Z²; |Z| ≤ a] ≤ √(2/π)·a³/3
const LOG_ENERGY_DENSITY = Math.log(DENSITY / 3);
// the spreads at which test/risk/share-tables.test.ts holds the tables to the integral, and the room left for their
// error (5,000 times the 2e-7 relative they are held to)
const TABLE_SPREADS = [0.25, 8] as const;
const TABLE_ROOM = 1e-3;

/**
 * The extreme-draw bounds above ({@link probabilityAnyAboveBounds}, and {@link energyBelowBounds} with their inner
 * draws) of one Gaussian-law profile at any number of thresholds: the draws' scales rms·2^{±9·spread} and
 * rms·2^{±4·spread} are taken once per profile instead of once per threshold (through laws.ts's table of node
 * factors, which every spread of a large check misses), and each bound is the same arithmetic on the same values as
 * lawOverDrawsBounds', bit for bit (test/scale/recommend-bounds.test.ts). Other profiles (another law, a bound, no
 * spread, nothing to judge) go to the functions above.
 */
export class ProfileDrawBounds {
  private readonly fast: boolean;
  private readonly count: number;
  private readonly law: ElementLaw;
  /**
   * `draws` at `place` … `place + 3` take the draws' scales at z = −9, 9, −4, 4: a typed array the caller shares among many
   * profiles (gradientProfiles: one for an answer's ~4,000), where four numbers of the object's own were a boxed double
   * each, for the collector to copy for as long as the answer lives; by default one of its own
   */
  constructor(
    private readonly profile: MagnitudeProfile,
    private readonly draws: Float64Array = new Float64Array(DRAWS),
    private readonly place = 0,
  ) {
    const shape = profile.shape;
    const s = profile.log2Spread;
    this.fast =
      (shape === "gaussian" || shape === "half-gaussian") && !(profile.bound !== undefined && profile.bound > 0) && s > 0 && !isEmpty(profile);
    this.law = elementLaw(profile);
    this.count = nonzeroElements(profile);
    // the draws' scales at the nodes z = −9, 9, −4, 4 as laws.ts's nodeFactors makes them: 2^(spread·m) at a whole
    // z = m by m products of 2^spread (or of 2^−spread), times the eighth's power 1
    const rms = profile.rms;
    const up = exp2(s);
    const down = exp2(-s);
    let above = 1;
    let below = 1;
    for (let m = 1; m <= 9; m++) {
      above *= up;
      below *= down;
      if (m === 4) {
        draws[place + INNER_HIGH] = rms * above;
        draws[place + INNER_LOW] = rms * below;
      }
    }
    draws[place + HIGHEST] = rms * above;
    draws[place + LOWEST] = rms * below;
  }

  /** {@link probabilityAnyAboveBounds}(profile, t) */
  anyAbove(t: number): [number, number] {
    this.anyAboveInto(t, SCRATCH, 0);
    return pair(SCRATCH[0]!, SCRATCH[1]!);
  }

  /**
   * {@link anyAbove}'s bounds into `into` at `at` (low) and `at + 1` (high), without an array per call: the window's
   * search asks for them at every exponent it visits, for every tensor, and keeps only the two numbers
   */
  anyAboveInto(t: number, into: Float64Array, at: number): void {
    if (!this.fast) {
      const b = probabilityAnyAboveBounds(this.profile, t);
      into[at] = b[0];
      into[at + 1] = b[1];
      return;
    }
    // laws.ts drawBounds on anyOf(above(r, t), n), the draws beyond ±9 allowed up to 1
    const draws = this.draws;
    const p = this.place;
    const b = anyOf(this.law.above(draws[p + HIGHEST]!, t), this.count);
    // 0 at the highest draw is a tail of 0 (anyOf is 0 only for that): erfc's exponential underflowed, and it does
    // further out, at the lowest draw, too; so the pair is [0, 0] as below, without evaluating it (the window's
    // searches meet this for most tensors at their extreme exponents)
    if (b === 0) {
      into[at] = into[at + 1] = 0;
      return;
    }
    const a = anyOf(this.law.above(draws[p + LOWEST]!, t), this.count);
    if (a === b) {
      into[at] = into[at + 1] = Math.min(1, Math.max(0, a));
      return;
    }
    into[at] = Math.max(0, Math.min(a, b) * (1 - 1e-12));
    into[at + 1] = Math.min(1, Math.max(a, b) * (1 + 1e-12) + 2.3e-19);
  }

  /** {@link energyBelowBounds}(profile, t) */
  energyBelow(t: number): [number, number] {
    this.energyBelowInto(t, SCRATCH, 0);
    return pair(SCRATCH[0]!, SCRATCH[1]!);
  }

  /** {@link energyBelow}'s bounds into `into` at `at` (low) and `at + 1` (high), as {@link anyAboveInto} */
  energyBelowInto(t: number, into: Float64Array, at: number): void {
    if (!this.fast) {
      const b = energyBelowBounds(this.profile, t);
      into[at] = b[0];
      into[at + 1] = b[1];
      return;
    }
    // laws.ts drawBounds on energyBelow(r, t) with the inner draws
    const law = this.law;
    const draws = this.draws;
    const p = this.place;
    const a = law.energyBelow(draws[p + LOWEST]!, t);
    const b = law.energyBelow(draws[p + HIGHEST]!, t);
    if (a === b) {
      into[at] = into[at + 1] = Math.min(1, Math.max(0, a));
      return;
    }
    const outerLow = Math.max(0, Math.min(a, b) * (1 - 1e-12));
    const outerHigh = Math.min(1, Math.max(a, b) * (1 + 1e-12));
    if (outerLow === outerHigh) {
      into[at] = outerLow;
      into[at + 1] = outerHigh;
      return;
    }
    const c = law.energyBelow(draws[p + INNER_LOW]!, t);
    const d = law.energyBelow(draws[p + INNER_HIGH]!, t);
    const inside = 1 - INNER_DRAW_OUTSIDE;
    const low = Math.max(0, Math.min(c, d) * inside * (1 - 1e-9));
    const high = Math.min(1, (Math.max(c, d) * inside + INNER_DRAW_OUTSIDE) * (1 + 1e-9));
    into[at] = Math.max(outerLow, low);
    into[at + 1] = Math.min(outerHigh, high);
  }
}

// a ProfileDrawBounds' draws at its place in the shared array (z = −9, 9, −4, 4), and how many numbers it takes there
const LOWEST = 0;
const HIGHEST = 1;
const INNER_LOW = 2;
const INNER_HIGH = 3;
/** the numbers a {@link ProfileDrawBounds} takes of its shared array */
export const DRAWS = 4;

// the bounds of one call to ProfileDrawBounds' array-returning methods, before they are copied out
const SCRATCH = new Float64Array(2);

// [low, high] as an array of doubles from its first use (see laws.ts `bounds`)
function pair(low: number, high: number): [number, number] {
  const p: [number, number] = [0.5, 0.5];
  p[0] = low;
  p[1] = high;
  return p;
}
