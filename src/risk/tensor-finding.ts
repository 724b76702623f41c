/**
 * The findings array of the tensor being judged, the overflow finding, the commonest, and the subnormal noise's: shared by
 * the judgement from the numbers (src/risk/tensor.ts) and the one decided by bounds (src/risk/decide.ts), so both word
 * them alike.
 */
import { FORMATS } from "../formats/index.js";
import type { MagnitudeProfile, TensorPrediction, TensorRole } from "../magnitude/types.js";
import { DEFAULT_THRESHOLDS } from "./catalogue.js";
import { riskProfile } from "./profile.js";
import { noiseAtMost, smallestStep } from "./subnormal-noise.js";
import type { TensorRiskOptions } from "./tensor.js";
import type { Finding, RangeLimits, RiskThresholds, Verdict } from "./types.js";
import { binades, percent, plainNumber, scaleWords, when, Words } from "./words.js";

/**
 * The findings of the tensor being judged (its first entries), before they are copied out: one allocation site for every
 * tensor's findings, judged or not, so the arrays share one elements kind.
 */
export const FOUND: Finding[] = [];

/** A tensor's overflow (or saturation) finding, as tensorFindings words it. */
export function overflowRiskFinding(
  subject: string,
  limits: RangeLimits,
  severity: Exclude<Verdict, "fits">,
  value: number,
  threshold: number,
  at: "start" | "end",
): Finding {
  const format = limits.format;
  return {
    format,
    subject,
    source: "tensor",
    kind: limits.saturates ? "saturation" : "overflow",
    severity,
    value,
    threshold,
    at,
    sentence: subject + afterSubject(limits, severity, value, threshold, at),
  };
}

// The words after the subject (" overflows binary16 with probability 1 per step at the end of the horizon (limit
// 0.01)."), kept per grade and moment (Words): a check's overflow findings alternate between the at-risk and the failing
// limit and between the ends of the horizon, and most of them in one format report the same probability (1), so their
// sentences are the subject and one string made once. Keyed by the probability as written: the probabilities of
// tensors that fail are doubles near 1, most of them different, which read the same
const AFTER_SUBJECT = [new Words(), new Words(), new Words(), new Words()];

function afterSubject(limits: RangeLimits, severity: Exclude<Verdict, "fits">, value: number, threshold: number, at: "start" | "end"): string {
  const slot = (severity === "fails" ? 2 : 0) + (at === "start" ? 0 : 1);
  const words = AFTER_SUBJECT[slot] as Words;
  const format = limits.format;
  const verb = limits.saturates ? " saturates " : " overflows ";
  const probability = plainNumber(value);
  if (!words.holds(format, verb, probability, at === "start" ? 0 : 1, threshold, 0)) {
    // most probabilities written are met once (a tensor near its limit): the words around them are kept instead
    const head = PROBABILITY_HEAD;
    if (!head.holds(format, verb, "", 0, 0, 0)) head.keep(format, verb, "", 0, 0, 0, `${verb}${format} with probability `);
    const before = head.text;
    const foot = PROBABILITY_FOOT[slot] as Words;
    if (!foot.holds("", "", "", threshold, 0, 0)) foot.keep("", "", "", threshold, 0, 0, ` per step ${when(at)} (limit ${plainNumber(threshold)}).`);
    words.keepPieces(format, verb, probability, at === "start" ? 0 : 1, threshold, 0, before + probability + foot.text);
  }
  return words.text;
}
// the words before a probability (a verb and a format) and after it (the moment and the limit, per grade and moment)
const PROBABILITY_HEAD = new Words();
const PROBABILITY_FOOT = [new Words(), new Words(), new Words(), new Words()];

/**
 * The findings of a decided risk with none, shared until the risk's object is made (src/risk/tensor-check.ts gives each
 * risk made its own array then, by {@link noFindings}): never handed out, never written.
 */
export const NO_FINDINGS: Finding[] = [];

/** A tensor's findings with none in them, from the one place every tensor's findings array is made. */
export function noFindings(): Finding[] {
  return FOUND.slice(0, 0);
}

/** A tensor's findings holding only its overflow (or saturation) finding, worded as tensorFormatRisk words it. */
export function overflowFinding(
  subject: string,
  limits: RangeLimits,
  severity: Exclude<Verdict, "fits">,
  value: number,
  threshold: number,
  at: "start" | "end",
): Finding[] {
  FOUND[0] = overflowRiskFinding(subject, limits, severity, value, threshold, at);
  return FOUND.slice(0, 1);
}

