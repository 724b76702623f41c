/**
 * `check`: a network spec in, a judgement out. Builds the tensor graph, predicts every tensor's magnitudes and
 * judges them against the precision plan (src/risk/judge.ts). Pure; `checkFile` is the thin loader around it.
 */
import { buildGraph, type Graph, type GraphIssue, type GraphResult } from "./graph/index.js";
import { predict } from "./magnitude/index.js";
import { predictForCheck } from "./magnitude/predict.js";
import { PredictionRangeError } from "./magnitude/range.js";
import { didYouMean } from "./spec/issues.js";
import { FORMATS, type FormatName } from "./formats/index.js";
import type { Prediction } from "./magnitude/types.js";
import { applyMeasurements, calibrateGraph, loadMeasurements, weightMismatchProblems, type Measurements, type UnusedStatistic, type WeightCalibration } from "./measure/index.js";
import { checkedFormats, judgePrediction, planFor, scaledSubjects, worseVerdict, type AppliedLossScale, type ScaledSubjects, type CheckOptions, type CheckResult, type LossScaleWindowSummary, type Verdict } from "./risk/index.js";
import { checkOptimizer, type OptimizerCheck, type OptimizerStateHazard } from "./scale/optimizer.js";
import { notCountedSentence, scaleWords } from "./risk/words.js";
import { judgePredictionAgain } from "./risk/judge.js";
import { lossScaleAnswer, withWeighedPick, type LossScaleAnswer } from "./scale/recommend.js";
import { centreLeavesFindings, scaledFindings, weighPick } from "./scale/pick.js";
import { loadSpec, positionIssues, type SpecIssue, type SpecPosition } from "./spec/index.js";
import type { NetworkSpec, PrecisionPlan, SpecPath } from "./spec/types.js";

/** A spec whose tensor graph cannot be built; `issues` name the spec paths. */
export class CheckInputError extends RangeError {
  readonly issues: GraphIssue[];
  constructor(issues: GraphIssue[]) {
    super(`the spec's network cannot be built: ${issues.map((issue) => issue.message).join("; ")}`);
    this.name = "CheckInputError";
    this.issues = issues;
  }
}

/**
 * A `plan` option naming no plan of the spec: the caller's input, not a failure of the check (the command line and
 * batch rows report it as an input error, exit code 2). A RangeError, as every bad option of `check` is.
 */
export class UnknownPlanError extends RangeError {
  /** the plan asked for */
  readonly plan: string;
  /** the spec's plans: its `precision`, then its `plans` */
  readonly plans: string[];
  constructor(plan: string, plans: string[]) {
    super(`no plan named "${plan}" in the spec${didYouMean(plan, plans)}; its plans: ${plans.join(", ")}`);
    this.name = "UnknownPlanError";
    this.plan = plan;
    this.plans = plans;
  }
}

/**
 * A check with the decisions that follow from it: the loss-scale answer for the gradient format of the formats judged
 * and the optimizer in the planned formats. `verdict` folds both in.
 */
export interface CheckAnswer extends CheckResult {
  /**
   * the loss-scale window, pick and remedies for the gradients of the formats judged (the first such gradient format,
   * in the order of `formats`); null when none needs a scale (held in bfloat16, binary32, or 8-bit with scale factors)
   */
  lossScaleAnswer: LossScaleAnswer | null;
  /** the answers for further gradient formats, when the formats judged hold gradients in several that need a scale */
  moreLossScaleAnswers?: LossScaleAnswer[];
  /**
   * what the check says about the loss scale, one item per gradient format it speaks about: each judged format that
   * holds gradients, in the order of `formats`, then any answer about gradients no judged format holds (a judged format
   * holding none, such as binary32 for the states, is judged at the plan's scale); the plan's gradient format when
   * neither gives one. Renderers word these; they do not work them out again.
   */
  lossScales: LossScaleItem[];
  /** the optimizer's states, epsilon and update swamping under the plan */
  optimizer: OptimizerCheck;
}

