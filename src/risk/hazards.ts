/**
 * Operation hazards: places where an operation, not a stored tensor, overflows or loses values. Each site
 * is judged against the formats of the plan entries that hold its result.
 */
import type { FormatName } from "../formats/names.js";
import type { HazardSite, MagnitudeProfile } from "../magnitude/types.js";
import { anyOf, normalSf } from "./_math.js";
import { probabilityAnyAboveBounds } from "./bounds.js";
import { elementLaw, overDraws, overDrawsBounds } from "./laws.js";
import { energyBelow, fractionBelow, nonzeroElements, probabilityAnyAbove, sameDistribution, scaleProfile } from "./profile.js";
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
  /** the range the value is judged against (a draft's value depends on the context through it and the setup only) */
  limits: RangeLimits;
  measure: HazardEvaluation["measure"];
  /** the value, computed when first needed (an integral over draws for most) */
  value: () => number;
  /** bounds [low, high] on the value, cheaper than the value itself, when the draft has them */
  bounds?: () => [number, number];
  criticalLevel: number | null;
  kind: FindingKind;
  /** thresholds for the value; null: the evaluation has its own verdict */
  grading: { atRisk: number; fails: number } | null;
  /** the verdict when grading is null (rising with the value) */
  verdict?: (value: number) => Verdict;
  /** the severity cannot exceed at-risk (e.g. only an implementation that does not widen would overflow) */
  capAtRisk?: boolean;
  sentence: (verdict: Verdict, value: number) => string;
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
  const memo = memoFor(site);
  const starts = draftsFor(site, context);
  const ends =
    site.end === undefined
      ? undefined
      : draftsFor({ ...site, input: site.end.input, ...(site.end.output ? { output: site.end.output } : {}) }, context);
  const evaluations: HazardEvaluation[] = [];
  const findings: Finding[] = [];
  for (let index = 0; index < starts.length; index++) {
    const first = starts[index] as Draft;
    const known = memo.find(first, context);
    const worse = known ?? resolve(first, ends?.[index]);
    if (known === undefined) memo.keep(first, context, { ...worse, evaluation: { ...worse.evaluation } });
    // a copy: the same judgement may serve several checks (the plans of a comparison)
    const evaluation = known === undefined ? worse.evaluation : { ...worse.evaluation };
    evaluations.push(evaluation);
    if (evaluation.verdict !== "fits") {
      findings.push({
        kind: worse.kind,
        severity: evaluation.verdict as Finding["severity"],
        format: evaluation.format,
        subject: site.layer,
        source: "hazard",
        value: evaluation.value,
        threshold: worse.threshold,
        ...(site.end !== undefined ? { at: evaluation.at } : {}),
        sentence: evaluation.sentence,
      });
    }
  }
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

/**
 * The worse of a draft at the start and at the end of the horizon (the start alone when the site has no end),
 * graded. Both drafts of a pair share their grading, and the verdict rises with the value, so the end is worse
 * exactly when its value is larger: cheap bounds often tell which without the exact number of the other side,
 * and only the worse one is worded.
 */
function resolve(start: Draft, end: Draft | undefined): Graded {
  if (end === undefined) return graded(start, start.value(), "start");
  let startExact = start.bounds === undefined;
  let endExact = end.bounds === undefined;
  let [startLow, startHigh] = startExact ? exactly(start) : (start.bounds as () => [number, number])();
  let [endLow, endHigh] = endExact ? exactly(end) : (end.bounds as () => [number, number])();
  for (;;) {
    if (endLow > startHigh) return graded(end, endExact ? endLow : end.value(), "end");
    if (endHigh <= startLow) return graded(start, startExact ? startLow : start.value(), "start");
    if (!startExact && (endExact || startHigh - startLow >= endHigh - endLow)) {
      [startLow, startHigh] = exactly(start);
      startExact = true;
    } else if (!endExact) {
      [endLow, endHigh] = exactly(end);
      endExact = true;
    } else {
      // both exact and not ordered (a NaN): the verdicts decide, as they always would
      const first = graded(start, startLow, "start");
      const second = graded(end, endLow, "end");
      return isWorse(second, first) ? second : first;
    }
  }
}

