/**
 * Operation hazards: places where an operation, not a stored tensor, overflows or loses values. Each site
 * is judged against the formats of the plan entries that hold its result.
 */
import type { FormatName } from "../formats/names.js";
import type { HazardSite } from "../magnitude/types.js";
import { anyOf, normalSf } from "./_math.js";
import { elementLaw, overDraws } from "./laws.js";
import { energyBelow, fractionBelow, nonzeroElements, probabilityAnyAbove, scaleProfile } from "./profile.js";
import { worstVerdict } from "./tensor.js";
import type { Finding, FindingKind, HazardCheck, HazardEvaluation, RangeLimits, RiskThresholds, Verdict } from "./types.js";
import { percent, plainNumber, scaleWords } from "./words.js";

/** The plan as the hazard checks see it: the range of each plan entry, and the training setup. */
export interface HazardContext {
  activations: RangeLimits;
  gradients: RangeLimits;
  optimizerStates: RangeLimits;
  accumulate: RangeLimits;
  /** the static loss scale multiplying the loss (1 when none) */
  lossScale: number;
  /** Adam's β2, which shrinks the stored second moment to (1 − β2)·g² on the first step */
  beta2: number;
  /** how per-worker gradients are combined */
  workerGradients: "sum" | "average";
  workers: number;
  thresholds: RiskThresholds;
}

type HeldIn = HazardEvaluation["heldIn"];

interface Draft {
  format: FormatName;
  heldIn: HeldIn;
  measure: HazardEvaluation["measure"];
  value: number;
  criticalLevel: number | null;
  kind: FindingKind;
  /** thresholds for the value; null: the evaluation has its own verdict */
  grading: { atRisk: number; fails: number } | null;
  /** the verdict when grading is null */
  verdict?: Verdict;
  /** the severity cannot exceed at-risk (e.g. only an implementation that does not widen would overflow) */
  capAtRisk?: boolean;
  sentence: (verdict: Verdict) => string;
}

/**
 * Judge one operation site against the plan.
 * @example evaluateHazard({ kind: "softmax-exp", guarded: false, input: logits, ... }, context).findings
 */
export function evaluateHazard(
  site: HazardSite,
  context: HazardContext,
  origin: HazardCheck["origin"] = "prediction",
): HazardCheck {
  const start = draftsFor(site, context).map((draft) => graded(draft, "start"));
  const end =
    site.end === undefined
      ? []
      : draftsFor({ ...site, input: site.end.input, ...(site.end.output ? { output: site.end.output } : {}) }, context).map(
          (draft) => graded(draft, "end"),
        );
  const evaluations: HazardEvaluation[] = [];
  const findings: Finding[] = [];
  start.forEach((first, index) => {
    const second = end[index];
    const worse = second !== undefined && isWorse(second, first) ? second : first;
    evaluations.push(worse.evaluation);
    if (worse.evaluation.verdict !== "fits") {
      findings.push({
        kind: worse.kind,
        severity: worse.evaluation.verdict as Finding["severity"],
        format: worse.evaluation.format,
        subject: site.layer,
        source: "hazard",
        value: worse.evaluation.value,
        threshold: worse.threshold,
        ...(site.end !== undefined ? { at: worse.evaluation.at } : {}),
        sentence: worse.evaluation.sentence,
      });
    }
  });
  const check: HazardCheck = {
    kind: site.kind,
    layer: site.layer,
    detail: site.detail,
    guarded: site.guarded,
    terms: site.terms,
    input: site.input,
    origin,
    evaluations,
    findings,
  };
  if (site.constant !== undefined) check.constant = site.constant;
  return check;
}

const VERDICT_RANK: Record<Verdict, number> = { fits: 0, "at-risk": 1, fails: 2 };

function isWorse(a: Graded, b: Graded): boolean {
  const rank = VERDICT_RANK[a.evaluation.verdict] - VERDICT_RANK[b.evaluation.verdict];
  return rank > 0 || (rank === 0 && a.evaluation.value > b.evaluation.value);
}

