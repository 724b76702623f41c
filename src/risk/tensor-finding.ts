/**
 * The findings array of the tensor being judged, and the overflow finding, the commonest: shared by the judgement from
 * the numbers (src/risk/tensor.ts) and the one decided by bounds (src/risk/decide.ts), so both word it alike.
 */
import type { Finding, RangeLimits, Verdict } from "./types.js";
import { plainNumber, when } from "./words.js";

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
    // the pieces around the value are the same for every tensor of a check: made once, the sentence joins four
    sentence: subject + overflowMiddle(limits) + plainNumber(value) + overflowTail(at, threshold),
  };
}

// " overflows binary16 with probability " for the last range asked (a check's tensor findings come format by format)
function overflowMiddle(limits: RangeLimits): string {
  if (limits !== middleLimits) {
    middleLimits = limits;
    middle = `${limits.saturates ? " saturates " : " overflows "}${limits.format} with probability `;
  }
  return middle;
}
let middleLimits: RangeLimits | null = null;
let middle = "";

// " per step at the start of training (limit 1e-6)." per moment, for the last two limits asked (at risk and failing)
function overflowTail(at: "start" | "end", threshold: number): string {
  let slot = threshold === TAIL_LIMITS[0] ? 0 : threshold === TAIL_LIMITS[1] ? 1 : -1;
  if (slot < 0) {
    slot = tailNext;
    tailNext = 1 - slot;
    TAIL_LIMITS[slot] = threshold;
    const limit = ` (limit ${plainNumber(threshold)}).`;
    TAILS[2 * slot] = ` per step ${when("start")}${limit}`;
    TAILS[2 * slot + 1] = ` per step ${when("end")}${limit}`;
  }
  return TAILS[2 * slot + (at === "start" ? 0 : 1)] as string;
}
const TAIL_LIMITS = new Float64Array(2).fill(Number.NaN);
const TAILS = ["", "", "", ""];
let tailNext = 0;

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