/** Why gradients held in a format take no loss scale (the rule of {@link needsLossScale}). */
export interface UnscaledReason {
  /**
   * `binary32-or-wider`: the gradients are held in binary32 or binary64; `wide-range`: in a narrower format with
   * binary32's exponent range (bfloat16, tf32); `scale-factors`: in an 8-bit format with per-tensor or per-block scale
   * factors, which take the loss scale's place
   */
  kind: "binary32-or-wider" | "wide-range" | "scale-factors";
  /** the reason as a clause, e.g. "gradients are held in bfloat16, which has binary32's exponent range" */
  sentence: string;
}

/**
 * One gradient format's loss-scale item: `window` (a static scale fits; `answer` has the window and its pick), `empty`
 * (no static scale does; `answer` has the remedies) or `not-needed` (the format takes no scale; `reason` says why).
 * `answer` is the same object as `lossScaleAnswer` or an entry of `moreLossScaleAnswers`.
 */
export type LossScaleItem =
  | { format: FormatName; status: "window" | "empty"; answer: LossScaleAnswer }
  | { format: FormatName; status: "not-needed"; reason: UnscaledReason; flushedSums?: FlushedSums };

/**
 * Backward sums that a loss scale would lift though the gradients need none: the plan accumulates in a format of
 * binary16's narrow range (bfloat16 gradients with `accumulate: binary16`), and sums judged there lose their terms'
 * squared norm below its flush bound. No window is searched for sums held in the accumulate format, so a "not needed"
 * alone would contradict their remedy.
 */
export interface FlushedSums {
  /** the accumulate format the sums flush in */
  format: FormatName;
  /** how many operations (backward sums) flush there, at risk or failing */
  operations: number;
  /** the loss scale they were judged at */
  lossScale: number;
  /** the caveat as a clause, e.g. "72 backward sums accumulated in binary16 flush part of their terms at loss scale 1: …" */
  sentence: string;
}

/** Options of {@link check}: those of the judgement, plus the loss-scale answer's. */
export interface CheckAnswerOptions extends CheckOptions {
  /** simulate dynamic loss scaling even when a static scale exists (the report draws its trajectory) */
  simulateDynamicScale?: boolean;
  /** seed of the dynamic-scale simulation (default 1) */
  seed?: number;
}

/**
 * Judge a network spec against its precision plan (or the formats given), answer the loss scale and check the
 * optimizer. When no loss scale is given (by the plan or the options), each judged format whose plan as judged
 * (`planFor`) holds gradients in a format that needs one is judged at the recommended scale for those gradients (the
 * pick of the window searched for them, once per gradient format), the others unscaled, and the result says which.
 * The loss-scale answer is for the gradients of the formats judged; its finding counts in `verdict` when its format is
 * one of them. The optimizer is worked out for the plan, and its findings count only in the plan's formats judged;
 * a finding not counted says so in its sentence.
 * Throws RangeError for bad options (UnknownPlanError for an unknown plan; a non-positive loss scale) and
 * CheckInputError when the network cannot be built from the spec.
 * @example check(spec).formats.map((f) => [f.format, f.verdict]) // => [["binary16", "fails"], ["binary32", "fits"]]
 */
