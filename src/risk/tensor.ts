/**
 * Risk of one predicted tensor in one format: the profile numbers at the start and at the end of the horizon,
 * the worse of the two, and the findings they raise against the thresholds.
 */
import type { FormatName } from "../formats/names.js";
import type { MagnitudeProfile, TensorPrediction, TensorRole } from "../magnitude/types.js";
import {
  energyBelow,
  fractionBelow,
  probabilityAnyAbove,
  profileRisk,
  profileStatistics,
  riskProfile,
  sameDistribution,
  scaleProfile,
  type ProfileRisk,
  type ProfileStatistics,
} from "./profile.js";
import type { BlockScaledRisk } from "./blocks.js";
import { overflowRiskOf, settledBelow, settledEnergyBelow, UNSETTLED } from "./settle.js";
import { isEmpty } from "./laws.js";
import { subnormalNoise, subnormalNoiseLimit } from "./subnormal-noise.js";
import type { Finding, RangeLimits, RiskThresholds, Verdict } from "./types.js";
import { worseVerdict } from "./verdict-order.js";
import { binades, percent, plainNumber, sentenceStart, when } from "./words.js";
import { FOUND, isGradientRole, liftRemedy, overflowRiskFinding, plainRemedy, subnormalFinding } from "./tensor-finding.js";
import { normalCdf } from "./_math.js";

/** Roles whose flushed elements are judged by the share of squared norm they carry. */
export const GRADIENT_ROLES: readonly TensorRole[] = ["activation-gradient", "weight-gradient"];

/**
 * The gradient roles the loss scale multiplies: the backward pass runs on the scaled loss (Micikevicius et al. 2018
 * §3.2). The loss itself is held scaled too (see {@link lossScaleFactor}), but a scale's pick weighs it through the
 * loss-value hazard, which judges the same value S·ΣL in the same format (and in the activation format): counting the
 * tensor as well would count that one value twice.
 */
export const LOSS_SCALED_ROLES: readonly TensorRole[] = ["activation-gradient", "weight-gradient"];

/** A profile's risk numbers with the rounding noise its subnormal elements add. */
export interface TensorProfileRisk extends ProfileRisk {
  /**
   * the expected rounding noise of the elements that round to a subnormal, as a share of the squared norm
   * (src/risk/subnormal-noise.ts); 0 when subnormals are flushed
   */
  subnormalNoise: number;
}

/** The worse of the start and end numbers, and when each is worse. */
export interface WorstRisk extends TensorProfileRisk {
  overflowAt: "start" | "end";
  flushAt: "start" | "end";
}

/** One tensor judged in one format. */
export interface TensorFormatRisk {
  format: FormatName;
  /** whether this format's verdict counts the tensor (the tensor is stored in it under the evaluated plan) */
  judged: boolean;
  /** log2 of the per-tensor scale factor applied before conversion (8-bit formats with scaling), else 0 */
  scaleLog2: { start: number; end: number };
  start: TensorProfileRisk;
  end: TensorProfileRisk;
  worst: WorstRisk;
  /** fits when `judged` is false */
  verdict: Verdict;
  findings: Finding[];
}

/** A tensor's format-independent statistics, with the loss scale applied where the role takes it. */
export interface TensorStatistics {
  /** the factor applied to the predicted profiles (the loss scale for gradient roles and the loss, else 1) */
  factor: number;
  start: ProfileStatistics;
  end: ProfileStatistics;
  /**
   * When the tensor is one part of a stored array (the loss gradient's right-class and other elements): the array's
   * predicted max at the start and the end, the larger of its parts' (a per-tensor scale is set from the whole array)
   */
  arrayMax?: { start: number; end: number };
}

/**
 * The factor the loss scale contributes to a tensor of this role. The loss is held as the scaled loss summed, S·ΣL,
 * in the accumulate format: the value backward starts from (Micikevicius et al. 2018 §3.2 scale the loss before
 * backward), the one the loss-value hazard (src/risk/hazards.ts) and the simulation's loss counts judge.
 */
export function lossScaleFactor(role: TensorRole, lossScale: number): number {
  return isGradientRole(role) || role === "loss" ? lossScale : 1;
}

