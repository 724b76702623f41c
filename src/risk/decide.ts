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
import type { MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { normalLogSf, normalSf, normalUpperQuantile } from "../numeric/normal.js";
import { LN2 } from "./_math.js";
import { nonzeroElements } from "./laws.js";
import { energyBelow, fractionBelow, probabilityAnyAbove, profileStatistics } from "./profile.js";
import { settledAnyAbove } from "./settle.js";
import { noiseAtMost, subnormalNoiseLimit } from "./subnormal-noise.js";
import { overflowAtRiskThreshold, type TensorRiskOptions } from "./tensor.js";
import { noFindings, overflowFinding } from "./tensor-finding.js";
import type { Finding, RangeLimits, RiskThresholds, Verdict } from "./types.js";

// √(2/π): a Gaussian magnitude's density is at most √(2/π)/r, so P(|x| ≤ t | r) ≤ √(2/π)·t/r and
// E[x²; |x| ≤ t]/r² ≤ √(2/π)·(t/r)³/3 (as src/risk/settle.ts takes them)
const DENSITY = Math.sqrt(2 / Math.PI);
// the headroom's level is bounded 1/16 binade lower than the finding's: the predicted max is read off level tables
// within 1e-6 binade of its search (src/risk/laws.ts), and the search within a lattice step of the crossing
const HEADROOM_MARGIN = 1 / 16;

// The side being decided, its fields read once: a prediction's profiles come in many layouts (correlations, coherent
// sums), and every read of a field is a look-up by layout. rms, S·ln 2, the nonzero element count (0: nothing to judge)
// and the bound (0 when none).
let sideRms = 0;
let sideM = 0;
let sideCount = 0;
let sideBound = 0;

// Reads a side's fields; false when its nonzero magnitudes may not follow the Gaussian law (a `bound` only caps them,
// which lowers every share above it and none below it under the bound). An empty side is always read.
function readSide(profile: MagnitudeProfile): boolean {
  const rms = profile.rms;
  const elements = profile.elements;
  const zeroFraction = profile.zeroFraction;
  const spread = profile.log2Spread;
  const bound = profile.bound;
  sideRms = rms;
  sideCount = rms > 0 ? Math.max(0, elements * (1 - zeroFraction)) : 0;
  sideM = spread > 0 ? spread * LN2 : 0;
  sideBound = bound !== undefined && bound > 0 ? bound : 0;
  if (!(sideCount > 0)) {
    sideCount = 0;
    return true;
  }
  const shape = profile.shape;
  return shape === "gaussian" || shape === "half-gaussian" || shape === "bounded";
}

/**
 * Whether E_z[min(1, c·e^{−m·z})], z ~ N(0, 1), is at most `target`: first by c·e^{m²/2} (the mean without the cap), else
 * exactly, Φ(z*) + c·e^{m²/2}·Q(z* + m) at z* = ln(c)/m (complete the square, as src/risk/settle.ts's capSettled).
 */
export function capWithin(c: number, m: number, target: number): boolean {
  if (!(c > 0)) return true;
  if (!(m > 0)) return Math.min(1, c) <= target;
  const free = c * Math.exp((m * m) / 2);
  if (free <= target) return true;
  const logC = Math.log(c);
  const crossing = logC / m;
  return normalSf(-crossing) + Math.exp(logC + (m * m) / 2 + normalLogSf(crossing + m)) <= target;
}

/**
 * Whether no finding of the shares below the flush bound can come from the read side: the share of elements flushed at
 * most its at-risk threshold, a gradient's flushed energy too, and the subnormal noise at most its limit. Each by its
 * bound at half the threshold, else by the number itself: a side's reported share is that call's value or 0 (settledRisk).
 */
function belowDecided(profile: MagnitudeProfile, limits: RangeLimits, t: RiskThresholds, gradient: boolean, noiseLimit: number): boolean {
  if (sideCount === 0) return true;
  const flushBound = limits.flushBound;
  // at or past a bound the Gaussian's share is not the law's: judged from the numbers
  if (sideBound > 0 && !(flushBound < sideBound)) return false;
  const a = flushBound / sideRms;
  // a share past either threshold is a finding (grade: failing first), whichever is the lower
  const flushed = Math.min(t.flushedAtRisk, t.flushedFails);
  if (!capWithin(DENSITY * a, sideM, flushed / 2) && !(fractionBelow(profile, flushBound) <= flushed)) return false;
  const energy = Math.min(t.energyAtRisk, t.energyFails);
  if (gradient && !capWithin((DENSITY / 3) * a * a * a, 3 * sideM, energy / 2) && !(energyBelow(profile, flushBound) <= energy)) return false;
  return noiseAtMost(profile, limits, noiseLimit);
}

/**
 * Whether the probability that some of the read side's nonzero elements reach t in a step, over draws, is at most
 * `target`: the integrand rises with the draw, so it is at most Q(z₀) + n·P(|Z| ≥ u₀), u₀ = t/(rms·2^{S·z₀}), and
 * P(|Z| ≥ u) ≤ e^{−u²/2} (Chernoff); z₀ is taken where Q(z₀) is about half the target.
 */
function anyAboveWithin(t: number, target: number): boolean {
  if (sideCount === 0) return true;
  if (!(t > 0)) return false;
  // a check asks for two targets, tensor after tensor (the overflow's and the headroom's): one slot each
  let at = target === FAR[0] ? 0 : target === FAR[3] ? 3 : -1;
  if (at < 0) {
    // the older slot takes the new target
    at = FAR_NEXT[0] as number;
    FAR_NEXT[0] = 3 - at;
    FAR[at] = target;
    FAR[at + 1] = normalUpperQuantile(target / 2);
    FAR[at + 2] = normalSf(FAR[at + 1] as number);
  }
  const u = (t / sideRms) * Math.exp(-sideM * (FAR[at + 1] as number));
  return (FAR[at + 2] as number) + sideCount * Math.exp(-(u * u) / 2) <= target;
}
// two slots of anyAboveWithin's targets: the target, its draw z₀ and Q(z₀)
const FAR = new Float64Array(6).fill(Number.NaN);
const FAR_NEXT = new Int32Array(1);

/**
 * Whether the read side keeps at least the headroom asked for: its predicted max (the level passed with probability
 * maxQuantile per step) is below maxFinite·2^−headroomAtRisk when the probability of passing a level 1/16 binade under
 * that is at most half of maxQuantile; else by the max itself, as settledRisk takes it.
 */
function headroomDecided(profile: MagnitudeProfile, limits: RangeLimits, t: RiskThresholds): boolean {
  if (sideCount === 0) return true;
  if (anyAboveWithin(limits.maxFinite * 2 ** -(t.headroomAtRisk + HEADROOM_MARGIN), t.maxQuantile / 2)) return true;
  return Math.log2(limits.maxFinite / profileStatistics(profile, t).max) >= t.headroomAtRisk;
}

/**
 * The findings of a tensor judged in a format (as src/risk/tensor.ts's tensorFindings gives them from its numbers),
 * decided from bounds and the numbers past their bounds; null where that does not decide them (the tensor is then judged
 * from its numbers). `start` and `end` are the profiles after the loss-scale factor; `same` when they are one
 * distribution. For a format that holds the tensor, without scale factors, and a tensor that is not a probability row
 * (the caller's conditions).
 */
export function decidedFindings(
  tensor: TensorPrediction,
  start: MagnitudeProfile,
  end: MagnitudeProfile,
  same: boolean,
  limits: RangeLimits,
  options: TensorRiskOptions,
): Finding[] | null {
  const t = options.thresholds;
  const role = tensor.role;
  const gradient = role === "activation-gradient" || role === "weight-gradient";
  const noiseLimit = subnormalNoiseLimit(limits, t.subnormalNoiseAtRisk);
  const atRisk = overflowAtRiskThreshold(t, false);
  // a probability past either threshold is a finding (grade: failing first)
  const finding = Math.min(atRisk, t.overflowFails);
  const level = limits.overflowLevel;
  // per side: −1 when the overflow probability is at most half the lower threshold (not worked out), else its value as
  // settledRisk gives it (the same calls); the fields left read for the headroom below are the end's
  if (!readSide(start) || !belowDecided(start, limits, t, gradient, noiseLimit)) return null;
  const startRisk = anyAboveWithin(level, finding / 2) ? -1 : overflowOf(start, limits);
  let endRisk = startRisk;
  if (!same) {
    if (!readSide(end) || !belowDecided(end, limits, t, gradient, noiseLimit)) return null;
    endRisk = anyAboveWithin(level, finding / 2) ? -1 : overflowOf(end, limits);
  }
  const worst = Math.max(startRisk, endRisk);
  if (!(worst > finding)) {
    // no overflow finding: the headroom's, unless both sides keep the headroom asked for (the end's fields are read)
    if (!headroomDecided(end, limits, t)) return null;
    if (!same && !(readSide(start) && headroomDecided(start, limits, t))) return null;
    return noFindings();
  }
  // a tie is told apart by the headroom (worseOf): judged from the numbers
  if (startRisk === endRisk && !same) return null;
  const severity: Exclude<Verdict, "fits"> = worst > t.overflowFails ? "fails" : "at-risk";
  const at = endRisk > startRisk ? "end" : "start";
  return overflowFinding(tensor.id, limits, severity, worst, severity === "fails" ? t.overflowFails : atRisk, at);
}

// the overflow probability of one side as settledRisk (src/risk/tensor.ts) gives it: the same calls, so the same value
function overflowOf(profile: MagnitudeProfile, limits: RangeLimits): number {
  if (sideCount === 0) return 0;
  const settled = settledAnyAbove(profile, limits.overflowLevel, nonzeroElements(profile));
  return settled >= 0 ? settled : probabilityAnyAbove(profile, limits.overflowLevel);
}