export function check(spec: NetworkSpec, options: CheckAnswerOptions = {}, measurements?: Measurements | MeasuredNetwork): CheckAnswer {
  assertSpec(spec, "check");
  const plan = choosePlan(spec, options.plan);
  // bad options (a loss scale, a format name) fail here, before the graph, the prediction and the window searches
  const formats = checkedFormats(plan, options);
  const network = networkFor(spec, measurements);
  if (!network.built.ok) throw new CheckInputError(network.built.issues);
  const planned = { ...spec, precision: plan };
  const { prediction, unused } = measuredPrediction(network.built.graph, network, planned);
  let answers = lossScaleAnswers(prediction, plan, formats, options, spec.training.horizon.steps);
  // with no scale given, gradients are judged at their window's pick even when 1 also lies inside it: a larger scale
  // costs nothing until it overflows (Micikevicius et al. 2018 §3.2), and the pick keeps the most margin (a given
  // scale wins over the windows in the judgement)
  const atPicks = (): CheckOptions => (answers.length === 0 ? options : { ...options, lossScaleWindows: answers.map(windowSummary) });
  // where every window's centre surely leaves findings, its pick is weighed (and likely moves) before the one judgement
  // at the picks; else the judgement at the centres gives their findings to the weighing
  // (a given scale is judged as it is: its centres' findings come from that judgement, and weighPick makes the scaled
  // subjects only if it weighs)
  const scaleGiven = options.lossScale !== undefined || plan.lossScale !== undefined;
  const subjects = !scaleGiven && answers.some((a) => a.window.pickLog2 !== null) ? scaledSubjects(planned, prediction) : undefined;
  const first = subjects === undefined ? null : weighedFirst(planned, prediction, answers, subjects, formats, options);
  let judged: CheckResult;
  if (first !== null) {
    answers = first.answers;
    const at = first.judged;
    // the judgement the weighing made at a scale that is the pick serves; at another, the gradients are judged again
    if (at === null) judged = judgePrediction(planned, prediction, atPicks());
    else if (answers[0]?.window.pickLog2 === at.log2) judged = at.result;
    else judged = judgePredictionAgain(at.result, planned, prediction, atPicks());
  } else {
    judged = judgePrediction(planned, prediction, atPicks());
    const weighed = weighedAnswers(planned, prediction, answers, judged, options, subjects);
    answers = weighed.answers;
    // a pick moved: the gradients are judged again at it (a given scale is judged as it was), what no scale moves kept
    if (weighed.moved && (judged.lossScale.origin === "recommended" || judged.formats.some((f) => f.lossScale?.origin === "recommended"))) {
      judged = judgePredictionAgain(judged, planned, prediction, atPicks());
    }
  }
  judged = withSearchedWindows(judged, plan, answers);
  // the optimizer's state findings that a hazard reports in the plan's state format are told there, not twice
  const stateHazards = judged.hazards
    .filter((h) => h.findings.some((f) => f.format === plan.optimizerStates))
    .map((h) => h.kind)
    .filter((kind): kind is OptimizerStateHazard => kind === "optimizer-constant" || kind === "optimizer-second-moment");
  // the optimizer and the loss scale are answered for the plan, but count only in the plan's formats that were judged
  // (all of them unless `formats` leaves some out), as the formats' verdicts do
  const counted = judged.formats.filter((f) => f.planned).map((f) => f.format);
  // the thresholds the judge used, the caller's overrides included: second moments get their hazard's severity
  const optimizer = checkOptimizer(spec.training.optimizer, plan, prediction, spec.training.horizon.steps, stateHazards, judged.thresholds, counted);
  // an answer counts when its gradient format is judged (a planned format holding no gradients, such as binary32 for
  // the states, is judged at the plan's scale, but its answer is not about it)
  const judgedNames = judged.formats.map((f) => f.format);
  let verdict = worseVerdict(judged.verdict, optimizer.verdict);
  const told: LossScaleAnswer[] = [];
  for (const answer of answers) {
    // no static scale: failing, unless a dynamic scale is expected to cope (then at risk)
    const scaleVerdict: Verdict = !answer.window.empty ? "fits" : answer.remedies.some((r) => r.kind === "dynamic-scale" && r.works) ? "at-risk" : "fails";
    if (scaleVerdict !== "fits" && !judgedNames.includes(answer.format)) {
      told.push({ ...answer, sentences: [...answer.sentences, notCountedSentence(answer.format)] });
      continue;
    }
    told.push(answer);
    verdict = worseVerdict(verdict, scaleVerdict);
  }
  const answer = told[0] ?? null;
  const lossScales = lossScaleItems(judged, plan, told);
  const result: CheckAnswer =
    told.length > 1
      ? { ...judged, verdict, lossScaleAnswer: answer, moreLossScaleAnswers: told.slice(1), lossScales, optimizer }
      : { ...judged, verdict, lossScaleAnswer: answer, lossScales, optimizer };
  if (unused.length > 0) result.unusedStatistics = unused;
  return result;
}

/** The loss scale {@link check} judges a plan's own gradients at, with the answer it comes from. */
export interface GradientLossScale {
  value: number;
  /** plan: the plan's own scale; recommended: the (weighed) pick of the window; none: 1 (no scale needed, or the window is empty) */
  origin: "plan" | "recommended" | "none";
  /** the loss-scale answer for the plan's gradients, as check's; null when they need no scale */
  answer: LossScaleAnswer | null;
}