/** Statistics of a tensor's start and end profiles after its loss-scale factor. */
export function tensorStatistics(
  tensor: TensorPrediction,
  lossScale: number,
  thresholds: Pick<RiskThresholds, "maxQuantile" | "lowQuantile">,
): TensorStatistics {
  return scaledTensor(tensor, lossScale, thresholds).statistics;
}

/**
 * A tensor's start and end profiles after its loss-scale factor, with their statistics: what every format's
 * judgement of the tensor starts from (scaled once, not once per format).
 */
export interface ScaledTensor {
  statistics: TensorStatistics;
  /** the profiles multiplied by `statistics.factor` */
  start: MagnitudeProfile;
  end: MagnitudeProfile;
  /** whether the end profile describes the same distribution as the start (its numbers are then the start's) */
  same: boolean;
}

/** {@link tensorStatistics}, keeping the scaled profiles for {@link scaledTensorRisk}. */
export function scaledTensor(
  tensor: TensorPrediction,
  lossScale: number,
  thresholds: Pick<RiskThresholds, "maxQuantile" | "lowQuantile">,
): ScaledTensor {
  const factor = lossScaleFactor(tensor.role, lossScale);
  // unscaled, the prediction's own profiles serve: the risk functions read only the law fields, and a copy per tensor
  // would be garbage for the collector
  const own = factor === 1;
  const startProfile = own ? tensor.start : riskProfile(tensor.start, factor);
  const startStatistics = profileStatistics(startProfile, thresholds);
  // many tensors end the horizon as they start (weights and activations without growth): compute once
  if (sameDistribution(tensor.start, tensor.end)) {
    return { statistics: { factor, start: startStatistics, end: startStatistics }, start: startProfile, end: startProfile, same: true };
  }
  const endProfile = own ? tensor.end : riskProfile(tensor.end, factor);
  const endStatistics = profileStatistics(endProfile, thresholds);
  return { statistics: { factor, start: startStatistics, end: endStatistics }, start: startProfile, end: endProfile, same: false };
}

/**
 * The per-tensor scale factor an 8-bit conversion with per-tensor scaling applies:
 * 2^⌊log2(max finite / amax)⌋ (SCIENCE.md §3.4, the common per-tensor rule; from memory, unconfirmed as to the
 * paper's wording). amax is the tensor's predicted max (the level exceeded once in `1/maxQuantile` steps), as a
 * scale set from a history of recent maxima would see it.
 */
export function perTensorScaleLog2(predictedMax: number, maxFinite: number): number {
  if (!(predictedMax > 0)) return 0;
  return Math.floor(Math.log2(maxFinite / predictedMax));
}

/**
 * The per-step overflow risk above which a stored tensor is at risk. A per-tensor scale set from the level passed once
 * in 1/maxQuantile steps has a saturating conversion clip the elements above it about that often: the scale rule at
 * work (SCIENCE.md §3.4, "overflow a clipping event"), not a finding until saturation comes more often than the rule
 * allows; overflow to infinity or NaN is judged as always.
 */
export function overflowAtRiskThreshold(t: Pick<RiskThresholds, "overflowAtRisk" | "maxQuantile">, scaledAndSaturating: boolean): number {
  return scaledAndSaturating ? Math.max(t.overflowAtRisk, t.maxQuantile) : t.overflowAtRisk;
}

/** Options of {@link tensorFormatRisk}. */
export interface TensorRiskOptions {
  /** whether this format's verdict counts the tensor */
  judged: boolean;
  /** whether the conversion to this format applies a per-tensor scale factor (8-bit formats with scaling) */
  perTensorScaling: boolean;
  /** per-block scale factors (OCP Microscaling, blocks of 32): the block-scaled conversion's shares, replacing the per-tensor ones */
  blockScaling?: BlockScaledRisk | null;
  thresholds: RiskThresholds;
  /**
   * the findings are only counted (the loss-scale pick weighs scales by their findings' kinds and severities): their
   * sentences are left empty and the subnormal remedy is not searched
   */
  countOnly?: boolean;
}