function exactly(draft: Draft): [number, number] {
  const value = draft.value();
  return [value, value];
}

function graded(draft: Draft, value: number, at: "start" | "end"): Graded {
  let verdict: Verdict = draft.verdict?.(value) ?? "fits";
  let threshold = 0;
  if (draft.grading !== null) {
    if (value > draft.grading.fails) {
      verdict = "fails";
      threshold = draft.grading.fails;
    } else if (value > draft.grading.atRisk) {
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
      value,
      criticalLevel: draft.criticalLevel,
      verdict,
      at,
      sentence: draft.sentence(verdict, value),
    },
    kind: draft.kind,
    threshold,
  };
}

/**
 * The judgements already made for one site object, by draft: the plans of a comparison judge each site once per
 * format, and the drafts held in a plan entry of the same range (the binary32 accumulator of both plans) come out
 * the same. A judgement is reused only for the same draft kind and plan entry, an equal range and an equal
 * training setup, and while the site's numbers are those it was made from.
 */
class SiteMemo {
  private readonly entries: { kind: FindingKind; heldIn: HeldIn; limits: RangeLimits; context: HazardContext; graded: Graded }[] = [];
  private readonly input: MagnitudeProfile;
  private readonly output: MagnitudeProfile | undefined;
  private readonly endInput: MagnitudeProfile | undefined;
  private readonly endOutput: MagnitudeProfile | undefined;
  private readonly terms: number;
  private readonly guarded: boolean;
  private readonly constant: number | undefined;
  private readonly layer: string;

  constructor(site: HazardSite) {
    this.input = { ...site.input };
    this.output = site.output && { ...site.output };
    this.endInput = site.end && { ...site.end.input };
    this.endOutput = site.end?.output && { ...site.end.output };
    this.terms = site.terms;
    this.guarded = site.guarded;
    this.constant = site.constant;
    this.layer = site.layer;
  }

  /** Whether the site still has the numbers this memo was made from. */
  matches(site: HazardSite): boolean {
    return (
      site.terms === this.terms &&
      site.guarded === this.guarded &&
      site.constant === this.constant &&
      site.layer === this.layer &&
      sameDistribution(site.input, this.input) &&
      sameOptional(site.output, this.output) &&
      sameOptional(site.end?.input, this.endInput) &&
      sameOptional(site.end?.output, this.endOutput)
    );
  }

  find(draft: Draft, context: HazardContext): Graded | undefined {
    for (const entry of this.entries) {
      if (entry.kind === draft.kind && entry.heldIn === draft.heldIn && sameLimits(entry.limits, draft.limits) && sameSetup(entry.context, context)) {
        return entry.graded;
      }
    }
    return undefined;
  }

  keep(draft: Draft, context: HazardContext, graded: Graded): void {
    this.entries.push({ kind: draft.kind, heldIn: draft.heldIn, limits: draft.limits, context, graded });
  }
}

const MEMOS = new WeakMap<HazardSite, SiteMemo>();

function memoFor(site: HazardSite): SiteMemo {
  let memo = MEMOS.get(site);
  if (memo === undefined || !memo.matches(site)) {
    memo = new SiteMemo(site);
    MEMOS.set(site, memo);
  }
  return memo;
}

function sameOptional(a: MagnitudeProfile | undefined, b: MagnitudeProfile | undefined): boolean {
  return a === undefined || b === undefined ? a === b : sameDistribution(a, b);
}

function sameLimits(a: RangeLimits, b: RangeLimits): boolean {
  return (
    a === b ||
    (a.format === b.format &&
      a.maxFinite === b.maxFinite &&
      a.overflowLevel === b.overflowLevel &&
      a.saturates === b.saturates &&
      a.flushBound === b.flushBound &&
      a.minNormal === b.minNormal &&
      a.smallest === b.smallest &&
      a.unitRoundoff === b.unitRoundoff)
  );
}