/**
 * The loss scale {@link check} judges the plan's gradients at, and its answer, without the rest of the check (no
 * tensor or operation is judged but those the pick is weighed on, and the optimizer is not checked): the plan's own
 * scale, else the pick of the window for its gradients weighed as check weighs it, else 1. Made from the same inputs
 * check gives the loss-scale answer (the prediction for the spec under the plan, the horizon's steps, the seed), so the
 * two agree. Uses none of the spec's measured data (a check given none). Throws as check does.
 * @example gradientLossScale(deepReluGlorot, { plan: "mixed-binary16" }).value // => 262144 (2^18, as check judges it)
 */
export function gradientLossScale(spec: NetworkSpec, options: { plan?: string; seed?: number } = {}): GradientLossScale {
  assertSpec(spec, "gradientLossScale");
  const plan = choosePlan(spec, options.plan);
  const given = plan.lossScale !== undefined ? ({ value: plan.lossScale, origin: "plan" } as const) : undefined;
  // a plan that gives its scale needs no answer to run at it; one whose gradients need none has no answer
  if (given !== undefined && !needsLossScale(plan)) return { ...given, answer: null };
  if (!needsLossScale(plan)) return { value: 1, origin: "none", answer: null };
  const built = buildGraph(spec);
  if (!built.ok) throw new CheckInputError(built.issues);
  const planned = { ...spec, precision: plan };
  const prediction = predict(built.graph, planned);
  const checkOptions: CheckAnswerOptions = options.seed === undefined ? {} : { seed: options.seed };
  let answer = lossScaleAnswers(prediction, plan, [plan.gradients], checkOptions, spec.training.horizon.steps)[0] ?? null;
  if (answer === null) throw new Error(`internal: ${plan.gradients} gradients need a loss scale but have no answer`);
  // weighed as check weighs it, with the centre judged here: the same pick (src/scale/pick.ts)
  const found = weighPick(planned, prediction, answer.format, answer.window, answer.options.marginBinades, checkOptions);
  if (found !== null) answer = withWeighedPick(answer, found.pickLog2, found.weighing);
  if (given !== undefined) return { ...given, answer };
  const pick = answer.window.pickLog2;
  return pick === null ? { value: 1, origin: "none", answer } : { value: 2 ** pick, origin: "recommended", answer };
}

/**
 * The answers with each window's pick weighed against the findings it leaves (src/scale/pick.ts), and whether a pick
 * moved. A format judged at its window's pick counts its findings from `judged`; one judged at a given scale, or not
 * judged at all, has its centre judged apart.
 */
function weighedAnswers(
  spec: NetworkSpec,
  prediction: Prediction,
  answers: LossScaleAnswer[],
  judged: CheckResult,
  options: CheckAnswerOptions,
  made: ScaledSubjects | undefined,
): { answers: LossScaleAnswer[]; moved: boolean } {
  let moved = false;
  const out = answers.map((answer) => {
    const pick = answer.window.pickLog2;
    if (pick === null) return answer;
    // a gradient format no judged format is (--format binary32 on a binary16 plan: binary32 holds the states and the
    // sums, judged with the plan's binary16 gradients at their scale) is weighed too, its centre judged apart: the
    // scale those formats are judged at is then the pick a plain check recommends, not the window's bare centre
    const formatCheck = judged.formats.find((f) => f.format === answer.format);
    const applied = formatCheck?.lossScale ?? judged.lossScale;
    const subjects = { tensors: new Set<string>(), sites: new Set<string>() };
    const atCentre =
      formatCheck !== undefined && applied.value === 2 ** pick ? { findings: scaledFindings(judged, answer.format, subjects), ...subjects } : undefined;
    const found = weighPick(spec, prediction, answer.format, answer.window, answer.options.marginBinades, options, atCentre, made);
    if (found === null) return answer;
    if (found.pickLog2 !== pick) moved = true;
    return withWeighedPick(answer, found.pickLog2, found.weighing);
  });
  return { answers: out, moved };
}

/**
 * The answers weighed before any judgement, or null to weigh them after it (from its findings at the centres). Asked
 * only when no scale is given (the judgement is then at the picks); taken where every window's centre surely leaves findings
 * (src/scale/pick.ts centreLeavesFindings): each is then weighed whatever, its centre counted here, and the pick most
 * often moves, so one judgement at the picks replaces the judgement at the centres and the gradients judged again at
 * the picks (the same result: judgePredictionAgain gives judgePrediction's). Where a centre leaves none, the judgement
 * at it is the one kept, and it gives the weighing the centre's (zero) count.
 */