/** Judge a tensor (statistics from {@link tensorStatistics}) against one format's range. */
export function tensorFormatRisk(
  tensor: TensorPrediction,
  limits: RangeLimits,
  statistics: TensorStatistics,
  options: TensorRiskOptions,
): TensorFormatRisk {
  const start = riskProfile(tensor.start, statistics.factor);
  const same = sameDistribution(tensor.start, tensor.end) && statistics.start === statistics.end;
  const end = same ? start : riskProfile(tensor.end, statistics.factor);
  return scaledTensorRisk(tensor, { statistics, start, end, same }, limits, options);
}

/** The numbers of a tensor in one format: those of {@link TensorFormatRisk} that its findings are judged from. */
export interface TensorRiskNumbers {
  scaleLog2: { start: number; end: number };
  start: TensorProfileRisk;
  end: TensorProfileRisk;
  worst: WorstRisk;
}

/**
 * The numbers of {@link scaledTensorRisk}, without its findings (what a tensor's risk read later works out).
 * `startOverflow` and `endOverflow`: each side's overflow probability when already worked out (by overflowRiskOf,
 * src/risk/settle.ts, as src/risk/decide.ts does for a finding), else −1; without per-tensor scale factors only.
 */
export function scaledTensorNumbers(scaled: ScaledTensor, limits: RangeLimits, options: TensorRiskOptions, startOverflow = -1, endOverflow = -1): TensorRiskNumbers {
  const { statistics } = scaled;
  const start = evaluate(scaled.start, statistics.start, statistics.arrayMax?.start ?? statistics.start.max, limits, options, startOverflow);
  const startScaleLog2 = evaluatedScaleLog2;
  const end = scaled.same && statistics.arrayMax?.start === statistics.arrayMax?.end ? start : evaluate(scaled.end, statistics.end, statistics.arrayMax?.end ?? statistics.end.max, limits, options, endOverflow);
  const endScaleLog2 = evaluatedScaleLog2;
  return { scaleLog2: { start: startScaleLog2, end: endScaleLog2 }, start, end, worst: worseOf(start, end) };
}

/** {@link tensorFormatRisk} from a {@link scaledTensor}: the same numbers, without scaling the profiles again. */
export function scaledTensorRisk(tensor: TensorPrediction, scaled: ScaledTensor, limits: RangeLimits, options: TensorRiskOptions): TensorFormatRisk {
  const numbers = scaledTensorNumbers(scaled, limits, options);
  const { scaleLog2, start, end, worst } = numbers;
  let mass: FlushedMass | null = null;
  if (isProbabilityRow(tensor)) {
    const first = rowMass(scaled.start, scaleLog2.start, start, limits);
    mass = { start: first, end: scaled.same && scaleLog2.start === scaleLog2.end ? first : rowMass(scaled.end, scaleLog2.end, end, limits) };
  }
  const findings = tensorFindings(tensor, limits, worst, start, end, options, mass, scaled);
  return {
    format: limits.format,
    judged: options.judged,
    scaleLog2,
    start,
    end,
    worst,
    verdict: worstVerdict(findings),
    findings,
  };
}

/**
 * Whether a tensor is a row of softmax probabilities: an activation whose elements are log-normal and capped (the
 * engine's softmax and attention probabilities, bound 1). Its flushed elements are judged by the probability mass they
 * carry ({@link rowMass}), not by their count.
 */
export function isProbabilityRow(tensor: Pick<TensorPrediction, "role" | "start">): boolean {
  const p = tensor.start;
  return tensor.role === "activation" && p.shape === "log-normal" && p.bound !== undefined && p.bound > 0;
}

/** The share of each row's probability mass that rounds to zero, at the start and the end of the horizon. */
interface FlushedMass {
  start: number;
  end: number;
}

/**
 * The share of the first moment Σ|x| carried by the elements that round to zero, over draws: E[|x|·1{|x| ≤ t}]/E[|x|].
 * For a probability row (Σ p = 1) it is the probability mass a flush takes from the row, and so the largest relative
 * change of the weighted average Σ p_j·v_j. Log-normal elements, log2|x| ~ N(m, s²) with m set by the rms (ln|x| ~
 * N(μ, σ²), σ = s·ln 2, μ = ln rms − σ²): E[x·1{x ≤ t}]/E[x] = Φ((ln t − μ − σ²)/σ) = Φ(log2(t/rms)/s) (the partial
 * first moment of the log-normal, e.g. Johnson, Kotz & Balakrishnan 1994, Continuous Univariate Distributions 1,
 * §14.3; from memory); the scale's draws, log2 rms ~ N(log2 r̄, S²), add in quadrature: Φ(log2(t/r̄)/√(s² + S²)).
 * Other laws, and where scale factors act, are charged the share of flushed elements (at least the mass share for
 * any law: the flushed elements are the smallest).
 */