interface Graded {
  evaluation: HazardEvaluation;
  kind: FindingKind;
  threshold: number;
}

function graded(draft: Draft, at: "start" | "end"): Graded {
  let verdict: Verdict = draft.verdict ?? "fits";
  let threshold = 0;
  if (draft.grading !== null) {
    if (draft.value > draft.grading.fails) {
      verdict = "fails";
      threshold = draft.grading.fails;
    } else if (draft.value > draft.grading.atRisk) {
      verdict = "at-risk";
      threshold = draft.grading.atRisk;
    } else {
      verdict = "fits";
    }
  }
  if (draft.capAtRisk && verdict === "fails") verdict = "at-risk";
  return {
    evaluation: {
      format: draft.format,
      heldIn: draft.heldIn,
      measure: draft.measure,
      value: draft.value,
      criticalLevel: draft.criticalLevel,
      verdict,
      at,
      sentence: draft.sentence(verdict),
    },
    kind: draft.kind,
    threshold,
  };
}

/** The worst verdict of a hazard check. */
export function hazardVerdict(check: HazardCheck): Verdict {
  return worstVerdict(check.findings);
}

function draftsFor(site: HazardSite, context: HazardContext): Draft[] {
  switch (site.kind) {
    case "softmax-exp":
      return softmaxExp(site, context);
    case "norm-sum-of-squares":
      return normSumOfSquares(site, context);
    case "accumulation":
      return accumulation(site, context);
    case "loss-value":
      return lossValue(site, context);
    case "gradient-sum":
      return gradientSum(site, context);
    case "optimizer-constant":
      return optimizerConstant(site, context);
  }
}

function overflowGrading(t: RiskThresholds): { atRisk: number; fails: number } {
  return { atRisk: t.overflowAtRisk, fails: t.overflowFails };
}

function verdictWord(verdict: Verdict): string {
  return verdict === "fails" ? "fails" : verdict === "at-risk" ? "at risk" : "fits";
}

/** The formats a result may be held in: the activation format and the accumulate format, once each. */
function heldInBoth(context: HazardContext): { limits: RangeLimits; heldIn: HeldIn; onlyIfNotWidened: boolean }[] {
  const accumulate = { limits: context.accumulate, heldIn: "accumulate" as const, onlyIfNotWidened: false };
  if (context.activations.format === context.accumulate.format) return [accumulate];
  return [{ limits: context.activations, heldIn: "activations", onlyIfNotWidened: true }, accumulate];
}

// exp(x) overflows where x ≥ ln(overflow level): ln 65520 = 11.0901 in binary16 (SCIENCE.md §4). With the row
// maximum subtracted each term is at most 1 and only the denominator (one term per key) can overflow.
function softmaxExp(site: HazardSite, context: HazardContext): Draft[] {
  const limits = context.activations;
  if (site.guarded) {
    const value = site.terms >= limits.overflowLevel ? 1 : 0;
    return [
      {
        format: limits.format,
        heldIn: "activations",
        measure: "overflow-risk",
        value,
        criticalLevel: limits.overflowLevel,
        kind: "softmax-sum-overflow",
        grading: overflowGrading(context.thresholds),
        sentence: () =>
          value > 0
            ? `The softmax of ${site.layer} subtracts the row maximum, but its denominator sums ${site.terms} terms, ` +
              `more than ${limits.format} holds (${plainNumber(limits.overflowLevel)}).`
            : `The softmax of ${site.layer} subtracts the row maximum, so exp cannot overflow ${limits.format}.`,
      },
    ];
  }
  const critical = Math.log(limits.overflowLevel);
  const value = probabilityAnyAbove(site.input, critical, true);
  return [
    {
      format: limits.format,
      heldIn: "activations",
      measure: "overflow-risk",
      value,
      criticalLevel: critical,
      kind: "softmax-exp-overflow",
      grading: overflowGrading(context.thresholds),
      sentence: (verdict) =>
        `The softmax of ${site.layer} does not subtract the row maximum: exp overflows ${limits.format} for logits ` +
        `above ${plainNumber(critical)}, reached with probability ${plainNumber(value)} per step ` +
        `(${verdictWord(verdict)}).`,
    },
  ];
}