function weighedFirst(
  spec: NetworkSpec,
  prediction: Prediction,
  answers: LossScaleAnswer[],
  subjects: ScaledSubjects,
  formats: readonly FormatName[],
  options: CheckAnswerOptions,
): { answers: LossScaleAnswer[]; judged: { log2: number; result: CheckResult } | null } | null {
  for (const answer of answers) {
    if (answer.window.pickLog2 !== null && !centreLeavesFindings(subjects, answer.format, answer.window, options)) return null;
  }
  // with one answer, for a format judged, the weighing's first scale judged whole is judged as check judges the pick:
  // most often it is the pick (the largest scale keeping the margin where the centre only flushes), whose judgement
  // then serves
  let judged: { log2: number; result: CheckResult } | null = null;
  const only = answers.length === 1 ? answers[0] : undefined;
  const judgeAt =
    only === undefined || !formats.includes(only.format)
      ? undefined
      : (log2: number): CheckResult | null => {
          const at: LossScaleAnswer = { ...only, window: { ...only.window, pickLog2: log2 } };
          const result = judgePrediction(spec, prediction, { ...options, lossScaleWindows: [windowSummary(at)] });
          judged = { log2, result };
          const formatCheck = result.formats.find((f) => f.format === only.format);
          return formatCheck !== undefined && (formatCheck.lossScale ?? result.lossScale).value === 2 ** log2 ? result : null;
        };
  const weighed = answers.map((answer) => {
    const found = weighPick(spec, prediction, answer.format, answer.window, answer.options.marginBinades, options, undefined, subjects, judgeAt);
    return found === null ? answer : withWeighedPick(answer, found.pickLog2, found.weighing);
  });
  return { answers: weighed, judged };
}

// a library caller passing something other than a loaded spec gets a TypeError naming it, not a property read deep inside
function assertSpec(spec: unknown, caller: string): asserts spec is NetworkSpec {
  const loaded = spec !== null && typeof spec === "object" && "precision" in spec && "layers" in spec && "training" in spec;
  if (!loaded) {
    throw new TypeError(`${caller} needs a network spec as loadSpec or parseSpec give it (its .spec), got ${spec === null ? "null" : Array.isArray(spec) ? "an array" : typeof spec}`);
  }
}

/** The items of `CheckAnswer.lossScales`, from the judgement and the answers as told. */
function lossScaleItems(judged: CheckResult, plan: PrecisionPlan, answers: readonly LossScaleAnswer[]): LossScaleItem[] {
  const items: LossScaleItem[] = [];
  for (const format of judged.formats) {
    if (!format.holds.includes("gradients")) continue;
    const answer = answers.find((a) => a.format === format.format);
    items.push(answer === undefined ? unscaledItem(planFor(plan, format.format), judged) : answerItem(answer));
  }
  for (const answer of answers) if (!items.some((item) => item.status !== "not-needed" && item.answer === answer)) items.push(answerItem(answer));
  if (items.length === 0) items.push(unscaledItem(plan, judged));
  return items;
}

// a window that is not empty has both edges and a pick (src/scale/window.ts), so `empty` alone decides
function answerItem(answer: LossScaleAnswer): LossScaleItem {
  return { format: answer.format, status: answer.window.empty ? "empty" : "window", answer };
}

// a plan whose gradients need a scale always has an answer (lossScaleAnswers searched one for every such judged plan)
function unscaledItem(plan: PrecisionPlan, judged: CheckResult): LossScaleItem {
  const reason = unscaledReason(plan);
  if (reason === null) throw new Error(`internal: ${plan.gradients} gradients need a loss scale but have no answer`);
  const flushedSums = flushedSumsOf(plan, judged);
  return flushedSums === undefined ? { format: plan.gradients, status: "not-needed", reason } : { format: plan.gradients, status: "not-needed", reason, flushedSums };
}

/**
 * The backward sums of a plan whose gradients need no scale that flush in its accumulate format, when that format
 * would need one (binary16, unscaled 8-bit: the rule of {@link needsLossScale} applied to it); undefined when none do.
 */