function rowMass(profile: MagnitudeProfile, scaleLog2: number, risk: ProfileRisk, limits: RangeLimits): number {
  // block scale factors move each block apart, which only the element share (risk.flushedFraction, the block rule's) tells
  return risk.flushedFraction === 0 ? 0 : Math.min(risk.flushedFraction, massBelow(profile, limits.flushBound * 2 ** -scaleLog2) ?? 1);
}

// Φ(log2(t/r̄)/√(s² + S²)), the share of the first moment at or below t (rowMass); null for a law without element
// spread (the element share is then charged)
function massBelow(profile: MagnitudeProfile, t: number): number | null {
  const s = profile.elementLog2Spread ?? 0;
  if (!(s > 0) || !(profile.rms > 0)) return null;
  const spread = Math.sqrt(s * s + profile.log2Spread * profile.log2Spread);
  return normalCdf(Math.log2(t / profile.rms) / spread);
}

/**
 * Whether a tensor is the cross-entropy's own logit gradient, its wrong-class elements p_j/B (the whole of the stored
 * array whose right-class elements are told apart: src/magnitude/predict.ts). Most of them are tiny by nature (p_j of
 * a confident softmax), so a count of those flushed says nothing of the step: dropping δ_j changes the update of the
 * logits' weights by δ_j·x, and the share of the gradient's squared norm flushed bounds that change (the
 * gradient-energy finding), as the probability mass bounds a forward softmax row's. No loss scale or remedy moves a
 * count of elements spread over 40 binades out of the range either.
 */
function isLossLogitGradient(tensor: Pick<TensorPrediction, "role" | "partOf">, scaled: Pick<ScaledTensor, "statistics">): boolean {
  return tensor.role === "activation-gradient" && tensor.partOf === undefined && scaled.statistics.arrayMax !== undefined;
}

// the per-tensor scale exponent of the last `evaluate` (a second return value, without an object per call)
let evaluatedScaleLog2 = 0;

// One profile (`scaled`: the predicted profile times the loss-scale factor) against one format; its scale
// exponent is left in evaluatedScaleLog2.
function evaluate(
  scaled: MagnitudeProfile,
  stats: ProfileStatistics,
  arrayMax: number,
  limits: RangeLimits,
  options: TensorRiskOptions,
  overflow: number,
): TensorProfileRisk {
  if (!options.perTensorScaling) {
    evaluatedScaleLog2 = 0;
    return settledRisk(scaled, limits, stats, overflow);
  }
  // the conversion scales the whole stored array by one factor, set from its largest elements
  const scaleLog2 = perTensorScaleLog2(arrayMax, limits.maxFinite);
  const factor = 2 ** scaleLog2;
  // scaling is linear, so the statistics scale with it
  const rescaled: ProfileStatistics = { rms: stats.rms * factor, max: stats.max * factor, low: stats.low * factor };
  const stored = riskProfile(scaled, factor);
  const risk = settledRisk(stored, limits, rescaled, -1);
  evaluatedScaleLog2 = scaleLog2;
  const block = options.blockScaling;
  // the subnormal noise under the per-tensor scale also where blocks take their own (as the subnormal share is): a block's
  // scale lifts its elements at least as far as the tensor's, so this bounds the block conversion's noise, but for
  // elements the tensor's scale would flush (which the flushed shares judge)
  if (!block) return risk;
  // each block of 32 follows its own maximum: flushing and clipping are those of the block rule (src/risk/blocks.ts).
  // The block conversion clamps a scaled element to ± the largest normal (OCP MX v1.0 §6 / Rouhani et al. 2023 Alg. 1,
  // from memory), so the top of a block's binade is clipped by at most 2^(emax+1)/max under either overflow mode; an
  // element leaves the element range only where its block's scale is clamped at E8M0's 2^127. Below, a scale clamped at
  // 2^-127 flushes every element under 2^-127 times the flush bound, whatever its block: the larger of the two causes
  // (a lower bound on their union, equal to it where either dominates)
  const floorLevel = block.smallestScale * limits.flushBound;
  return {
    flushedFraction: Math.max(Math.min(risk.flushedFraction, block.flushedFraction), fractionBelow(scaled, floorLevel)),
    subnormalFraction: risk.subnormalFraction,
    subnormalNoise: risk.subnormalFraction === 0 ? subnormalNoise(stored, limits) : risk.subnormalNoise,
    flushedEnergy: Math.max(Math.min(risk.flushedEnergy, block.flushedEnergy), energyBelow(scaled, floorLevel)),
    overflowRisk: probabilityAnyAbove(scaled, block.scaleClampLevel),
    headroom: risk.headroom,
    footroom: risk.footroom,
  };
}

