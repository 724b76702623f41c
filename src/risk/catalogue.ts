/**
 * The catalogue of finding kinds and the default thresholds. Every renderer (terminal, JSON, Markdown, HTML)
 * reads titles and descriptions from here.
 */
import { FORMATS } from "../formats/index.js";
import { normalRoundingNoise } from "./subnormal-noise.js";
import type { FindingKind, RiskThresholds } from "./types.js";

/** How a finding kind is named and explained to a user. */
export interface FindingInfo {
  /** a short title, e.g. "Overflow" */
  title: string;
  /** a phrase that completes "N tensors …", e.g. "overflow" */
  short: string;
  /** what it means, what the default thresholds are, and what usually helps */
  description: string;
}

/**
 * The default thresholds. Probabilities are per training step; a per-step overflow risk of 1e-2 means an
 * overflow about every hundred steps, 1e-6 about once in a million steps.
 */
export const DEFAULT_THRESHOLDS: Readonly<RiskThresholds> = Object.freeze({
  overflowAtRisk: 1e-6,
  overflowFails: 1e-2,
  energyAtRisk: 1e-4,
  energyFails: 1e-2,
  flushedAtRisk: 1e-2,
  flushedFails: 1e-1,
  // bfloat16's own rounding noise (about 2.75e-6): what an 8-bit significand costs, which trains as binary32 does
  // (Kalamkar et al. 2019)
  subnormalNoiseAtRisk: normalRoundingNoise(FORMATS.bfloat16.precision),
  headroomAtRisk: 1,
  accumulationAtRisk: 1e-2,
  accumulationFails: 1e-1,
  maxQuantile: 1e-3,
  lowQuantile: 1e-2,
});