function flushedSumsOf(plan: PrecisionPlan, judged: CheckResult): FlushedSums | undefined {
  const format = plan.accumulate;
  if (!needsLossScale({ ...plan, gradients: format })) return undefined;
  let operations = 0;
  for (const hazard of judged.hazards) {
    if (hazard.evaluations.some((e) => e.format === format && e.heldIn === "accumulate" && e.measure === "flushed-energy" && e.verdict !== "fits")) operations += 1;
  }
  if (operations === 0) return undefined;
  const lossScale = (judged.formats.find((f) => f.format === format)?.lossScale ?? judged.lossScale).value;
  const sums = operations === 1 ? "1 backward sum accumulated" : `${operations} backward sums accumulated`;
  return {
    format,
    operations,
    lossScale,
    sentence:
      `but ${sums} in ${format} flush${operations === 1 ? "es" : ""} part of ${operations === 1 ? "its" : "their"} terms at loss scale ${scaleWords(lossScale)} ` +
      `(see the operation hazards): accumulate in binary32, or give a loss scale that lifts them (no window is searched for sums held in the accumulate format)`,
  };
}


/**
 * The loss-scale answers for the formats judged: one per gradient format that needs a scale under a judged format's
 * plan (`planFor`), in the order of the formats. The plan's own gradients are answered under the plan itself.
 */
function lossScaleAnswers(
  prediction: Prediction,
  plan: PrecisionPlan,
  formats: readonly FormatName[],
  options: CheckAnswerOptions,
  steps: number,
): LossScaleAnswer[] {
  const answers: LossScaleAnswer[] = [];
  for (const format of formats) {
    const evaluated = planFor(plan, format);
    if (!needsLossScale(evaluated) || answers.some((a) => a.format === evaluated.gradients)) continue;
    answers.push(
      lossScaleAnswer(prediction, evaluated.gradients === plan.gradients ? plan : evaluated, {
        steps,
        seed: options.seed ?? 1,
        simulate: options.simulateDynamicScale ? "always" : "when-empty",
        // a given scale is compared with the window as the plan's would be
        ...(options.lossScale === undefined ? {} : { lossScale: options.lossScale }),
      }),
    );
  }
  return answers;
}

/**
 * Whether the plan's gradients need a loss scale: held in a format with a narrow exponent range (binary16, the
 * 8-bit formats) and, for 8-bit formats, without per-tensor scale factors. bfloat16 and binary32 share binary32's
 * range and are trained unscaled (Kalamkar et al. 2019, from memory, unconfirmed; SCIENCE.md §1.2).
 */
export function needsLossScale(plan: PrecisionPlan): boolean {
  return unscaledReason(plan) === null;
}

/**
 * Why the plan's gradients take no loss scale (the rule of {@link needsLossScale}), or null when they need one. It
 * says nothing of the gradients' sizes: the tensors' own findings tell whether any overflows or flushes unscaled.
 */
export function unscaledReason(plan: PrecisionPlan): UnscaledReason | null {
  const name = plan.gradients;
  const format = FORMATS[name];
  // binary32's exponent range takes 8 bits (IEEE 754-2019 Table 3.5); binary16's 5 do not reach it
  if (format.exponentBits > 5) {
    return format.bits >= 32
      ? { kind: "binary32-or-wider", sentence: `gradients are held in ${name}` }
      : { kind: "wide-range", sentence: `gradients are held in ${name}, which has binary32's exponent range` };
  }
  if (format.bits === 8 && plan.scaling !== "none") {
    return { kind: "scale-factors", sentence: `gradients are held in ${name} with per-${plan.scaling} scale factors` };
  }
  return null;
}

/**
 * The result with the window searched for each given scale's gradients beside it: a scale the plan or the caller gives
 * is judged as given, but the window was searched all the same (to say whether the scale lies in it), and `window`
 * appears wherever headroom searched (README, `lossScale`).
 */