// the profile's risk numbers with the subnormal noise of the profile as stored, the keys in the order of TensorProfileRisk;
// `settled`: a share of 0 may stand for one under SETTLED (src/risk/settle.ts), so the noise is taken all the same
function withNoise(risk: ProfileRisk, stored: MagnitudeProfile, limits: RangeLimits, settled: boolean): TensorProfileRisk {
  return {
    flushedFraction: risk.flushedFraction,
    subnormalFraction: risk.subnormalFraction,
    subnormalNoise: risk.subnormalFraction === 0 && !settled ? 0 : subnormalNoise(stored, limits),
    flushedEnergy: risk.flushedEnergy,
    overflowRisk: risk.overflowRisk,
    headroom: risk.headroom,
    footroom: risk.footroom,
  };
}

/**
 * {@link profileRisk} with its subnormal noise ({@link withNoise}), each share and probability settled by a cheap bound
 * where one decides it (src/risk/settle.ts: 0 under SETTLED, an overflow probability of 1 within SETTLED), so that only
 * the numbers near a format's limits are integrated. `overflow`: the overflow probability when already worked out by
 * overflowRiskOf (src/risk/settle.ts), else −1.
 */
function settledRisk(profile: MagnitudeProfile, limits: RangeLimits, stats: ProfileStatistics, overflow: number): TensorProfileRisk {
  if (isEmpty(profile)) return withNoise(profileRisk(profile, limits, stats), profile, limits, false);
  const flushBound = limits.flushBound;
  // the larger threshold first: a share settled there is settled at the flush bound too
  // (UNSETTLED, −1, where a bound does not settle the number)
  let belowNormal = flushBound >= limits.minNormal ? UNSETTLED : settledBelow(profile, limits.minNormal);
  let flushedFraction = belowNormal === 0 ? 0 : settledBelow(profile, flushBound);
  const settled = flushedFraction === 0;
  if (flushedFraction < 0) flushedFraction = fractionBelow(profile, flushBound);
  if (flushBound >= limits.minNormal) belowNormal = flushedFraction;
  else if (belowNormal < 0) belowNormal = fractionBelow(profile, limits.minNormal);
  // the flushed elements are the smallest, so their share of the squared norm is at most their share of the elements
  let flushedEnergy = settled ? 0 : settledEnergyBelow(profile, flushBound);
  if (flushedEnergy < 0) flushedEnergy = energyBelow(profile, flushBound);
  // an overflow probability already worked out (−1: not) is that call's value
  const overflowRisk = overflow >= 0 ? overflow : overflowRiskOf(profile, limits);
  const subnormalFraction = Math.max(0, belowNormal - flushedFraction);
  return {
    flushedFraction,
    subnormalFraction,
    subnormalNoise: subnormalFraction === 0 && !settled ? 0 : subnormalNoise(profile, limits),
    flushedEnergy,
    overflowRisk,
    headroom: Math.log2(limits.maxFinite / stats.max),
    footroom: Math.log2(stats.low / limits.smallest),
  };
}

function minOrNull(a: number | null, b: number | null): number | null {
  if (a === null) return b;
  if (b === null) return a;
  return Math.min(a, b);
}