/** Every finding kind, described. */
export const FINDING_INFO = {
  overflow: {
    title: "Overflow",
    short: "overflow",
    description:
      "At least one element of the tensor reaches the format's overflow threshold in a step and becomes " +
      "infinity (or NaN), which spreads through the next operations. At risk above a per-step probability " +
      "of 1e-6, fails above 1e-2. Usual remedies: a smaller loss scale (gradients), a format with more " +
      "range (bfloat16), smaller norm gains or embedding multipliers (activations).",
  },
  saturation: {
    title: "Saturation",
    short: "saturate",
    description:
      "At least one element exceeds the largest finite value of a saturating 8-bit conversion and is " +
      "clipped to it. Clipping does not produce infinities, but it distorts the largest values. At risk " +
      "above a per-step probability of 1e-6 (1e-3 under per-tensor scale factors, whose rule clips about once " +
      "per 1,000 steps), fails above 1e-2. Usual remedy: per-tensor scaling, or a margin in the scale factor.",
  },
  "little-headroom": {
    title: "Little headroom",
    short: "have less than a binade of headroom",
    description:
      "The predicted max (the level exceeded in one step in a thousand) is within a factor of two of the " +
      "largest finite value, although the predicted overflow risk is small. Growth during training that " +
      "the prediction misses would overflow. At risk below 1 binade.",
  },
  "gradient-energy-flushed": {
    title: "Gradient energy flushed",
    short: "lose gradient energy to zero",
    description:
      "The gradient elements that round to zero carry this share of the gradient's squared norm, so the " +
      "update loses that part of its signal. At risk above 1e-4, fails above 1e-2 (1%). Usual remedy: a " +
      "larger loss scale, or bfloat16 for gradients.",
  },
  "flushed-values": {
    title: "Values flushed to zero",
    short: "flush values to zero",
    description:
      "This share of the tensor's nonzero elements rounds to zero in the format. At risk above 1%, fails " +
      "above 10%. Usual remedy: a loss scale (gradients), a wider format for the tensor, or a binary32 " +
      "master copy (weights and updates).",
  },
  "probability-mass-flushed": {
    title: "Probability mass flushed",
    short: "flush probability mass to zero",
    description:
      "Softmax probabilities weigh the values they average, so what their flushed elements take from a row is their " +
      "share of its probability mass (the first moment), not their count: the row's weighted average loses at most " +
      "that share. At risk above 1%, fails above 10% (the amplitudes √1e-4 and √1e-2 of the gradient energy limits). " +
      "Usual remedy: keep the probabilities in a format with more range (bfloat16), or fold the softmax into the " +
      "weighted sum.",
  },
  "subnormal-values": {
    title: "Subnormal rounding noise",
    short: "lose precision to subnormals",
    description:
      "Elements in the subnormal range keep fewer significant bits: each is rounded to a multiple of the smallest " +
      "subnormal, an error of about its square over 12 in squared value. Judged by the noise that adds as a share of " +
      "the tensor's squared norm, not by the count of subnormal elements: at risk above bfloat16's own rounding noise " +
      "(2.75e-6; an 8-bit significand trains as binary32 does, Kalamkar et al. 2019), or above the format's own where " +
      "that is larger (7.0e-4 for e4m3, 2.8e-3 for e5m2). Softmax probabilities are judged the same way: the errors " +
      "have mean zero, so they move a row's weighted average by that share of its own variance. Usual remedy: a larger " +
      "loss scale (gradients; the finding names the smallest that would do), a larger scale of the tensor, per-tensor " +
      "or per-block scale factors (8-bit formats), or a format with a wider normal range.",
  },
  "softmax-exp-overflow": {
    title: "Softmax exp overflow",
    short: "overflow exp in a softmax",
    description:
      "A softmax that does not subtract the row maximum computes exp of the raw logits; exp(x) overflows " +
      "binary16 from x = ln 65520 = 11.09 (bfloat16 and binary32 from 88.72, e4m3 past ln 448 = 6.10). " +
      "Judged by the probability that any logit of a step passes that level. Remedy: subtract the row maximum.",
  },
  "softmax-sum-overflow": {
    title: "Softmax sum overflow",
    short: "overflow a softmax denominator",
    description:
      "With the row maximum subtracted each exp is at most 1, but the denominator sums one term per key; it " +
      "can overflow when a row has more keys than the largest finite value of the format it is summed in: the " +
      "accumulate format, or the activation format where an implementation does not widen (then at most at risk).",
  },
  "norm-sum-overflow": {
    title: "Norm statistics overflow",
    short: "overflow a sum of squares in a norm",
    description:
      "A layer-norm, rms-norm or batch-norm sums the squares of N features; the sum overflows once the rms " +
      "of the input exceeds √(max/N) (4.0 for N = 4096 in binary16). Fails when the sum is held in the " +
      "plan's accumulate format; at risk when only the activation format would overflow (an implementation " +
      "that does not widen the statistics). In an 8-bit format with scale factors the sums take their own scale, as the " +
      "plan's other 8-bit tensors do. Remedy: compute norm statistics in binary32.",
  },
  "accumulation-error": {
    title: "Accumulation error",
    short: "accumulate long sums in a narrow format",
    description:
      "A dot product or reduction of n terms accumulated in a format with unit roundoff u has a relative " +
      "rounding error of about √n·u for terms of random sign (n·u in the worst case). So do gradients summed across " +
      "workers and accumulation steps (n = workers × steps), held in the gradient format. At risk above 1e-2, " +
      "fails above 1e-1. Remedy: accumulate in binary32, or, for a gradient sum, sum fewer contributions (fewer " +
      "accumulation steps).",
  },
  "accumulation-overflow": {
    title: "Accumulation overflow",
    short: "overflow a partial sum",
    description:
      "The partial sums of a dot product or reduction reach the accumulate format's overflow threshold. " +
      "Judged by the per-step probability, as for tensors.",
  },
  "loss-value-overflow": {
    title: "Loss value overflow",
    short: "overflow the loss value",
    description:
      "The loss value, multiplied by the loss scale and summed over the batch under sum reduction, reaches " +
      "the overflow threshold of the format it is held in. Remedy: mean reduction, a smaller loss scale, or " +
      "computing the loss in binary32.",
  },
  "gradient-sum-overflow": {
    title: "Gradient sum overflow",
    short: "overflow the gradient sum across workers",
    description:
      "Gradients summed across data-parallel workers and accumulation steps grow with the number of terms " +
      "(coherent parts add up linearly) and can overflow the gradient format. Remedy: divide before summing, " +
      "or sum in binary32.",
  },
  "gradient-sum-flush": {
    title: "Gradient division flushes",
    short: "flush gradients divided by the worker count",
    description:
      "Dividing each worker's gradient by the worker count before the sum moves small gradients below the " +
      "flush bound. Judged by the flushed gradient energy, as for gradient tensors. In an 8-bit format with scale factors " +
      "the scale moves with the division (exactly for a power of two), so little or nothing more flushes.",
  },
  "optimizer-epsilon-flushed": {
    title: "Optimizer epsilon flushed",
    short: "round the optimizer epsilon to zero",
    description:
      "Adam's epsilon rounds to zero in the optimizer-state format (1e-8 is below binary16's flush bound " +
      "2^-25); where a second moment is zero (a zero or flushed gradient) the update divides by zero. At risk " +
      "always; fails when at least one zero second moment is expected per step. Remedy: keep optimizer " +
      "states in binary32, or raise epsilon.",
  },
  "second-moment-flushed": {
    title: "Second moment flushed",
    short: "flush Adam's second moment",
    description:
      "Adam stores (1 − β2)·g², which flushes to zero in the optimizer-state format for small gradients: below " +
      "about 5.5e-3 in binary16 with β2 = 0.999. Those elements then take steps of m/ε instead of m/√v. At risk " +
      "above 1% of the elements, fails above 10%. Remedy: keep optimizer states in binary32.",
  },
} as const satisfies Record<FindingKind, FindingInfo>;