function withSearchedWindows(judged: CheckResult, plan: PrecisionPlan, answers: readonly LossScaleAnswer[]): CheckResult {
  if (answers.length === 0) return judged;
  const withWindow = (scale: AppliedLossScale, format: FormatName): AppliedLossScale => {
    if (scale.window !== undefined || (scale.origin !== "plan" && scale.origin !== "option")) return scale;
    const gradients = planFor(plan, format).gradients;
    const answer = answers.find((a) => a.format === gradients);
    return answer === undefined ? scale : { ...scale, window: windowSummary(answer) };
  };
  const first = judged.formats[0];
  return {
    ...judged,
    lossScale: first === undefined ? judged.lossScale : withWindow(judged.lossScale, first.format),
    formats: judged.formats.map((f) => (f.lossScale === undefined ? f : { ...f, lossScale: withWindow(f.lossScale, f.format) })),
  };
}

function windowSummary(answer: LossScaleAnswer): LossScaleWindowSummary {
  const w = answer.window;
  return {
    format: answer.format,
    lowestLog2: w.lowestLog2,
    highestLog2: w.highestLog2,
    pickLog2: w.pickLog2,
    empty: w.empty,
    upperEdgeSetBy: w.upperEdgeSetBy,
    lowerEdgeSetBy: w.lowerEdgeSetBy,
  };
}

/**
 * A spec's network built and matched to the spec's measured weights, once: what {@link check} needs, and the measured
 * weights the network cannot use. Give it to `check(spec, options, network)` in place of the measurements, and the
 * check builds and matches nothing again; given for another network than the spec's, check throws TypeError.
 */
export interface MeasuredNetwork {
  /** the spec it was made for; `check` takes it for that spec, or a copy that keeps its network (another plan) */
  readonly spec: NetworkSpec;
  /** the spec's measured data, undefined when it has none */
  readonly measurements: Measurements | undefined;
  /** the spec's graph, or why it cannot be built */
  readonly built: GraphResult;
  /** the graph weights matched to the measured ones; undefined without weight data or when the network cannot be built */
  readonly calibration: WeightCalibration | undefined;
  /**
   * the measured weights that a weight of the network matched by name but cannot use, as they hold another number of
   * elements, one line each ({@link measuredWeightProblems}); the reading problems stay in `measurements.problems`
   */
  readonly weightProblems: readonly string[];
}

/**
 * Build the spec's network and match its measured weights (from {@link loadSpecMeasurements}) to it, once: the problems
 * to report and what {@link check} needs, so that reporting them and checking cost one graph build and one matching.
 */
export function measuredNetwork(spec: NetworkSpec, measurements: Measurements | undefined): MeasuredNetwork {
  assertSpec(spec, "measuredNetwork");
  const built = buildGraph(spec);
  const weights = measurements?.weights;
  const calibration = built.ok && weights !== undefined ? calibrateGraph(built.graph, weights, spec.measured?.names ?? {}) : undefined;
  return { spec, measurements, built, calibration, weightProblems: calibration === undefined ? [] : weightMismatchProblems(calibration) };
}

// Measurements never carry `built`, so this tells the two kinds of check()'s last argument apart
function isMeasuredNetwork(value: Measurements | MeasuredNetwork): value is MeasuredNetwork {
  return (value as Partial<MeasuredNetwork>).built !== undefined;
}

/** check()'s network: the one given when it was made for this spec's network, or one made now. */
function networkFor(spec: NetworkSpec, given: Measurements | MeasuredNetwork | undefined): MeasuredNetwork {
  if (given === undefined || !isMeasuredNetwork(given)) return measuredNetwork(spec, given);
  if (!sameNetwork(given.spec, spec)) {
    throw new TypeError(`the measured network was made for another network than the spec "${spec.name}" checked (make it with measuredNetwork(spec, measurements))`);
  }
  return given;
}

/**
 * Whether two specs give the same graph and weight matching: they share every part the graph is built from (name,
 * input, training, blocks, layers) and the `measured` section, as a copy of a spec with another plan does.
 */
function sameNetwork(a: NetworkSpec, b: NetworkSpec): boolean {
  return a === b || (a.name === b.name && a.input === b.input && a.training === b.training && a.blocks === b.blocks && a.layers === b.layers && a.measured === b.measured);
}

/**
 * The prediction, with measured data where the spec has it: measured weights replace the initialisation before
 * propagation; recorded statistics replace profiles after it (src/measure/calibrate.ts).
 */