/** Per quantity, the worse of the start and end numbers. */
export function worseOf(start: TensorProfileRisk, end: TensorProfileRisk): WorstRisk {
  return {
    flushedFraction: Math.max(start.flushedFraction, end.flushedFraction),
    subnormalFraction: Math.max(start.subnormalFraction, end.subnormalFraction),
    subnormalNoise: Math.max(start.subnormalNoise, end.subnormalNoise),
    flushedEnergy: Math.max(start.flushedEnergy, end.flushedEnergy),
    overflowRisk: Math.max(start.overflowRisk, end.overflowRisk),
    headroom: minOrNull(start.headroom, end.headroom),
    footroom: minOrNull(start.footroom, end.footroom),
    overflowAt:
      end.overflowRisk > start.overflowRisk ||
      (end.overflowRisk === start.overflowRisk && (end.headroom ?? Infinity) < (start.headroom ?? Infinity))
        ? "end"
        : "start",
    flushAt:
      end.flushedEnergy > start.flushedEnergy ||
      (end.flushedEnergy === start.flushedEnergy && end.flushedFraction > start.flushedFraction)
        ? "end"
        : "start",
  };
}

/** The worst severity among findings ("fits" when there are none). */
export function worstVerdict(findings: readonly { severity: Verdict }[]): Verdict {
  let verdict: Verdict = "fits";
  for (let i = 0; i < findings.length; i++) verdict = worseVerdict(verdict, (findings[i] as { severity: Verdict }).severity);
  return verdict;
}

function grade(value: number, atRisk: number, fails: number): Exclude<Verdict, "fits"> | null {
  if (value > fails) return "fails";
  if (value > atRisk) return "at-risk";
  return null;
}


// where a share is larger; on a tie, the moment of the worst flushed energy
function moreAt(start: number, end: number, tie: "start" | "end"): "start" | "end" {
  return end > start ? "end" : start > end ? "start" : tie;
}

