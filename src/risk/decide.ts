/**
 * A tensor's findings decided by cheap bounds before its risk numbers are worked out. Most tensors of a large check sit
 * far inside every threshold on every side a finding looks at; a closed-form upper bound at or below half a threshold
 * (the lower of the at-risk and failing ones) decides that side without the integral, else the number itself does, and
 * only the numbers a finding reports (an overflow probability past its limit) are integrated, by the same calls the
 * numbers themselves make. The rest of a tensor's numbers are worked out when first read (src/risk/tensor-check.ts),
 * with the same values.
 *
 * Half a threshold, not the threshold: the bounds hold the exact draw integrals, and the numbers reported are within
 * 2e-7 absolute or 1e-6 relative of those (the accuracy README gives), far inside the other half. Only the Gaussian
 * magnitude laws (gaussian, half-gaussian, bounded) are bounded here; a tensor of another law, or one whose bounds do
 * not decide, is judged from its numbers as before (null from {@link decidedFindings}).
 */
import { pow2 } from "../formats/index.js";
import type { MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { normalSf, normalUpperQuantile } from "../numeric/normal.js";
import { LN2 } from "./_math.js";
import { energyBelow, fractionBelow, profileStatistics, riskProfile } from "./profile.js";
import { capWithin, DENSITY, FAR_DRAW, farThreshold, overflowRiskOf, settledBelow, settledEnergyBelow, UNSETTLED } from "./settle.js";
import { gaussianNoiseAbove, gaussianNoiseWithin, subnormalNoise, subnormalNoiseLimit } from "./subnormal-noise.js";
import { overflowAtRiskThreshold } from "./tensor.js";
import { FOUND, isGradientRole, liftRemedy, NO_FINDINGS, noLiftRemedy, overflowFinding, overflowRiskFinding, plainRemedy, subnormalFinding } from "./tensor-finding.js";
import type { Finding, FindingKind, RangeLimits, RiskThresholds, Verdict } from "./types.js";

// the headroom's level is bounded 1/16 binade lower than the finding's: the predicted max is read off level tables
// within 1e-6 binade of its search (src/risk/laws.ts), and the search within a lattice step of the crossing
const HEADROOM_MARGIN = 1 / 16;

/**
 * One side of a tensor (its start or end profile after the loss-scale factor), its fields read once: a prediction's
 * profiles come in many layouts (correlations, coherent sums), and every read of a field is a look-up by layout. The
 * profile after the factor is made only where a number of the side is worked out ({@link Side.law}): most sides are
 * decided by bounds on the fields alone.
 */
class Side {
  /** the profile as given, before `factor` */
  source: MagnitudeProfile | null = null;
  factor = 1;
  /** the profile after the factor, once made (law) */
  scaled: MagnitudeProfile | null = null;
  rms = 0;
  /** S·ln 2, 0 without a spread */
  m = 0;
  /** the nonzero element count; 0: nothing to judge */
  count = 0;
  /** the bound, 0 when none */
  bound = 0;
  // settledRisk's numbers of the side (src/risk/tensor.ts), worked out when {@link countedFindings} first needs them:
  // whether the bounds settled its flushed share as 0, the settle of the share below the smallest normal (UNSETTLED,
  // or 0), and the shares (NaN: not worked out)
  settleRead = false;
  settled = false;
  belowNormalSettled = UNSETTLED;
  flushed = NaN;
  belowNormal = NaN;
  energy = NaN;

  /**
   * Reads a side's fields; false when its nonzero magnitudes may not follow the Gaussian law (a `bound` only caps them,
   * which lowers every share above it and none below it under the bound). An empty side is always read.
   */
  read(profile: MagnitudeProfile, factor: number): boolean {
    // the scale and the bound as riskProfile multiplies them (x·1 = x exactly, so a factor of 1 reads the profile's own)
    const rms = profile.rms * factor;
    const elements = profile.elements;
    const zeroFraction = profile.zeroFraction;
    const spread = profile.log2Spread;
    const given = profile.bound;
    const bound = given === undefined ? undefined : given * factor;
    this.source = profile;
    this.factor = factor;
    this.scaled = null;
    this.settleRead = false;
    this.flushed = NaN;
    this.belowNormal = NaN;
    this.energy = NaN;
    this.rms = rms;
    this.count = rms > 0 ? Math.max(0, elements * (1 - zeroFraction)) : 0;
    this.m = spread > 0 ? spread * LN2 : 0;
    this.bound = bound !== undefined && bound > 0 ? bound : 0;
    if (!(this.count > 0)) {
      this.count = 0;
      return true;
    }
    const shape = profile.shape;
    return shape === "gaussian" || shape === "half-gaussian" || shape === "bounded";
  }

  /** The side's profile after the factor: the given one for a factor of 1, else riskProfile's copy (made once). */
  law(): MagnitudeProfile {
    return (this.scaled ??= this.factor === 1 ? (this.source as MagnitudeProfile) : riskProfile(this.source as MagnitudeProfile, this.factor));
  }
}

/**
 * What every tensor's decision in one format shares: the range, the thresholds and the levels and far draws they set,
 * worked out once (a check makes one per format it judges), and the two sides being decided.
 */
export class FormatDecision {
  readonly limits: RangeLimits;
  readonly thresholds: RiskThresholds;
  /** the subnormal noise's limit (subnormalNoiseLimit) */
  readonly noiseLimit: number;
  /** the overflow probability past which a tensor is at risk, and the lower of it and the failing one */
  readonly atRisk: number;
  readonly finding: number;
  /** the lower of each share's two thresholds */
  readonly flushed: number;
  readonly energy: number;
  /** the overflow bound's draw z₀ (where Q(z₀) is a quarter of `finding`) and Q(z₀) */
  readonly overflowDraw: number;
  readonly overflowFar: number;
  /** the level the headroom's bound is taken at, and its draw and Q at half of maxQuantile */
  readonly headroomLevel: number;
  readonly headroomDraw: number;
  readonly headroomFar: number;
  /** the squared threshold unit past which each any-above bound holds without its exponentials (quickSquare) */
  readonly overflowQuick: number;
  readonly headroomQuick: number;
  /**
   * anyAboveWithin's numbers for the overflow bound and for the headroom's (ASK_LEVEL…ASK_QUICK): read from an array of
   * doubles, not passed, since doubles passed to a call the compiler does not inline are boxed, five a bound (a plain
   * array: its doubles are stored unboxed too, and a typed array costs microseconds to make, a decision per judgement)
   */
  readonly overflowAsk: number[];
  readonly headroomAsk: number[];
  readonly start = new Side();
  readonly end = new Side();
  /**
   * After {@link decidedFindings} decided a tensor, each side's overflow probability where it was worked out (−1 where
   * its bound decided it): the values the tensor's numbers report, read later (src/risk/tensor-check.ts)
   */
  startOverflow = -1;
  endOverflow = -1;
  /**
   * The weights decided without findings so far (up to KEPT_WEIGHTS, the latest replacing the oldest): each one's start
   * and end profile objects and the side numbers its decision left. A prediction shares one profile object among the
   * weights of equal laws (the layers of one width and init), and no finding means nothing names the tensor: a weight
   * with the same two objects is decided as that one was (decidedFindings is a function of the profiles, the role's
   * kind and the decision, and of the tensor's id and factor only through findings it makes).
   */
  readonly keptStarts: (MagnitudeProfile | null)[] = [];
  readonly keptEnds: (MagnitudeProfile | null)[] = [];
  readonly keptOverflows: number[] = [];
  keptNext = 0;
  /** countedFindings' records for a visitor that reads only kinds and severities (kindOnly), made when first asked */
  readonly kindRecords: (Finding | undefined)[] = [];

  constructor(limits: RangeLimits, thresholds: RiskThresholds) {
    const t = thresholds;
    this.limits = limits;
    this.thresholds = t;
    this.noiseLimit = subnormalNoiseLimit(limits, t.subnormalNoiseAtRisk);
    this.atRisk = overflowAtRiskThreshold(t, false);
    // a probability or share past either threshold is a finding (grade: failing first), whichever is the lower
    this.finding = Math.min(this.atRisk, t.overflowFails);
    this.flushed = Math.min(t.flushedAtRisk, t.flushedFails);
    this.energy = Math.min(t.energyAtRisk, t.energyFails);
    // z₀ taken where Q(z₀) is about half the bound's target (half the finding's threshold)
    this.overflowDraw = normalUpperQuantile(this.finding / 4);
    this.overflowFar = normalSf(this.overflowDraw);
    this.headroomLevel = limits.maxFinite * 2 ** -(t.headroomAtRisk + HEADROOM_MARGIN);
    this.headroomDraw = normalUpperQuantile(t.maxQuantile / 4);
    this.headroomFar = normalSf(this.headroomDraw);
    this.overflowQuick = quickSquare(this.finding / 2, this.overflowFar);
    this.headroomQuick = quickSquare(t.maxQuantile / 2, this.headroomFar);
    this.overflowAsk = [limits.overflowLevel, this.finding / 2, this.overflowDraw, this.overflowFar, this.overflowQuick];
    this.headroomAsk = [this.headroomLevel, t.maxQuantile / 2, this.headroomDraw, this.headroomFar, this.headroomQuick];
  }
}

// The most nonzero elements anyAboveWithin's quick test covers (a side with more takes the bound itself): 2^53
const QUICK_COUNT = 2 ** 53;
const LOG2E = Math.LOG2E;

// The u² past which QUICK_COUNT·e^{−u²/2} is at most half of what `target` leaves above `far`, so that
// far + n·e^{−u²/2} ≤ target for any n ≤ QUICK_COUNT, with room (a factor 2) for every rounding of the bound as
// anyAboveWithin computes it; Infinity where the target leaves nothing above `far`
function quickSquare(target: number, far: number): number {
  const room = (target - far) / 2;
  return room > 0 ? 2 * (Math.log(QUICK_COUNT) - Math.log(room)) : Infinity;
}

// What the shares below the flush bound decide of a side (belowCode): no finding can come from them; none but the
// subnormal noise's (its number past the limit); or the side is judged from its numbers
const BELOW_DECIDED = 0;
const NOISE_PAST = 1;
const BELOW_OPEN = 2;

/**
 * Whether no finding of the shares below the flush bound can come from the side: the share of elements flushed at most
 * its at-risk threshold, a gradient's flushed energy too, and the subnormal noise at most its limit (BELOW_DECIDED).
 * Each by its bound at half the threshold, else by the number itself: a side's reported share is that call's value or 0
 * (settledRisk). NOISE_PAST where only the noise is past its limit, BELOW_OPEN where a share may be.
 */
function belowCode(side: Side, d: FormatDecision, gradient: boolean): number {
  if (side.count === 0) return BELOW_DECIDED;
  const limits = d.limits;
  const flushBound = limits.flushBound;
  // at or past a bound the Gaussian's share is not the law's: judged from the numbers
  if (side.bound > 0 && !(flushBound < side.bound)) return BELOW_OPEN;
  const a = flushBound / side.rms;
  if (!capWithin(DENSITY * a, side.m, d.flushed / 2) && !(fractionBelow(side.law(), flushBound) <= d.flushed)) return BELOW_OPEN;
  if (gradient && !capWithin((DENSITY / 3) * a * a * a, 3 * side.m, d.energy / 2) && !(energyBelow(side.law(), flushBound) <= d.energy)) return BELOW_OPEN;
  // the noise by its bound at half the limit (the noise is computed within 2e-7 of its integral's shares), else itself
  return gaussianNoiseWithin(side.rms, side.m, side.bound, limits, d.noiseLimit / 2) || subnormalNoise(side.law(), limits) <= d.noiseLimit ? BELOW_DECIDED : NOISE_PAST;
}

// Whether the probability that some of the side's nonzero elements reach t in a step, over draws, is at most `target`,
// by the bound at draw z₀ with Q(z₀) = far (settle.ts's farThreshold). Most sides sit so far under t that the bound
// holds by orders of magnitude: it is first taken without its two exponentials, the threshold unit u = (t/rms)·e^{−m·z₀}
// bounded below by (t/rms)·2^{−k}, k ≥ m·z₀·log₂e (one more for the rounding of the product), against `quick`
// (quickSquare, its u² for this target): where that holds, so does the bound as computed below, so the answer is its.
// `ask`: the level t, the target, z₀, Q(z₀) and the quick test's u² (FormatDecision's overflowAsk, headroomAsk)
function anyAboveWithin(side: Side, ask: readonly number[]): boolean {
  if (side.count === 0) return true;
  const t = ask[ASK_LEVEL] as number;
  const z0 = ask[ASK_DRAW] as number;
  if (!(t > 0)) return false;
  const a = t / side.rms;
  const k = Math.ceil(side.m * z0 * LOG2E) + 1;
  // (2^−k exact from the formats' table, e^−x ≥ 2^−k wherever k ≥ x·log₂e; 0 past the smallest double: no quick answer)
  if (k >= 0 && side.count <= QUICK_COUNT) {
    const low = a * pow2(-k);
    if (low * low >= (ask[ASK_QUICK] as number)) return true;
  }
  const u = farThreshold(a, side.m, z0);
  return (ask[ASK_FAR] as number) + side.count * Math.exp(-(u * u) / 2) <= (ask[ASK_TARGET] as number);
}
const ASK_LEVEL = 0;
const ASK_TARGET = 1;
const ASK_DRAW = 2;
const ASK_FAR = 3;
const ASK_QUICK = 4;

/**
 * Whether the side keeps at least the headroom asked for: its predicted max (the level passed with probability
 * maxQuantile per step) is below maxFinite·2^−headroomAtRisk when the probability of passing a level 1/16 binade under
 * that is at most half of maxQuantile; else by the max itself, as settledRisk takes it.
 */
function headroomDecided(side: Side, d: FormatDecision): boolean {
  if (side.count === 0) return true;
  const t = d.thresholds;
  if (anyAboveWithin(side, d.headroomAsk)) return true;
  return headroomOf(side, d) >= t.headroomAtRisk;
}

// The overflow probability of a side: −1 when it is at most half the lower threshold (not worked out), else its value
// as settledRisk gives it (the same call, or its answer where surelySettledOne shows it)
function overflowDecided(side: Side, d: FormatDecision): number {
  if (anyAboveWithin(side, d.overflowAsk)) return -1;
  if (side.count === 0) return 0;
  return surelySettledOne(side, d.limits.overflowLevel) ? 1 : overflowRiskOf(side.law(), d.limits);
}

// Whether settle.ts's settledAnyAbove settles the probability that some of the side's nonzero elements reach t as 1, shown
// without its logarithms and exponentials, for a side far past t even at its lowest draw: with n ≥ 64 elements and
// a = t/rms < 7, its test for 0 cannot hold (ln n − high²/2 > −24.5, high ≤ a, against ln(SETTLED/4) = −31.3); with
// a·e^{m·7.65} at most half of 0.3 (a·2^k ≤ 0.3, k ≥ m·7.65·log₂e + 1, as anyAboveWithin bounds the exponential), its
// tail is at least ln(1 − √(2/π)·0.15) > −0.13, so ln n plus it is above ln 32 by far more than any rounding: settled 1.
// The settle's own conditions are the side's: a Gaussian law (read) with no bound at or below t, and t > 0.
function surelySettledOne(side: Side, t: number): boolean {
  if (!(side.count >= 64) || !(t > 0) || (side.bound > 0 && !(t < side.bound))) return false;
  const a = t / side.rms;
  if (!(a < 7)) return false;
  const k = Math.ceil(side.m * FAR_DRAW * LOG2E) + 1;
  return k >= 0 && a <= 0.3 * pow2(-k);
}

/**
 * The findings of a tensor judged in a format (as src/risk/tensor.ts's tensorFindings gives them from its numbers),
 * decided from bounds and the numbers past their bounds; null where that does not decide them (the tensor is then judged
 * from its numbers). `start` and `end` are the tensor's profiles before its loss-scale factor `factor`, which the
 * decision applies as riskProfile does (making the copy only where a number is worked out); `same` when they are one
 * distribution. For a format that holds the tensor, without scale factors, and a tensor that is not a probability row
 * (the caller's conditions); `decision` is the format's, made once for every tensor the format judges. No findings is
 * the shared NO_FINDINGS (src/risk/tensor-finding.ts), which the caller copies where it hands the array out (a gradient's
 * subnormal remedy names the scale `factor`); `words` false for findings
 * only counted (TensorRiskOptions.countOnly: the noise's sentence left empty, as tensorFindings leaves it).
 */
export function decidedFindings(
  tensor: TensorPrediction,
  start: MagnitudeProfile,
  end: MagnitudeProfile,
  same: boolean,
  decision: FormatDecision,
  factor = 1,
  words = true,
): Finding[] | null {
  const d = decision;
  if (tensor.role !== "weight" || factor !== 1) return decided(tensor, start, end, same, d, factor, words);
  const starts = d.keptStarts;
  for (let i = 0; i < starts.length; i++) {
    if (starts[i] === start && d.keptEnds[i] === end) {
      d.startOverflow = d.keptOverflows[2 * i] as number;
      d.endOverflow = d.keptOverflows[2 * i + 1] as number;
      return NO_FINDINGS;
    }
  }
  const found = decided(tensor, start, end, same, d, factor, words);
  if (found === NO_FINDINGS) {
    const i = d.keptNext;
    d.keptNext = (i + 1) % KEPT_WEIGHTS;
    starts[i] = start;
    d.keptEnds[i] = end;
    d.keptOverflows[2 * i] = d.startOverflow;
    d.keptOverflows[2 * i + 1] = d.endOverflow;
  }
  return found;
}
// how many weights' decisions a FormatDecision keeps: a network has few weight laws (a width's weights, its biases)
const KEPT_WEIGHTS = 8;

function decided(
  tensor: TensorPrediction,
  start: MagnitudeProfile,
  end: MagnitudeProfile,
  same: boolean,
  d: FormatDecision,
  factor: number,
  words: boolean,
): Finding[] | null {
  const role = tensor.role;
  const gradient = isGradientRole(role);
  const first = d.start;
  const last = same ? first : d.end;
  if (!first.read(start, factor)) return null;
  const firstBelow = belowCode(first, d, gradient);
  if (firstBelow === BELOW_OPEN) return null;
  let lastBelow = firstBelow;
  if (!same) {
    if (!last.read(end, factor)) return null;
    lastBelow = belowCode(last, d, gradient);
    if (lastBelow === BELOW_OPEN) return null;
  }
  const noisy = firstBelow === NOISE_PAST || lastBelow === NOISE_PAST;
  const startRisk = overflowDecided(first, d);
  const endRisk = same ? startRisk : overflowDecided(last, d);
  d.startOverflow = startRisk;
  d.endOverflow = endRisk;
  const worst = Math.max(startRisk, endRisk);
  const t = d.thresholds;
  if (!(worst > d.finding)) {
    // no overflow finding: the headroom's, unless both sides keep the headroom asked for
    if (!headroomDecided(last, d)) return null;
    if (!same && !headroomDecided(first, d)) return null;
    return noisy ? noiseAlone(tensor, d, same, factor, words) : NO_FINDINGS;
  }
  // a tie is told apart by the headroom (worseOf): judged from the numbers
  if (startRisk === endRisk && !same) return null;
  const severity: Exclude<Verdict, "fits"> = worst > t.overflowFails ? "fails" : "at-risk";
  const at = endRisk > startRisk ? "end" : "start";
  if (noisy) return overflowAndNoise(tensor, d, same, severity, worst, at, words);
  return overflowFinding(tensor.id, d.limits, severity, worst, severity === "fails" ? t.overflowFails : d.atRisk, at);
}

// the options of a format without scale factors, as plainRemedy reads them
const UNSCALED = { perTensorScaling: false, blockScaling: null };

/**
 * The overflow finding and the subnormal noise's of a tensor whose noise is past its limit on some side (and no other
 * share past its threshold), as tensorFindings gives them from its numbers; null where they need more of its numbers
 * (a tie of the two sides' noise, told apart by the flushed energy; a gradient whose overflow probability does not
 * show that it lacks the headroom a loss scale would need). The noise of each side is settledRisk's (0 where its share
 * of subnormal elements is 0 unsettled), by the same calls.
 */
function overflowAndNoise(
  tensor: TensorPrediction,
  d: FormatDecision,
  same: boolean,
  severity: Exclude<Verdict, "fits">,
  worst: number,
  at: "start" | "end",
  words: boolean,
): Finding[] | null {
  const t = d.thresholds;
  // a gradient's remedy is the smallest loss scale within its headroom less headroomAtRisk binades that lifts the
  // noise: none where its headroom is under 1 + headroomAtRisk (subnormalRemedy). A side passing the overflow level
  // (at least maxFinite) with probability 1/2 per step has its predicted max (passed with probability maxQuantile, at
  // most 1/2: the same any-above law, src/risk/profile.ts) above that level, so a headroom below 0
  const noise = noiseFinding(tensor, d, same, words, () =>
    t.headroomAtRisk >= 0 && t.maxQuantile <= 0.5 && worst >= 0.5 ? noLiftRemedy(t) : null,
  );
  if (noise === null) return null;
  FOUND[0] = overflowRiskFinding(tensor.id, d.limits, severity, worst, severity === "fails" ? t.overflowFails : d.atRisk, at);
  FOUND[1] = noise;
  return FOUND.slice(0, 2);
}

/**
 * The subnormal noise's finding of a tensor whose noise is past its limit on some side, and no other finding (the
 * shares below the flush bound within their thresholds, no overflow, the headroom kept), as tensorFindings gives it from
 * its numbers; null for a tie of the two sides' noise (told apart by the flushed energy). A gradient's remedy is
 * searched within its headroom, from the predicted max of each side (profileStatistics, as its statistics take it);
 * `factor` is the tensor's loss-scale factor, which the profiles carry.
 */
function noiseAlone(tensor: TensorPrediction, d: FormatDecision, same: boolean, factor: number, words: boolean): Finding[] | null {
  const t = d.thresholds;
  const limits = d.limits;
  const noise = noiseFinding(tensor, d, same, words, (first, last) => {
    const startHeadroom = headroomOf(first, d);
    const headroom = same ? startHeadroom : Math.min(startHeadroom, headroomOf(last, d));
    return liftRemedy(first.law(), last.law(), same, factor, headroom, limits, d.noiseLimit, t);
  });
  if (noise === null) return null;
  FOUND[0] = noise;
  return FOUND.slice(0, 1);
}

/**
 * The subnormal noise's finding of a tensor whose noise is past its limit on some side, as tensorFindings words it;
 * null where it is within the limit on both sides, where the two sides' noise ties (told apart by the flushed energy,
 * from the numbers), or where a gradient's remedy needs more of the numbers (`gradientRemedy` null: a gradient's
 * remedy, for which plainRemedy has none). The noise of each side is settledRisk's, by the same calls.
 */
function noiseFinding(
  tensor: TensorPrediction,
  d: FormatDecision,
  same: boolean,
  words: boolean,
  gradientRemedy: (first: Side, last: Side) => string | null,
): Finding | null {
  const limits = d.limits;
  const first = d.start;
  const last = same ? first : d.end;
  if (first.count === 0 || last.count === 0) return null;
  const startNoise = settledNoise(first, limits);
  const endNoise = same ? startNoise : settledNoise(last, limits);
  const noise = Math.max(startNoise, endNoise);
  if (!(noise > d.noiseLimit)) return null;
  // one distribution: both sides' numbers are one object, whose flushed energy ties at the start (worseOf)
  if (!same && startNoise === endNoise) return null;
  const noiseAt = endNoise > startNoise ? "end" : "start";
  const remedy = (words ? plainRemedy(tensor, limits, UNSCALED, false) : "") ?? gradientRemedy(first, last);
  if (remedy === null) return null;
  const side = noiseAt === "start" ? first : last;
  const fraction = Math.max(0, belowNormalShare(side, limits) - flushedShare(side, limits));
  return subnormalFinding(tensor.id, limits, d.thresholds, d.noiseLimit, noise, noiseAt, fraction, remedy, words);
}

// settledRisk's subnormal noise of a non-empty side: 0 where its share of subnormal elements is 0 and its flushed share
// was not settled, else the noise
function settledNoise(side: Side, limits: RangeLimits): number {
  settle(side, limits);
  const fraction = Math.max(0, belowNormalShare(side, limits) - flushedShare(side, limits));
  return fraction === 0 && !side.settled ? 0 : subnormalNoise(side.law(), limits);
}

// settledRisk's settle of a side's shares below the flush bound, by the same calls in the same order (src/risk/tensor.ts)
function settle(side: Side, limits: RangeLimits): void {
  if (side.settleRead) return;
  const profile = side.law();
  const belowNormal = limits.flushBound >= limits.minNormal ? UNSETTLED : settledBelow(profile, limits.minNormal);
  side.belowNormalSettled = belowNormal;
  side.settled = belowNormal === 0 || settledBelow(profile, limits.flushBound) === 0;
  side.settleRead = true;
}

// settledRisk's flushedFraction of a non-empty side
function flushedShare(side: Side, limits: RangeLimits): number {
  settle(side, limits);
  if (side.flushed !== side.flushed) side.flushed = side.settled ? 0 : fractionBelow(side.law(), limits.flushBound);
  return side.flushed;
}

// settledRisk's share below the smallest normal of a non-empty side (its subnormalFraction is this less flushedShare)
function belowNormalShare(side: Side, limits: RangeLimits): number {
  if (side.belowNormal !== side.belowNormal) {
    settle(side, limits);
    if (limits.flushBound >= limits.minNormal) side.belowNormal = flushedShare(side, limits);
    else side.belowNormal = side.belowNormalSettled === 0 ? 0 : fractionBelow(side.law(), limits.minNormal);
  }
  return side.belowNormal;
}

// settledRisk's flushedEnergy of a non-empty side
function energyShare(side: Side, limits: RangeLimits): number {
  if (side.energy !== side.energy) {
    settle(side, limits);
    const profile = side.law();
    side.energy = side.settled || settledEnergyBelow(profile, limits.flushBound) === 0 ? 0 : energyBelow(profile, limits.flushBound);
  }
  return side.energy;
}

// Whether the side's bounds on its shares below the flush bound hold: a Gaussian law there (at or past a bound the
// Gaussian's share is not the law's, as belowDecided takes it)
function boundsHold(side: Side, limits: RangeLimits): boolean {
  return !(side.bound > 0 && !(limits.flushBound < side.bound));
}

// The side's flushed share as settledRisk reports it where it may pass `lowest` (the lower threshold), else −1: by the
// bound at half of it, as belowDecided decides
function flushedPast(side: Side, d: FormatDecision): number {
  if (side.count === 0) return -1;
  const limits = d.limits;
  if (boundsHold(side, limits) && capWithin(DENSITY * (limits.flushBound / side.rms), side.m, d.flushed / 2)) return -1;
  return flushedShare(side, limits);
}

// The same for the side's flushed energy
function energyPast(side: Side, d: FormatDecision): number {
  if (side.count === 0) return -1;
  const limits = d.limits;
  if (boundsHold(side, limits)) {
    const a = limits.flushBound / side.rms;
    if (capWithin((DENSITY / 3) * a * a * a, 3 * side.m, d.energy / 2)) return -1;
  }
  return energyShare(side, limits);
}

// The side's subnormal noise as settledRisk reports it where it may pass the limit, else −1: by the bound at half the
// limit, then by the noise before the shares that may zero it (a share of subnormal elements of 0, unsettled). With
// `unworked`, a noise that its lower bound puts at twice the limit or more is not worked out: NOISE_UNWORKED stands for
// it (past the limit), where the shares do not zero it.
function noisePast(side: Side, d: FormatDecision, unworked: boolean): number {
  if (side.count === 0) return -1;
  const limits = d.limits;
  const holds = boundsHold(side, limits);
  // a side that looks far past the limit asks the lower bound first: the upper bound at half the limit and the lower
  // one at twice it bound one draw integral, so they never both hold and either order gives the same answer
  const early = unworked && holds && farPastLikely(side, d);
  let noise: number;
  if (early && noiseSurelyPast(side, d)) noise = NOISE_UNWORKED;
  else {
    if (holds && gaussianNoiseWithin(side.rms, side.m, side.bound, limits, d.noiseLimit / 2)) return -1;
    noise = unworked && holds && !early && noiseSurelyPast(side, d) ? NOISE_UNWORKED : subnormalNoise(side.law(), limits);
  }
  if (noise <= d.noiseLimit) return -1;
  settle(side, limits);
  if (side.settled) return noise;
  // the subnormal share is positive where the flushed share, as worked out, is surely under the share below the
  // smallest normal as worked out: by their bounds alone, else by the latter share itself
  if (flushedFarUnder(side, limits, belowNormalAtLeast(side, limits))) return noise;
  const belowNormal = belowNormalShare(side, limits);
  if (flushedFarUnder(side, limits, belowNormal)) return noise;
  return Math.max(0, belowNormal - flushedShare(side, limits)) === 0 ? 0 : noise;
}

// Whether a side's subnormal noise looks far past the limit: its bound without the cap on the band's share
// (noiseBound's, Δ²/(12·rms²)·(√(2/π)·h/rms)·e^{9m²/2}, the exponential taken down to a power of two) at least FAR_PAST
// times half the limit. Only the order of noisePast's two bounds hangs on it: on the weighed gradients of a 1,000-layer
// network, no upper bound at half the limit held past about 2^11 times it, and most lower bounds held past 2^12
function farPastLikely(side: Side, d: FormatDecision): boolean {
  const limits = d.limits;
  const rms = side.rms;
  const delta = limits.smallest;
  const m = side.m;
  const uncapped = ((delta * delta) / (12 * rms * rms)) * ((NOISE_DENSITY * limits.minNormal) / rms);
  return uncapped * pow2(Math.floor(4.5 * m * m * LOG2E)) >= FAR_PAST * (d.noiseLimit / 2);
}
const FAR_PAST = 2 ** 12;
// a Gaussian magnitude's density bound √(2/π) (subnormal-noise.ts's)
const NOISE_DENSITY = Math.sqrt(2 / Math.PI);

// What noisePast returns for a noise past its limit that it did not work out (countedFindings works it out when read)
const NOISE_UNWORKED = Infinity;

// Whether the side's subnormal noise as worked out (src/risk/subnormal-noise.ts tilted) is past the limit, by its lower
// bound at twice the limit: at spreads of 1/2 to 8 binades the two shares it takes are read off the rows, each within
// 2e-7 of its integral (README), which the bound's least mass (1e-3) and that factor 2 leave far inside; the noise is
// capped at 1, past a limit under 1/2
function noiseSurelyPast(side: Side, d: FormatDecision): boolean {
  const m = side.m;
  return m >= ROWS_LOWEST_M && m <= ROWS_HIGHEST_M && d.noiseLimit < 0.5 && gaussianNoiseAbove(side.rms, m, side.bound, d.limits, 2 * d.noiseLimit);
}
// the spreads (as S·ln 2) whose Gaussian shares below a threshold come off the rows at every share (src/risk/laws.ts)
const ROWS_LOWEST_M = 0.5 * LN2;
const ROWS_HIGHEST_M = 8 * LN2;

// Whether the side's flushed share, as worked out, is surely under `below` (a number the share below the smallest
// normal, as worked out, is at least), so that its subnormal share is positive without the flushed share: by the bound
// of belowCode at half of what is left of `below` after FLUSHED_MARGIN. The bound holds the exact draw integral; a
// computed share is within 2e-7 of it where rows serve it, and within a few percent where the Simpson rule does (its
// ripple at spreads past the rows, DEVELOPERS.md "Draw integrals"): far inside that factor 2 and the margin.
function flushedFarUnder(side: Side, limits: RangeLimits, below: number): boolean {
  if (!(limits.flushBound < limits.minNormal) || !boundsHold(side, limits)) return false;
  const target = (below - FLUSHED_MARGIN) / 2;
  return target > 0 && capWithin(DENSITY * (limits.flushBound / side.rms), side.m, target);
}

// A number the side's share below the smallest normal, as worked out, is at least (0 where the Gaussian law does not
// hold there): the share's integrand P(|x| ≤ h | r) = erf(h/(r√2)) falls with the draw z, so the integral is at least
// Φ(0)·erf(h/(rms·√2)) = 1/2 − Q(h/rms), the draws z ≤ 0 at the value of z = 0; the computed share is at least half of
// its integral less 2e-7 (the accuracies of flushedFarUnder)
function belowNormalAtLeast(side: Side, limits: RangeLimits): number {
  const h = limits.minNormal;
  if (side.bound > 0 && !(h < side.bound)) return 0;
  return (0.5 - normalSf(h / side.rms)) / 2 - 2e-7;
}
// the absolute margin flushedFarUnder keeps under the share below the smallest normal: 1e-3, a hundred times the
// Simpson rule's error near spread 2.5 (1e-5, DEVELOPERS.md "Draw integrals")
const FLUSHED_MARGIN = 1e-3;

// countedFindings' finding for a caller that reads only its kind and severity (judgeScaled's `kindsOnly`: the loss-scale
// pick's counts), one shared record per kind and severity without the values, so a weighed scale's thousands of findings
// make no object each and no noise is worked out for a value never read: the decision's record of the kind (at `slot`, its failing one next)
// and severity, its value and threshold NaN and its subject empty (none of them read)
function kindOnly(d: FormatDecision, slot: number, kind: FindingKind, severity: Exclude<Verdict, "fits">): Finding {
  const i = severity === "fails" ? slot + 1 : slot;
  return (d.kindRecords[i] ??= Object.freeze({ format: d.limits.format, subject: "", source: "tensor", kind, severity, value: Number.NaN, threshold: Number.NaN, sentence: "" }));
}
const OVERFLOW_SLOT = 0;
const SATURATION_SLOT = 2;
const HEADROOM_SLOT = 4;
const ENERGY_SLOT = 6;
const FLUSHED_SLOT = 8;
const NOISE_SLOT = 10;

// a counted finding: no sentence and no moment (countedFindings)
function counted(subject: string, d: FormatDecision, kind: FindingKind, severity: Exclude<Verdict, "fits">, value: number, threshold: number): Finding {
  return { format: d.limits.format, subject, source: "tensor", kind, severity, value, threshold, sentence: "" };
}

/**
 * The findings of a tensor whose findings are only counted (a weighed loss scale's: src/scale/pick.ts reads each one's
 * kind and severity), under {@link decidedFindings}' conditions: the kinds, severities, values and thresholds that
 * src/risk/tensor.ts's tensorFindings gives from its numbers, without a sentence or a moment (`at`). Each share is
 * decided by its bound at half the lower threshold where that holds, else by the number itself, by the calls settledRisk
 * makes: a finding's value is always such a number (the side a bound decided lies under it). The overflow probabilities
 * and headroom are decided as {@link decidedFindings} decides them, so what is worked out here is only what a finding
 * needs: no statistics (the footroom), and no overflow integral or share that a bound keeps under its threshold. Puts
 * them at the start of FOUND (src/risk/tensor-finding.ts) and returns their count; −1 where the bounds do not read the
 * law (a tensor judged from its numbers then). `start`, `end` and `factor` as {@link decidedFindings} takes them;
 * `kindsOnly` where only each finding's kind and severity will be read (shared records, kindOnly).
 */
export function countedFindings(
  tensor: TensorPrediction,
  start: MagnitudeProfile,
  end: MagnitudeProfile,
  same: boolean,
  decision: FormatDecision,
  factor = 1,
  kindsOnly = false,
): number {
  const d = decision;
  const first = d.start;
  const last = same ? first : d.end;
  if (!first.read(start, factor)) return -1;
  if (!same && !last.read(end, factor)) return -1;
  const t = d.thresholds;
  const subject = tensor.id;
  let found = 0;
  const startRisk = overflowDecided(first, d);
  const endRisk = same ? startRisk : overflowDecided(last, d);
  const worst = Math.max(startRisk, endRisk);
  // (each severity as src/risk/tensor.ts's grade gives it, written out: its doubles passed were boxed, three a call)
  const overflow = worst > t.overflowFails ? "fails" : worst > d.atRisk ? "at-risk" : null;
  if (overflow !== null) {
    const kind = d.limits.saturates ? "saturation" : "overflow";
    FOUND[found++] = kindsOnly ? kindOnly(d, kind === "overflow" ? OVERFLOW_SLOT : SATURATION_SLOT, kind, overflow) : counted(subject, d, kind, overflow, worst, overflow === "fails" ? t.overflowFails : d.atRisk);
  } else {
    // the headroom's finding: where a side does not keep the headroom by its bound, its headroom itself
    const keepsLast = headroomDecided(last, d);
    const keepsFirst = same || headroomDecided(first, d);
    if (!keepsLast || !keepsFirst) {
      const headroom = Math.min(keepsFirst ? Infinity : headroomOf(first, d), keepsLast ? Infinity : headroomOf(last, d));
      // a headroom that is not a number (never for a side with elements) is judged from the numbers
      if (headroom !== headroom) return -1;
      FOUND[found++] = kindsOnly ? kindOnly(d, HEADROOM_SLOT, "little-headroom", "at-risk") : counted(subject, d, "little-headroom", "at-risk", headroom, t.headroomAtRisk);
    }
  }
  const role = tensor.role;
  if (isGradientRole(role)) {
    const value = Math.max(energyPast(first, d), same ? -1 : energyPast(last, d));
    const energy = value > t.energyFails ? "fails" : value > t.energyAtRisk ? "at-risk" : null;
    if (energy !== null) {
      FOUND[found++] = kindsOnly
        ? kindOnly(d, ENERGY_SLOT, "gradient-energy-flushed", energy)
        : counted(subject, d, "gradient-energy-flushed", energy, value, energy === "fails" ? t.energyFails : t.energyAtRisk);
    }
  }
  const flushValue = Math.max(flushedPast(first, d), same ? -1 : flushedPast(last, d));
  const flushed = flushValue > t.flushedFails ? "fails" : flushValue > t.flushedAtRisk ? "at-risk" : null;
  if (flushed !== null) {
    FOUND[found++] = kindsOnly ? kindOnly(d, FLUSHED_SLOT, "flushed-values", flushed) : counted(subject, d, "flushed-values", flushed, flushValue, flushed === "fails" ? t.flushedFails : t.flushedAtRisk);
  }
  // the end first (a loss scale's noisy gradients are most often noisy there): where it is past the limit the start's
  // noise is worked out only if the finding's value is read, as is a noise its lower bound puts past the limit
  const lastNoise = noisePast(last, d, true);
  if (lastNoise > d.noiseLimit) {
    FOUND[found++] = kindsOnly
      ? kindOnly(d, NOISE_SLOT, "subnormal-values", "at-risk")
      : same && lastNoise !== NOISE_UNWORKED
        ? counted(subject, d, "subnormal-values", "at-risk", lastNoise, d.noiseLimit) : new CountedNoise(subject, d, factor, last.source, lastNoise, same ? null : first.source);
  } else if (!same) {
    // the end's noise within the limit: the value is the start's
    const firstNoise = noisePast(first, d, true);
    if (firstNoise > d.noiseLimit) {
      FOUND[found++] = kindsOnly
        ? kindOnly(d, NOISE_SLOT, "subnormal-values", "at-risk")
        : firstNoise !== NOISE_UNWORKED
          ? counted(subject, d, "subnormal-values", "at-risk", firstNoise, d.noiseLimit) : new CountedNoise(subject, d, factor, first.source, firstNoise, null);
    }
  }
  return found;
}

/**
 * A counted subnormal-noise finding whose value (the larger of the sides' noise, as settledRisk reports it) is worked
 * out when first read: a weighed scale's counts read only its kind and severity. The keys and their order are
 * counted()'s, `value` an own enumerable accessor among them (as a check result's lazy fields, src/risk/tensor-check.ts),
 * so JSON, Object.keys, a spread and structuredClone read it as a plain finding's.
 */
class CountedNoise implements Finding {
  declare readonly format: Finding["format"];
  declare readonly subject: string;
  declare readonly source: "tensor";
  declare readonly kind: "subnormal-values";
  declare readonly severity: "at-risk";
  declare readonly value: number;
  declare readonly threshold: number;
  declare readonly sentence: string;
  readonly #decision: FormatDecision;
  readonly #factor: number;
  // a side past the limit, before the factor, and its noise as noisePast gave it (NOISE_UNWORKED: to be worked out)
  readonly #side: MagnitudeProfile | null;
  readonly #noise: number;
  // the other side, whose noise is still to be worked out for the value (null: none, or not a part of it)
  readonly #other: MagnitudeProfile | null;

  constructor(subject: string, d: FormatDecision, factor: number, side: MagnitudeProfile | null, noise: number, other: MagnitudeProfile | null) {
    this.#decision = d;
    this.#factor = factor;
    this.#side = side;
    this.#noise = noise;
    this.#other = other;
    const self = this as { -readonly [K in keyof Finding]: Finding[K] };
    self.format = d.limits.format;
    self.subject = subject;
    self.source = "tensor";
    self.kind = "subnormal-values";
    self.severity = "at-risk";
    Object.defineProperty(this, "value", COUNTED_NOISE_VALUE);
    self.threshold = d.noiseLimit;
    self.sentence = "";
  }

  static worked(finding: CountedNoise): number {
    const d = finding.#decision;
    let value = finding.#noise === NOISE_UNWORKED ? workedNoise(finding.#side as MagnitudeProfile, finding.#factor, d) : finding.#noise;
    if (finding.#other !== null) value = Math.max(value, workedNoise(finding.#other, finding.#factor, d));
    return value;
  }
}

// worked out on the first read, then kept as a plain data field (one descriptor shared by every object, so they keep
// one layout)
const COUNTED_NOISE_VALUE: PropertyDescriptor = {
  get(this: CountedNoise) {
    const value = CountedNoise.worked(this);
    Object.defineProperty(this, "value", { value, writable: true, enumerable: true, configurable: true });
    return value;
  },
  set(this: CountedNoise, value: unknown) {
    Object.defineProperty(this, "value", { value, writable: true, enumerable: true, configurable: true });
  },
  enumerable: true,
  configurable: true,
};

// a side's noise as noisePast works it out, on a side of its own (the decision's two are the next tensor's by then)
function workedNoise(profile: MagnitudeProfile, factor: number, d: FormatDecision): number {
  const side = new Side();
  side.read(profile, factor);
  return noisePast(side, d, false);
}

// a side's headroom as settledRisk reports it
function headroomOf(side: Side, d: FormatDecision): number {
  return Math.log2(d.limits.maxFinite / profileStatistics(side.law(), d.thresholds).max);
}