// A row's sum of squares S = Σ x_i² over N features has mean N·r² and variance N·(κ − 1)·r⁴ (κ the element
// kurtosis); by the central limit theorem S is close to normal. It overflows once r > √(max/N)
// (DESIGN.md §5 item 7: 4.0 at N = 4096 in binary16). Rows are independent; the scale spreads over draws.
function normSumOfSquares(site: HazardSite, context: HazardContext): Draft[] {
  const profile = site.input;
  const law = elementLaw(profile);
  const features = Math.max(1, site.terms * (1 - profile.zeroFraction));
  const rows = Math.max(1, profile.elements / Math.max(1, site.terms));
  return heldInBoth(context).map(({ limits, heldIn, onlyIfNotWidened }) => {
    const level = limits.overflowLevel;
    const criticalRms = Math.sqrt(level / features);
    const value =
      profile.rms > 0
        ? overDraws(profile.rms, profile.log2Spread, (r) => {
            const mean = features * r * r;
            const sd = Math.sqrt(features * Math.max(0, law.kurtosis - 1)) * r * r;
            const perRow = sd > 0 ? normalSf((level - mean) / sd) : mean >= level ? 1 : 0;
            return anyOf(perRow, rows);
          })
        : 0;
    return {
      format: limits.format,
      heldIn,
      measure: "overflow-risk" as const,
      value,
      criticalLevel: criticalRms,
      kind: "norm-sum-overflow" as const,
      grading: overflowGrading(context.thresholds),
      capAtRisk: onlyIfNotWidened,
      sentence: (verdict: Verdict) =>
        `The sum of squares over ${site.terms} elements in ${site.layer} overflows ${limits.format} once the ` +
        `input rms exceeds ${plainNumber(criticalRms)} (predicted ${plainNumber(profile.rms)}); probability ` +
        `${plainNumber(value)} per step${onlyIfNotWidened ? " if the statistics are kept in the activation format" : ""} ` +
        `(${verdictWord(verdict)}).`,
    };
  });
}

// Rounding error of an n-term sum in a format with unit roundoff u: about √n·u for terms of random sign
// (probabilistic analysis, Higham & Mary 2019; from memory, unconfirmed), at most about n·u (Higham 2002,
// Accuracy and Stability of Numerical Algorithms, §4.2; from memory, unconfirmed). Partial sums of
// random-sign terms are close to N(0, n·r²), and by the reflection principle their running maximum passes a
// level at most twice as often as the final sum; terms of one sign add up to about n·r.
function accumulation(site: HazardSite, context: HazardContext): Draft[] {
  const limits = context.accumulate;
  const profile = site.input;
  const terms = Math.max(1, site.terms);
  const error = Math.sqrt(terms) * limits.unitRoundoff;
  const t = context.thresholds;
  const law = elementLaw(profile);
  const outputs = Math.max(1, nonzeroElements(profile) / terms);
  const level = limits.overflowLevel;
  const coherent = law.positiveShare === 1;
  const overflow =
    profile.rms > 0
      ? overDraws(profile.rms, profile.log2Spread, (r) => {
          if (coherent) return terms * r >= level ? 1 : 0;
          // P(|S_n| ≥ level) = 2·Q(level/(√n·r)), doubled for the running maximum
          const perOutput = Math.min(1, 4 * normalSf(level / (Math.sqrt(terms) * r)));
          return anyOf(perOutput, outputs);
        })
      : 0;
  return [
    {
      format: limits.format,
      heldIn: "accumulate",
      measure: "relative-error",
      value: error,
      criticalLevel: null,
      kind: "accumulation-error",
      grading: { atRisk: t.accumulationAtRisk, fails: t.accumulationFails },
      sentence: (verdict) =>
        `${site.layer} accumulates ${terms} terms in ${limits.format}: relative rounding error about ` +
        `√n·u = ${plainNumber(error)} (${verdictWord(verdict)}).`,
    },
    {
      format: limits.format,
      heldIn: "accumulate",
      measure: "overflow-risk",
      value: overflow,
      criticalLevel: coherent ? level / terms : level / Math.sqrt(terms),
      kind: "accumulation-overflow",
      grading: overflowGrading(t),
      sentence: (verdict) =>
        `The partial sums of ${site.layer} reach the ${limits.format} overflow threshold with probability ` +
        `${plainNumber(overflow)} per step (${verdictWord(verdict)}).`,
    },
  ];
}