// the parts of a context other than the ranges that a draft reads
function sameSetup(a: HazardContext, b: HazardContext): boolean {
  if (a === b) return true;
  if (a.lossScale !== b.lossScale || a.beta2 !== b.beta2 || a.workerGradients !== b.workerGradients || a.workers !== b.workers) return false;
  if (a.thresholds === b.thresholds) return true;
  for (const key of Object.keys(a.thresholds) as (keyof RiskThresholds)[]) if (a.thresholds[key] !== b.thresholds[key]) return false;
  return Object.keys(a.thresholds).length === Object.keys(b.thresholds).length;
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

// A value computed on first use and kept.
function once(compute: () => number): () => number {
  let value: number | undefined;
  return () => (value ??= compute());
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
        limits,
        measure: "overflow-risk",
        value: () => value,
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
  return [
    {
      format: limits.format,
      heldIn: "activations",
      limits,
      measure: "overflow-risk",
      value: () => probabilityAnyAbove(site.input, critical, true),
      criticalLevel: critical,
      kind: "softmax-exp-overflow",
      grading: overflowGrading(context.thresholds),
      sentence: (verdict, value) =>
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
    // rises with the scale r, so the extreme draws bound its integral
    const perStep = (r: number): number => {
      const mean = features * r * r;
      const sd = Math.sqrt(features * Math.max(0, law.kurtosis - 1)) * r * r;
      const perRow = sd > 0 ? normalSf((level - mean) / sd) : mean >= level ? 1 : 0;
      return anyOf(perRow, rows);
    };
    const draft: Draft = {
      format: limits.format,
      heldIn,
      limits,
      measure: "overflow-risk" as const,
      value: () => (profile.rms > 0 ? overDraws(profile.rms, profile.log2Spread, perStep) : 0),
      criticalLevel: criticalRms,
      kind: "norm-sum-overflow" as const,
      grading: overflowGrading(context.thresholds),
      capAtRisk: onlyIfNotWidened,
      sentence: (verdict: Verdict, value: number) =>
        `The sum of squares over ${site.terms} elements in ${site.layer} overflows ${limits.format} once the ` +
        `input rms exceeds ${plainNumber(criticalRms)} (predicted ${plainNumber(profile.rms)}); probability ` +
        `${plainNumber(value)} per step${onlyIfNotWidened ? " if the statistics are kept in the activation format" : ""} ` +
        `(${verdictWord(verdict)}).`,
    };
    if (profile.rms > 0) draft.bounds = () => overDrawsBounds(profile.rms, profile.log2Spread, perStep);
    return draft;
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
  // rises with the scale r, so the extreme draws bound its integral
  const perStep = (r: number): number => {
    if (coherent) return terms * r >= level ? 1 : 0;
    // P(|S_n| ≥ level) = 2·Q(level/(√n·r)), doubled for the running maximum
    const perOutput = Math.min(1, 4 * normalSf(level / (Math.sqrt(terms) * r)));
    return anyOf(perOutput, outputs);
  };
  const overflow: Draft = {
    format: limits.format,
    heldIn: "accumulate",
    limits,
    measure: "overflow-risk",
    value: () => (profile.rms > 0 ? overDraws(profile.rms, profile.log2Spread, perStep) : 0),
    criticalLevel: coherent ? level / terms : level / Math.sqrt(terms),
    kind: "accumulation-overflow",
    grading: overflowGrading(t),
    sentence: (verdict, value) =>
      `The partial sums of ${site.layer} reach the ${limits.format} overflow threshold with probability ` +
      `${plainNumber(value)} per step (${verdictWord(verdict)}).`,
  };
  if (profile.rms > 0) overflow.bounds = () => overDrawsBounds(profile.rms, profile.log2Spread, perStep);
  return [
    {
      format: limits.format,
      heldIn: "accumulate",
      limits,
      measure: "relative-error",
      value: () => error,
      criticalLevel: null,
      kind: "accumulation-error",
      grading: { atRisk: t.accumulationAtRisk, fails: t.accumulationFails },
      sentence: (verdict) =>
        `${site.layer} accumulates ${terms} terms in ${limits.format}: relative rounding error about ` +
        `√n·u = ${plainNumber(error)} (${verdictWord(verdict)}).`,
    },
    overflow,
  ];
}

// The loss value times the loss scale, summed over `terms` per-example losses (1 under mean reduction).
function lossValue(site: HazardSite, context: HazardContext): Draft[] {
  const total = scaleProfile({ ...site.input, elements: 1, zeroFraction: 0 }, Math.max(1, site.terms) * context.lossScale);
  return heldInBoth(context).map(({ limits, heldIn, onlyIfNotWidened }) => {
    const critical = limits.overflowLevel / (Math.max(1, site.terms) * context.lossScale);
    return {
      format: limits.format,
      heldIn,
      limits,
      measure: "overflow-risk" as const,
      value: () => probabilityAnyAbove(total, limits.overflowLevel),
      bounds: () => probabilityAnyAboveBounds(total, limits.overflowLevel),
      criticalLevel: critical,
      kind: "loss-value-overflow" as const,
      grading: overflowGrading(context.thresholds),
      capAtRisk: onlyIfNotWidened,
      sentence: (verdict: Verdict, value: number) =>
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
  const drafts: Draft[] = [
    {
      format: limits.format,
      heldIn: "gradients",
      limits,
      measure: "overflow-risk",
      value: () => probabilityAnyAbove(summed, limits.overflowLevel),
      bounds: () => probabilityAnyAboveBounds(summed, limits.overflowLevel),
      criticalLevel: limits.overflowLevel / context.lossScale,
      kind: "gradient-sum-overflow",
      grading: overflowGrading(t),
      sentence: (verdict, value) =>
        `The sum of ${terms} gradient contributions of ${site.layer} (rms ${plainNumber(summed.rms)} after the loss ` +
        `scale) overflows ${limits.format} with probability ${plainNumber(value)} per step (${verdictWord(verdict)}).`,
    },
  ];
  if (context.workerGradients === "average" && context.workers > 1) {
    const scaled = scaleProfile(site.input, context.lossScale);
    const divided = scaleProfile(scaled, 1 / context.workers);
    drafts.push({
      format: limits.format,
      heldIn: "gradients",
      limits,
      measure: "flushed-energy",
      value: () => Math.max(0, energyBelow(divided, limits.flushBound) - energyBelow(scaled, limits.flushBound)),
      criticalLevel: limits.flushBound * context.workers,
      kind: "gradient-sum-flush",
      grading: { atRisk: t.energyAtRisk, fails: t.energyFails },
      capAtRisk: true,
      sentence: (verdict, value) =>
        `If each worker divides the gradients of ${site.layer} by ${context.workers} before the sum, a further ` +
        `${percent(value)} of their squared norm flushes in ${limits.format} (${verdictWord(verdict)}).`,
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
  const flushedShare = once(() => (gradient.rms > 0 ? fractionBelow(gradient, gradientBound) : 0));
  const drafts: Draft[] = [];
  const epsilon = site.constant;
  if (epsilon !== undefined) {
    if (epsilon > limits.flushBound) {
      drafts.push({
        format: limits.format,
        heldIn: "optimizerStates",
        limits,
        measure: "zero-second-moments",
        value: () => 0,
        criticalLevel: limits.flushBound,
        kind: "optimizer-epsilon-flushed",
        grading: null,
        verdict: () => "fits",
        sentence: () => `The optimizer epsilon ${plainNumber(epsilon)} stays nonzero in ${limits.format}.`,
      });
    } else {
      drafts.push({
        format: limits.format,
        heldIn: "optimizerStates",
        limits,
        measure: "zero-second-moments",
        value: () => gradient.elements * gradient.zeroFraction + nonzeroElements(gradient) * flushedShare(),
        criticalLevel: limits.flushBound,
        kind: "optimizer-epsilon-flushed",
        grading: null,
        verdict: (zeros) => (zeros >= 1 ? "fails" : "at-risk"),
        sentence: (_verdict, zeros) =>
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
    limits,
    measure: "flushed-share",
    value: flushedShare,
    criticalLevel: gradientBound,
    kind: "second-moment-flushed",
    grading: { atRisk: t.flushedAtRisk, fails: t.flushedFails },
    sentence: (verdict, value) =>
      `The second moment (1 − β2)·g² of ${site.layer} flushes in ${limits.format} for gradients below ` +
      `${plainNumber(gradientBound)}: ${percent(value)} of its elements (${verdictWord(verdict)}).`,
  });
  return drafts;
}
