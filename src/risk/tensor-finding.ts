/**
 * The findings array of the tensor being judged, and the overflow finding, the commonest: shared by the judgement from
 * the numbers (src/risk/tensor.ts) and the one decided by bounds (src/risk/decide.ts), so both word it alike.
 */
import type { Finding, RangeLimits, Verdict } from "./types.js";
import { plainNumber, when, Words } from "./words.js";

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
  const words = AFTER_SUBJECT[(severity === "fails" ? 2 : 0) + (at === "start" ? 0 : 1)] as Words;
  const verb = limits.saturates ? " saturates " : " overflows ";
  const probability = plainNumber(value);
  if (!words.holds(limits.format, verb, probability, at === "start" ? 0 : 1, threshold, 0)) {
    words.keep(limits.format, verb, probability, at === "start" ? 0 : 1, threshold, 0, `${verb}${limits.format} with probability ${probability} per step ${when(at)} (limit ${plainNumber(threshold)}).`);
  }
  return words.text;
}

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