// The loss value times the loss scale, summed over `terms` per-example losses (1 under mean reduction).
function lossValue(site: HazardSite, context: HazardContext): Draft[] {
  const total = scaleProfile({ ...site.input, elements: 1, zeroFraction: 0 }, Math.max(1, site.terms) * context.lossScale);
  return heldInBoth(context).map(({ limits, heldIn, onlyIfNotWidened }) => {
    const value = probabilityAnyAbove(total, limits.overflowLevel);
    const critical = limits.overflowLevel / (Math.max(1, site.terms) * context.lossScale);
    return {
      format: limits.format,
      heldIn,
      measure: "overflow-risk" as const,
      value,
      criticalLevel: critical,
      kind: "loss-value-overflow" as const,
      grading: overflowGrading(context.thresholds),
      capAtRisk: onlyIfNotWidened,
      sentence: (verdict: Verdict) =>
        `The loss${site.layer === "loss" ? "" : ` of ${site.layer}`} (${site.terms > 1 ? `${site.terms} terms summed, ` : ""}times the loss scale ` +
        `${scaleWords(context.lossScale)}) overflows ${limits.format} when ${site.terms > 1 ? "a term" : "it"} exceeds ${plainNumber(critical)} ` +
        `(predicted ${plainNumber(site.input.rms)}); probability ${plainNumber(value)} per step` +
        `${onlyIfNotWidened ? " if the loss is kept in the activation format" : ""} (${verdictWord(verdict)}).`,
    };
  });
}

// Gradients summed over `terms` worker-and-step contributions: the engine's predicted sum (`output`) when it
// gives one, otherwise `terms` times one contribution (coherent parts add linearly: the worst case). When
// gradients are averaged, an implementation that divides each worker's gradient by the worker count before
// the sum moves small values down by that factor instead (DESIGN.md §5 item 9); that is judged as a risk only.
function gradientSum(site: HazardSite, context: HazardContext): Draft[] {
  const limits = context.gradients;
  const t = context.thresholds;
  const terms = Math.max(1, site.terms);
  const summed = site.output !== undefined ? scaleProfile(site.output, context.lossScale) : scaleProfile(site.input, context.lossScale * terms);
  const overflow = probabilityAnyAbove(summed, limits.overflowLevel);
  const drafts: Draft[] = [
    {
      format: limits.format,
      heldIn: "gradients",
      measure: "overflow-risk",
      value: overflow,
      criticalLevel: limits.overflowLevel / context.lossScale,
      kind: "gradient-sum-overflow",
      grading: overflowGrading(t),
      sentence: (verdict) =>
        `The sum of ${terms} gradient contributions of ${site.layer} (rms ${plainNumber(summed.rms)} after the loss ` +
        `scale) overflows ${limits.format} with probability ${plainNumber(overflow)} per step (${verdictWord(verdict)}).`,
    },
  ];
  if (context.workerGradients === "average" && context.workers > 1) {
    const scaled = scaleProfile(site.input, context.lossScale);
    const divided = scaleProfile(scaled, 1 / context.workers);
    const lost = Math.max(0, energyBelow(divided, limits.flushBound) - energyBelow(scaled, limits.flushBound));
    drafts.push({
      format: limits.format,
      heldIn: "gradients",
      measure: "flushed-energy",
      value: lost,
      criticalLevel: limits.flushBound * context.workers,
      kind: "gradient-sum-flush",
      grading: { atRisk: t.energyAtRisk, fails: t.energyFails },
      capAtRisk: true,
      sentence: (verdict) =>
        `If each worker divides the gradients of ${site.layer} by ${context.workers} before the sum, a further ` +
        `${percent(lost)} of their squared norm flushes in ${limits.format} (${verdictWord(verdict)}).`,
    });
  }
  return drafts;
}

