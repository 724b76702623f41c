/**
 * Plain data types of the risk module: a format's range as the risk numbers see it, findings, verdicts and
 * the thresholds that turn numbers into verdicts.
 */
import type { FormatName } from "../formats/names.js";
import type { HazardKind, MagnitudeProfile } from "../magnitude/types.js";

/** A format's range under the plan's conversion options (see `rangeLimits`). */
export interface RangeLimits {
  format: FormatName;
  maxFinite: number;
  /** magnitudes at or above this overflow (to infinity or NaN), or are clipped when the conversion saturates */
  overflowLevel: number;
  /** whether the conversion saturates instead of producing infinity or NaN */
  saturates: boolean;
  /** magnitudes at or below this round to zero */
  flushBound: number;
  minNormal: number;
  /** the smallest nonzero magnitude the format keeps: the smallest subnormal, or the smallest normal when subnormals flush */
  smallest: number;
  /** unit roundoff 2^-p: the largest relative error of one rounding in the normal range */
  unitRoundoff: number;
}

/** The judgement of one format, one tensor, one operation or a whole check. Ordered: fits < at risk < fails. */
export type Verdict = "fits" | "at-risk" | "fails";

/** Every kind of finding the risk module reports; the catalogue in catalogue.ts describes each. */
export const FINDING_KINDS = [
  "overflow",
  "saturation",
  "little-headroom",
  "gradient-energy-flushed",
  "flushed-values",
  "probability-mass-flushed",
  "subnormal-values",
  "softmax-exp-overflow",
  "softmax-sum-overflow",
  "norm-sum-overflow",
  "accumulation-error",
  "accumulation-overflow",
  "loss-value-overflow",
  "gradient-sum-overflow",
  "gradient-sum-flush",
  "optimizer-epsilon-flushed",
  "second-moment-flushed",
] as const;
export type FindingKind = (typeof FINDING_KINDS)[number];

/** One threshold crossed by one tensor or operation in one format. */
export interface Finding {
  kind: FindingKind;
  severity: Exclude<Verdict, "fits">;
  format: FormatName;
  /** the tensor id, or the layer of the operation */
  subject: string;
  /** whether the subject is a stored tensor or an operation site */
  source: "tensor" | "hazard";
  /** the number judged (a probability, a share, binades, a relative error) */
  value: number;
  /** the threshold it crossed */
  threshold: number;
  /** when it is worse: at the start of training or at the end of the horizon (tensors only) */
  at?: "start" | "end";
  /** one sentence in plain words */
  sentence: string;
}

/**
 * The thresholds that turn risk numbers into verdicts. Defaults in DEFAULT_THRESHOLDS; documented in README.md
 * (section "Verdicts").
 */
export interface RiskThresholds {
  /** overflow risk per step (probability that at least one element overflows) above which a tensor or operation is at risk */
  overflowAtRisk: number;
  /** ... and above which it fails */
  overflowFails: number;
  /** share of a gradient's squared norm flushed to zero above which it is at risk */
  energyAtRisk: number;
  /** ... and above which it fails */
  energyFails: number;
  /** share of a tensor's nonzero elements flushed to zero above which it is at risk */
  flushedAtRisk: number;
  /** ... and above which it fails */
  flushedFails: number;
  /**
   * rounding noise of a tensor's subnormal elements, as a share of its squared norm, above which it is at risk (or above
   * the format's own rounding noise share, when that is larger); by default bfloat16's rounding noise share
   */
  subnormalNoiseAtRisk: number;
  /** headroom in binades below which a tensor is at risk even when its overflow risk is small */
  headroomAtRisk: number;
  /** relative rounding error of an accumulation (√n·u) above which it is at risk */
  accumulationAtRisk: number;
  /** ... and above which it fails */
  accumulationFails: number;
  /** the predicted max is the level the largest element exceeds with this probability per step */
  maxQuantile: number;
  /** the footroom is measured from this quantile of the nonzero magnitudes */
  lowQuantile: number;
}

/** The judgement of one operation site in one format. */
export interface HazardEvaluation {
  format: FormatName;
  /** which plan entry holds the operation's result */
  heldIn: "activations" | "gradients" | "gradientSums" | "optimizerStates" | "accumulate";
  /** what `value` measures */
  measure: "overflow-risk" | "relative-error" | "flushed-energy" | "flushed-share" | "zero-second-moments";
  /** the number judged */
  value: number;
  /** the critical input level, in the input's units (e.g. ln 65520 for exp in binary16, √(max/N) for a norm) */
  criticalLevel: number | null;
  verdict: Verdict;
  /** whether the worse judgement is at the start of training or at the end of the horizon */
  at: "start" | "end";
  /** one sentence in plain words */
  sentence: string;
  /**
   * the layer this evaluation is about, when it is not the check's `layer`: a network-wide count (Adam's epsilon)
   * names the tensor contributing most, which can differ from format to format
   */
  layer?: string;
}

/** An operation site with its judgement in each relevant format. */
export interface HazardCheck {
  kind: HazardKind;
  layer: string;
  detail: string;
  guarded: boolean;
  terms: number;
  constant?: number;
  input: MagnitudeProfile;
  /** where the site came from: the magnitude engine, or the spec's training setup */
  origin: "prediction" | "training setup";
  evaluations: HazardEvaluation[];
  findings: Finding[];
  /** an accumulation of the backward pass, judged at the loss scale as gradients are (HazardSite.gradient) */
  gradient?: boolean;
}