function tensorFindings(
  tensor: TensorPrediction,
  limits: RangeLimits,
  worst: WorstRisk,
  start: TensorProfileRisk,
  end: TensorProfileRisk,
  options: TensorRiskOptions,
  mass: FlushedMass | null,
  scaled: ScaledTensor,
): Finding[] {
  // gathered in FOUND, then copied out at their exact length (one allocation site for every tensor's findings,
  // judged or not, so the arrays share one elements kind): the result keeps thousands of these arrays, and one
  // grown by push carries room for 17 elements
  if (!options.judged) return FOUND.slice(0, 0);
  const findings = FOUND;
  let found = 0;
  const t = options.thresholds;
  const format = limits.format;
  const subject = tensor.id;
  const words = options.countOnly !== true;
  // keys in one order for every finding (format, subject, source, kind, severity, value, threshold, at, sentence);
  // each sentence is joined into one flat string: the result keeps thousands of them, and a template literal's
  // chain of concatenations would keep every piece alive (and be copied by the collector) until it is printed; the
  // overflow's, the commonest, joins the subject and its value to two pieces every tensor shares (overflowRiskFinding)
  // a block whose scale is clamped at 2^127 is clipped without the per-tensor rule's bound: no leeway for it
  const overflowAtRisk = overflowAtRiskThreshold(t, options.perTensorScaling && !options.blockScaling && limits.saturates);
  const overflow = grade(worst.overflowRisk, overflowAtRisk, t.overflowFails);
  if (overflow !== null) {
    findings[found++] = overflowRiskFinding(subject, limits, overflow, worst.overflowRisk, overflow === "fails" ? t.overflowFails : overflowAtRisk, worst.overflowAt);
  } else if (!options.perTensorScaling && worst.headroom !== null && worst.headroom < t.headroomAtRisk) {
    findings[found++] = {
      format,
      subject,
      source: "tensor",
      kind: "little-headroom",
      severity: "at-risk",
      value: worst.headroom,
      threshold: t.headroomAtRisk,
      at: worst.overflowAt,
      sentence: words
        ? [
            subject, " has ", binades(worst.headroom), " of headroom in ", format, " ", when(worst.overflowAt),
            ", so a factor ", plainNumber(2 ** Math.max(0, worst.headroom)), " of growth the prediction misses would overflow it.",
          ].join("")
        : "",
    };
  }
  if (isGradientRole(tensor.role)) {
    const energy = grade(worst.flushedEnergy, t.energyAtRisk, t.energyFails);
    if (energy !== null) {
      const threshold = energy === "fails" ? t.energyFails : t.energyAtRisk;
      findings[found++] = {
        format,
        subject,
        source: "tensor",
        kind: "gradient-energy-flushed",
        severity: energy,
        value: worst.flushedEnergy,
        threshold,
        at: worst.flushAt,
        sentence: words
          ? [
              subject, " loses ", percent(worst.flushedEnergy), " of its squared norm to zero in ", format, " ",
              when(worst.flushAt), " (limit ", percent(threshold), ").",
            ].join("")
          : "",
      };
    }
  }
  // worst.flushAt follows the flushed energy; a share of elements is told at the moment that share is worst, which
  // can be the other end of the horizon (a spread widening at the end flushes more elements but less energy)
  // a probability row is judged by the mass its flushed and subnormal elements carry (rowMass), against
  // the same limits as a share of elements (its amplitude, as that share is); other tensors by their share of elements
  const row = mass !== null;
  const flushStart = row ? mass.start : start.flushedFraction;
  const flushEnd = row ? mass.end : end.flushedFraction;
  const flushValue = Math.max(flushStart, flushEnd);
  // the loss's own logit gradient is judged by the share of its squared norm flushed alone (isLossLogitGradient)
  const flushed = isLossLogitGradient(tensor, scaled) ? null : grade(flushValue, t.flushedAtRisk, t.flushedFails);
  if (flushed !== null) {
    const at = moreAt(flushStart, flushEnd, worst.flushAt);
    const threshold = flushed === "fails" ? t.flushedFails : t.flushedAtRisk;
    findings[found++] = {
      format,
      subject,
      source: "tensor",
      kind: row ? "probability-mass-flushed" : "flushed-values",
      severity: flushed,
      value: flushValue,
      threshold,
      at,
      sentence: !words
        ? ""
        : (row
            ? ["The elements of ", subject, " that round to zero in ", format, " ", when(at), " carry ", percent(flushValue), " of each row's probability mass"]
            : [sentenceStart(percent(flushValue)), " of the nonzero elements of ", subject, " round to zero in ", format, " ", when(at)]
          ).concat(" (limit ", percent(threshold), ").").join(""),
    };
  }
  // what the subnormal elements cost is the noise their rounding adds (src/risk/subnormal-noise.ts), not their count; a
  // probability row the same way: the errors have mean zero, so they move the row's weighted average Σ p_j·v_j by
  // Σ δp_j·v_j, whose variance against the average's own, Σ p_j²·E[v²], is this share of the row's squared norm
  const limit = subnormalNoiseLimit(limits, t.subnormalNoiseAtRisk);
  if (worst.subnormalNoise > limit) {
    const at = moreAt(start.subnormalNoise, end.subnormalNoise, worst.flushAt);
    findings[found++] = subnormalFinding(
      subject, limits, t, limit, worst.subnormalNoise, at, at === "start" ? start.subnormalFraction : end.subnormalFraction,
      words ? subnormalRemedy(tensor, limits, limit, worst, options, scaled, row) : "", words,
    );
  }
  return findings.slice(0, found);
}

/**
 * What would bring a tensor's subnormal noise within the limit, as the end of its finding's sentence. A gradient
 * without per-tensor scale factors: the smallest power-of-two loss scale above the present one at which both the start
 * and the end profile are within it, searched while the tensor keeps the headroom the check asks for (a scale that
 * does not exist there is said so); the search judges exactly what the check judges at that scale.
 */
function subnormalRemedy(
  tensor: TensorPrediction,
  limits: RangeLimits,
  limit: number,
  worst: WorstRisk,
  options: TensorRiskOptions,
  scaled: ScaledTensor,
  row: boolean,
): string {
  const plain = plainRemedy(tensor, limits, options, row);
  if (plain !== null) return plain;
  return liftRemedy(scaled.start, scaled.end, scaled.same, scaled.statistics.factor, worst.headroom ?? 0, limits, limit, options.thresholds);
}