// Adam's update m/(√v + ε): ε = 1e-8 rounds to 0 in binary16 (SCIENCE.md §3.3). Where the stored second moment
// is zero too — an exactly zero gradient, or (1 − β2)·g² flushed — the update divides by zero. The stored second
// moment itself flushes for |g| ≤ √(flush bound/(1 − β2)): about 5.5e-3 in binary16 with β2 = 0.999 (DESIGN.md §5
// item 5). The input is the gradient profile, without the loss scale (removed before the optimizer).
function optimizerConstant(site: HazardSite, context: HazardContext): Draft[] {
  const limits = context.optimizerStates;
  const t = context.thresholds;
  const gradient = site.input;
  // (1 − β2)·g² ≤ flush bound  ⇔  |g| ≤ √(flush bound / (1 − β2))
  const gradientBound = Math.sqrt(limits.flushBound / Math.max(1e-300, 1 - context.beta2));
  const flushedShare = gradient.rms > 0 ? fractionBelow(gradient, gradientBound) : 0;
  const drafts: Draft[] = [];
  const epsilon = site.constant;
  if (epsilon !== undefined) {
    if (epsilon > limits.flushBound) {
      drafts.push({
        format: limits.format,
        heldIn: "optimizerStates",
        measure: "zero-second-moments",
        value: 0,
        criticalLevel: limits.flushBound,
        kind: "optimizer-epsilon-flushed",
        grading: null,
        verdict: "fits",
        sentence: () => `The optimizer epsilon ${plainNumber(epsilon)} stays nonzero in ${limits.format}.`,
      });
    } else {
      const zeros = gradient.elements * gradient.zeroFraction + nonzeroElements(gradient) * flushedShare;
      drafts.push({
        format: limits.format,
        heldIn: "optimizerStates",
        measure: "zero-second-moments",
        value: zeros,
        criticalLevel: limits.flushBound,
        kind: "optimizer-epsilon-flushed",
        grading: null,
        verdict: zeros >= 1 ? "fails" : "at-risk",
        sentence: () =>
          `The optimizer epsilon ${plainNumber(epsilon)} rounds to zero in ${limits.format}` +
          (zeros >= 1
            ? `, and about ${plainNumber(zeros)} second-moment elements of ${site.layer} are zero per step, so the update divides by zero there.`
            : `; an update divides by zero wherever a second moment is zero.`),
      });
    }
  }
  drafts.push({
    format: limits.format,
    heldIn: "optimizerStates",
    measure: "flushed-share",
    value: flushedShare,
    criticalLevel: gradientBound,
    kind: "second-moment-flushed",
    grading: { atRisk: t.flushedAtRisk, fails: t.flushedFails },
    sentence: (verdict) =>
      `The second moment (1 − β2)·g² of ${site.layer} flushes in ${limits.format} for gradients below ` +
      `${plainNumber(gradientBound)}: ${percent(flushedShare)} of its elements (${verdictWord(verdict)}).`,
  });
  return drafts;
}