/**
 * A tensor's subnormal-noise finding, as tensorFindings words it: `value` its worst noise, `limit` the format's
 * (subnormalNoiseLimit), `fraction` the share of nonzero elements subnormal at `at`, `remedy` the sentence's end
 * (subnormalRemedy); without words (a count) the sentence is empty.
 */
export function subnormalFinding(
  subject: string,
  limits: RangeLimits,
  t: RiskThresholds,
  limit: number,
  value: number,
  at: "start" | "end",
  fraction: number,
  remedy: string,
  words: boolean,
): Finding {
  const format = limits.format;
  return {
    format,
    subject,
    source: "tensor",
    kind: "subnormal-values",
    severity: "at-risk",
    value,
    threshold: limit,
    at,
    sentence: words
      ? [
          "Rounding the subnormal elements of ", subject, " in ", format, " ", when(at), " adds noise of ", plainNumber(value),
          " of its squared norm (limit ", plainNumber(limit), limitWords(limits, limit, t.subnormalNoiseAtRisk), "; ",
          percent(fraction), " of its nonzero elements are subnormal)", remedy, ".",
        ].join("")
      : "",
  };
}

// what the limit of the subnormal noise is, in words: the format's own rounding noise when that is the larger, the
// default's bfloat16 (nothing for a limit the caller set)
function limitWords(limits: RangeLimits, limit: number, atRisk: number): string {
  if (limit > atRisk) return `, ${limits.format}'s own rounding noise`;
  return atRisk === DEFAULT_THRESHOLDS.subnormalNoiseAtRisk ? ", bfloat16's rounding noise" : "";
}

/**
 * A gradient's subnormal remedy (src/risk/tensor.ts subnormalRemedy): the smallest power-of-two loss scale above the
 * present one (`factor`) at which both profiles (`start`, `end`: after that factor; `same` when one distribution) are
 * within the limit, searched within `headroom` (the worse side's) less the headroom the check asks for.
 */
export function liftRemedy(
  start: MagnitudeProfile,
  end: MagnitudeProfile,
  same: boolean,
  factor: number,
  headroom: number,
  limits: RangeLimits,
  limit: number,
  t: Pick<RiskThresholds, "headroomAtRisk">,
): string {
  const most = Math.floor(headroom - t.headroomAtRisk);
  // each step asks whether the noise is within the limit: a bound settles most without the noise itself (noiseAtMost)
  const lift = smallestStep(most, (j) => {
    const step = 2 ** j;
    if (!noiseAtMost(riskProfile(start, step), limits, limit)) return false;
    return same || noiseAtMost(riskProfile(end, step), limits, limit);
  });
  if (lift === null) return noLiftRemedy(t);
  return `; a loss scale of ${scaleWords(factor * 2 ** lift)} would bring it within the limit`;
}

/**
 * The subnormal remedy (src/risk/tensor.ts subnormalRemedy) where it needs no search: a probability row, scale factors,
 * a tensor that is not a gradient; null for a gradient, whose remedy is a loss scale searched within its headroom.
 */
export function plainRemedy(
  tensor: Pick<TensorPrediction, "role">,
  limits: RangeLimits,
  options: Pick<TensorRiskOptions, "perTensorScaling" | "blockScaling">,
  row: boolean,
): string | null {
  if (row) return "; keeping the probabilities in a format with more range (bfloat16) would keep them normal";
  if (options.perTensorScaling) {
    return options.blockScaling
      ? "; its elements span more binades than the format's normal range holds under one scale per block: a wider format would keep them"
      : `; its elements span more binades than ${limits.format}'s normal range below the per-tensor scale: per-block scale factors or a wider format would keep them`;
  }
  if (!isGradientRole(tensor.role)) {
    return FORMATS[limits.format].bits === 8
      ? "; per-tensor scale factors (scaling: tensor) or a format with a wider normal range would keep them normal"
      : "; a larger scale of this tensor (its initialisation, a norm's gain) or a format with a wider normal range (bfloat16) would keep them normal";
  }
  return null;
}

// membership in GRADIENT_ROLES and LOSS_SCALED_ROLES (src/risk/tensor.ts; the same two roles) by comparison: `includes`
// is a loop that the per-tensor functions would carry into every TurboFan compile of them
export function isGradientRole(role: TensorRole): boolean {
  return role === "activation-gradient" || role === "weight-gradient";
}

/** The subnormal remedy of a gradient where no loss scale keeping the headroom asked for lifts its subnormal elements. */
export function noLiftRemedy(t: Pick<RiskThresholds, "headroomAtRisk">): string {
  return `; no loss scale that leaves it ${binades(t.headroomAtRisk)} of headroom would lift them, so a format with a wider normal range (bfloat16) would`;
}