function measuredPrediction(graph: Graph, network: MeasuredNetwork, spec: NetworkSpec): { prediction: Prediction; unused: UnusedStatistic[] } {
  const measurements = network.measurements;
  // check returns none of the prediction's tensors: their ledgers need not be own properties
  if (measurements === undefined) return { prediction: predictForCheck(graph, spec), unused: [] };
  const calibration = network.calibration;
  const prediction = predictForCheck(calibration?.graph ?? graph, spec);
  const applied = applyMeasurements(prediction, calibration, measurements.statistics, measurements.statisticsFile);
  return { prediction: applied.prediction, unused: applied.report.unusedStatistics };
}

/**
 * Read what a spec's `measured` section names (weight files, a recorded-statistics file), for {@link check};
 * undefined when the spec has none. Problems come back as one-line messages in `problems`. With a `cache`, specs
 * with the same source and section (variants of one spec that leave the section alone) share one reading.
 */
export async function loadSpecMeasurements(spec: NetworkSpec, cache?: Map<string, Promise<Measurements>>): Promise<Measurements | undefined> {
  const measured = spec.measured;
  if (measured === undefined) return undefined;
  if (cache === undefined) return loadMeasurements(measured, spec.source);
  const key = JSON.stringify([spec.source, measured]);
  let loading = cache.get(key);
  if (loading === undefined) cache.set(key, (loading = loadMeasurements(measured, spec.source)));
  return loading;
}

/**
 * Problems of a spec's measured data (`measurements.problems`, a measured network's `weightProblems`), one line each,
 * as issues positioned at the spec's `measured` section.
 */
export function measuredIssues(problems: readonly string[], locate: (path: SpecPath) => SpecPosition): SpecIssue[] {
  return positionIssues(locate, problems.map((message) => ({ path: ["measured"], message })));
}

/**
 * The measured weights that a weight of the spec's network matched by name but cannot use, as they hold another
 * number of elements, one line each (file, tensor, both sizes): the check leaves those weights at the spec's
 * initialisation. They depend on the network, so each variant of a spec has its own. None when the network cannot
 * be built (the check says why). This builds the network: to check the spec too, take {@link measuredNetwork}'s
 * `weightProblems` and give the network to {@link check}, which then builds nothing again.
 */
export function measuredWeightProblems(spec: NetworkSpec, measurements: Measurements | undefined): string[] {
  if (measurements?.weights === undefined || measurements.weights.tensors.length === 0) return [];
  return [...measuredNetwork(spec, measurements).weightProblems];
}

function choosePlan(spec: NetworkSpec, name: string | undefined): PrecisionPlan {
  if (name === undefined || name === spec.precision.name) return spec.precision;
  const found = spec.plans.find((plan) => plan.name === name);
  if (found === undefined) throw new UnknownPlanError(name, [spec.precision.name, ...spec.plans.map((plan) => plan.name)]);
  return found;
}

/** The result of {@link checkFile}: a check, or the problems of the spec file, positioned. */
export type CheckFileResult =
  | { ok: true; result: CheckAnswer; warnings: SpecIssue[] }
  | { ok: false; issues: SpecIssue[] };

/**
 * Load a spec file and check it. Problems of the file or of its network come back as positioned issues
 * (render them with formatSpecIssue); bad options still throw RangeError.
 */
export async function checkFile(path: string, options: CheckAnswerOptions = {}): Promise<CheckFileResult> {
  const loaded = await loadSpec(path);
  if (!loaded.ok) return { ok: false, issues: loaded.issues };
  const measurements = await loadSpecMeasurements(loaded.spec);
  // one graph build and weight matching serves the warnings and the check
  const network = measuredNetwork(loaded.spec, measurements);
  // unreadable or unusable measured data leaves those profiles predicted; say so at the spec's `measured` key
  const measuredWarnings = measuredIssues([...(measurements?.problems ?? []), ...network.weightProblems], loaded.locate);
  try {
    return { ok: true, result: check(loaded.spec, options, network), warnings: [...loaded.warnings, ...measuredWarnings] };
  } catch (error) {
    // a network that cannot be built, or values whose prediction leaves binary64's range: the spec's problems
    if (error instanceof CheckInputError || error instanceof PredictionRangeError) {
      return {
        ok: false,
        issues: positionIssues(loaded.locate, error.issues),
      };
    }
    throw error;
  }
}
