/**
 * A prediction judged against a precision plan: risk per tensor and format, operation hazards, a verdict per
 * format with its reasons. Pure; `check` (src/check.ts) builds the prediction and calls {@link judgePrediction}.
 */
import { blockScaledRiskCached } from "./blocks.js";
import { FORMATS, type Format } from "../formats/index.js";
import { FORMAT_NAMES, isFormatName, type FormatName } from "../formats/names.js";
import type {
  HazardKind,
  HazardSite,
  LedgerEntry,
  MagnitudeProfile,
  PlanSlot,
  Prediction,
  TensorPrediction,
  TensorRole,
} from "../magnitude/types.js";
import { gradientContributions, gradientSumFormat } from "../spec/normalize.js";
import { lossScaleProblem } from "../spec/limits.js";
import { withProfiles } from "../magnitude/copy.js";
import type { LayerFamily, NetworkSpec, PrecisionPlan } from "../spec/types.js";
import { DEFAULT_THRESHOLDS } from "./catalogue.js";
import { countedQuiet, evaluateHazard, evaluateSite, type HazardContext } from "./hazards.js";
import { rangeLimits, sameDistribution } from "./profile.js";
import { byRms, clippedWeightGradients, hasSite, weightGradientsOf } from "./second-moments.js";
import {
  isProbabilityRow,
  lossScaleFactor,
  overflowAtRiskThreshold,
  scaledTensor,
  scaledTensorRisk,
  worstVerdict,
  type ScaledTensor,
  type TensorFormatRisk,
  type TensorRiskOptions,
  type TensorStatistics,
} from "./tensor.js";
import { countedFindings, decidedFindings, FormatDecision } from "./decide.js";
import { FOUND, isGradientRole, NO_FINDINGS } from "./tensor-finding.js";
import { CheckedTensor } from "./tensor-check.js";
import type { Finding, HazardCheck, HazardEvaluation, RangeLimits, RiskThresholds, Verdict } from "./types.js";
import { judgeFindings } from "./judgement.js";
import { worseVerdict } from "./verdict.js";
import { plainNumber, scaleWords } from "./words.js";

/** Options of `check` and {@link judgePrediction}. */
export interface CheckOptions {
  /** judge these formats instead of the plan's (a format the plan does not use replaces its reduced formats) */
  formats?: readonly FormatName[];
  /** a static loss scale to judge instead of the plan's */
  lossScale?: number;
  /** the plan to judge, by name: the spec's `precision` (the default) or one of its `plans` */
  plan?: string;
  /** thresholds to use instead of the defaults (DEFAULT_THRESHOLDS) */
  thresholds?: Partial<RiskThresholds>;
  /** keep each tensor's ledger in the result (what `explain` shows); off by default, as ledgers are long */
  ledger?: boolean;
  /** also report each tensor's numbers in the judged formats that do not hold it (off by default) */
  everyFormat?: boolean;
  /**
   * loss-scale windows searched for the gradients (set by `check`: one per gradient format of the formats judged); when
   * no scale is given, each window's pick is applied to every judged format whose plan as judged (`planFor`) holds
   * gradients in the window's format
   */
  lossScaleWindows?: readonly LossScaleWindowSummary[];
  /**
   * the older spelling for one window, kept for callers of `judgePrediction`: the same as one more entry at the end of
   * `lossScaleWindows` (read in one place, `windowsOf`)
   * @deprecated give `lossScaleWindows: [window]`
   */
  lossScaleWindow?: LossScaleWindowSummary;
}

/** The plan entries a format can hold. */
export type PlanEntry = PlanSlot | "accumulate" | "gradientSums";

const PLAN_ENTRIES: readonly PlanEntry[] = ["activations", "weights", "gradients", "optimizerStates", "accumulate", "gradientSums"];

/** The judgement of one format. */
export interface FormatCheck {
  format: FormatName;
  /** whether the plan uses the format; otherwise it stands in for the plan's reduced formats */
  planned: boolean;
  /** the plan entries the format holds when it is judged */
  holds: PlanEntry[];
  /**
   * an 8-bit format only: the scale factors it was judged with, the plan's own, or the spec's default (per-tensor) for an
   * 8-bit format standing in for a plan that holds none (`planFor`), which the top-level `plan` does not show
   */
  scaling?: PrecisionPlan["scaling"];
  /** present when the format was judged at another loss scale than the result's `lossScale` (its own gradients' window, or none) */
  lossScale?: AppliedLossScale;
  verdict: Verdict;
  /** one sentence per kind of finding, most serious first */
  reasons: string[];
  /** tensors the format holds */
  tensorsJudged: number;
  findings: Finding[];
  /**
   * a planned format only, present when it loses values (flushed or overflowed) of stored tensors that others are computed
   * from (not weight gradients, which only the optimizer reads, nor the loss): how many, and the first in the order they
   * are computed. The prediction does not carry those losses into the tensors computed from them (the assumptions say so).
   */
  valuesLost?: { tensors: number; first: string };
}

/** One tensor: its prediction and its risk in every judged format. */
export interface TensorCheck {
  id: string;
  layer: string;
  layerIndex: number;
  family: LayerFamily | "input" | "loss";
  role: TensorRole;
  slot: PlanSlot;
  shape: number[];
  source: "predicted" | "measured";
  /** present on a tensor whose elements are stored in another tensor's array (TensorPrediction.partOf) */
  partOf?: string;
  /** predicted profiles, before the loss scale */
  start: MagnitudeProfile;
  end: MagnitudeProfile;
  /** the factors from the seed to the tensor; present when the check was asked for ledgers */
  ledger?: LedgerEntry[];
  /** rms, predicted max and low magnitude after the result's loss scale (`statistics.factor`) */
  statistics: TensorStatistics;
  /** one entry per judged format that holds the tensor (every judged format with `everyFormat`), in the order of `formats` */
  risks: TensorCheckRisk[];
  /** the worst verdict over the formats that hold it */
  verdict: Verdict;
}

/**
 * A tensor's risk in one format; `statistics` is present when the format was judged at another loss scale than the
 * tensor's `statistics` (the numbers after that format's scale).
 */
export interface TensorCheckRisk extends TensorFormatRisk {
  statistics?: TensorStatistics;
}

/** A window of loss scales found for a gradient format (by src/scale's search), as the check reports it. */
export interface LossScaleWindowSummary {
  /** the format the gradients are held in */
  format: FormatName;
  /** smallest exponent k whose flushing is tolerated; null when none is */
  lowestLog2: number | null;
  /** largest exponent k whose overflow risk is within budget; null when none is */
  highestLog2: number | null;
  /** the recommended exponent; null when the window is empty */
  pickLog2: number | null;
  empty: boolean;
  /** the tensor whose overflow sets the upper edge, and the one whose flushing sets the lower edge */
  upperEdgeSetBy: string | null;
  lowerEdgeSetBy: string | null;
}

/** The loss scale the check applied to gradients, and where it came from. */
export interface AppliedLossScale {
  value: number;
  /** plan: the spec's plan; option: the caller; recommended: the pick of the window below; none: 1 */
  origin: "plan" | "option" | "recommended" | "none";
  /** present when the check searched for a loss scale (the plan gives none and gradients are in a narrow format) */
  window?: LossScaleWindowSummary;
}

/** Everything `check` found: plain JSON-able data (documented field by field in README.md). */
export interface CheckResult {
  /** version of this result's layout: 2 since Adam's second moment has its own hazard kind and the optimizer says which findings it leaves to the hazards */
  version: 2;
  spec: { name: string; source: string; description: string };
  /** the plan judged */
  plan: PrecisionPlan;
  /** the loss scale applied to gradients: that of the first format judged; a format judged at another gives its own `lossScale` */
  lossScale: AppliedLossScale;
  /** the worst verdict over the judged formats */
  verdict: Verdict;
  formats: FormatCheck[];
  /** every tensor of one training step, forward order then backward order */
  tensors: TensorCheck[];
  hazards: HazardCheck[];
  thresholds: RiskThresholds;
  /** what the prediction and the judgement assume, one sentence each */
  assumptions: string[];
  /**
   * rows of the spec's recorded statistics that no tensor took (set by `check`; absent when every row was used): the
   * tensor and role as written, where the row was read, the tensors it could mean when several fit (empty: none), and
   * all that in words
   */
  unusedStatistics?: { tensor: string; role: TensorRole; at: string; candidates: string[]; sentence: string }[];
  /** the reminder that these are estimates, and the run that confirms them */
  caution: string;
}

/** The caution every answer carries. */
export const CAUTION =
  "These are estimates from an analytic model of the network's magnitudes, not guarantees: confirm them with a " +
  "short run of a few hundred steps in the planned formats, watching for inf/NaN, zero gradients and the loss, " +
  "before a long one.";

/** Whether a format is narrower than binary32 (fewer significand bits): a reduced-precision format. */
function isReduced(format: Format): boolean {
  return format.precision < FORMATS.binary32.precision;
}

// by named fields: a look-up by a key that varies is a slow one, and the judge asks it per tensor
function entryFormat(plan: PrecisionPlan, entry: PlanEntry): FormatName {
  switch (entry) {
    case "activations":
      return plan.activations;
    case "weights":
      return plan.weights;
    case "gradients":
      return plan.gradients;
    case "optimizerStates":
      return plan.optimizerStates;
    case "accumulate":
      return plan.accumulate;
    case "gradientSums":
      return gradientSumFormat(plan);
  }
}

/**
 * The plan as it stands when `format` is judged: the plan itself when it uses the format; otherwise the plan
 * with every reduced-precision entry held in `format` instead (or, when the plan has none, its activations,
 * weights and gradients).
 */
export function planFor(plan: PrecisionPlan, format: FormatName): PrecisionPlan {
  if (PLAN_ENTRIES.some((entry) => entryFormat(plan, entry) === format)) return plan;
  const reduced = PLAN_ENTRIES.filter((entry) => isReduced(FORMATS[entryFormat(plan, entry)]));
  const replaced: readonly PlanEntry[] = reduced.length > 0 ? reduced : ["activations", "weights", "gradients"];
  const result: PrecisionPlan = { ...plan };
  // a plan naming no sum format keeps none: its sums follow the gradients wherever they go
  for (const entry of replaced) if (entry !== "gradientSums" || plan.gradientSums !== undefined) result[entry] = format;
  // scale factors apply to 8-bit formats only, so a plan that holds none has made no choice about them: an 8-bit format
  // put in its place takes the default of a spec that names one (per-tensor, src/spec/normalize.ts), as the same plan
  // written with that format would
  if (FORMATS[format].bits === 8 && plan.scaling === "none" && !holdsEightBit(plan)) result.scaling = "tensor";
  return result;
}

// whether any role of the plan (the master copy too) is held in an 8-bit format, as the spec's scaling default reads it
function holdsEightBit(plan: PrecisionPlan): boolean {
  const roles = [plan.activations, plan.weights, plan.gradients, plan.optimizerStates, plan.masterWeights];
  return roles.some((role) => role !== "none" && FORMATS[role].bits === 8);
}

/** The formats a plan uses, in plan-entry order, each once. */
export function planFormats(plan: PrecisionPlan): FormatName[] {
  const formats: FormatName[] = [];
  for (let i = 0; i < PLAN_ENTRIES.length; i++) {
    const format = entryFormat(plan, PLAN_ENTRIES[i] as PlanEntry);
    if (!formats.includes(format)) formats.push(format);
  }
  return formats;
}

/** A format's range under the plan's conversion options. */
export function limitsFor(plan: PrecisionPlan, name: FormatName): RangeLimits {
  const format = FORMATS[name];
  const eightBit = format.bits === 8;
  return rangeLimits(format, {
    // the plan's overflow mode governs 8-bit conversions; IEEE 16- and 32-bit formats overflow to infinity
    saturate: eightBit && plan.overflow === "saturate",
    // bfloat16 is modelled flush-to-zero by default (SCIENCE.md §1.2 modelling choice)
    flushSubnormals: plan.flushSubnormals || format.subnormalsOftenFlushed,
  });
}

// the scale given for every format (the caller's, then the plan's); undefined when each format's window decides
function givenLossScale(plan: PrecisionPlan, options: CheckOptions): AppliedLossScale | undefined {
  if (options.lossScale !== undefined) {
    // the spec's rule for `loss-scale` (a power of two in binary32's normal range), so a library caller, a flag and a
    // spec accept the same scales
    const problem = lossScaleProblem(options.lossScale);
    if (problem !== undefined) throw new RangeError(`the loss scale ${problem}`);
    return { value: options.lossScale, origin: "option" };
  }
  if (plan.lossScale !== undefined) return { value: plan.lossScale, origin: "plan" };
  return undefined;
}

function windowScale(window: LossScaleWindowSummary): AppliedLossScale {
  if (window.pickLog2 !== null) return { value: 2 ** window.pickLog2, origin: "recommended", window };
  return { value: 1, origin: "none", window };
}

/**
 * The loss scale each setting is judged at: the given one for all; otherwise the pick of the window searched for the
 * gradient format of the setting's plan as judged, or none (a format whose gradients need no scale, or no window given).
 * Settings judged at the same scale share one object.
 */
function settingScales(given: AppliedLossScale | undefined, settings: readonly FormatSetting[], options: CheckOptions): AppliedLossScale[] {
  const scales: AppliedLossScale[] = [];
  if (given !== undefined) {
    for (let i = 0; i < settings.length; i++) scales.push(given);
    return scales;
  }
  const windows = windowsOf(options);
  const applied = windows.map(windowScale);
  let unscaled: AppliedLossScale | undefined;
  for (let i = 0; i < settings.length; i++) {
    const gradients = (settings[i] as FormatSetting).evaluated.gradients;
    const found = windows.findIndex((w) => w.format === gradients);
    scales.push(found >= 0 ? (applied[found] as AppliedLossScale) : (unscaled ??= { value: 1, origin: "none" }));
  }
  return scales;
}

// the windows given, the older single `lossScaleWindow` mapped onto the list (its only reader)
function windowsOf(options: CheckOptions): readonly LossScaleWindowSummary[] {
  const single = options.lossScaleWindow;
  if (single === undefined) return options.lossScaleWindows ?? [];
  return [...(options.lossScaleWindows ?? []), single];
}

/**
 * The formats a judgement with these options judges, each once, after validating the options: the given loss scale
 * (RangeError unless positive and finite), then every name of `formats` (RangeError naming an unknown one, with the
 * accepted names). The one place they are checked: `check` calls it before any work, {@link judgePrediction} too.
 */
export function checkedFormats(plan: PrecisionPlan, options: CheckOptions): FormatName[] {
  // a bad loss scale is reported before an unknown format, as it always was
  givenLossScale(plan, options);
  return judgedFormats(plan, options);
}

function judgedFormats(plan: PrecisionPlan, options: CheckOptions): FormatName[] {
  if (options.formats === undefined || options.formats.length === 0) return planFormats(plan);
  const formats: FormatName[] = [];
  for (let i = 0; i < options.formats.length; i++) {
    const name = options.formats[i] as FormatName;
    if (!isFormatName(name)) throw new RangeError(`unknown format "${String(name)}"; accepted: ${FORMAT_NAMES.join(", ")}`);
    if (!formats.includes(name)) formats.push(name);
  }
  return formats;
}

/**
 * The tensors as the plan stores them. A plan that sums the gradients of several workers or accumulation steps in a
 * format of its own (`gradient-sums`) holds each micro-batch's weight gradient in the gradient format and the combined
 * one only in the sum buffer: those weight gradients are judged at one contribution (their gradient-sum site's input,
 * at the start and the end), the sum by its site. Otherwise the tensors as predicted (the combined gradient, stored in
 * the gradient format).
 */
export function storedTensors(prediction: Prediction, plan: PrecisionPlan): readonly TensorPrediction[] {
  if (gradientSumFormat(plan) === plan.gradients) return prediction.tensors;
  const sites = new Map<string, HazardSite>();
  for (const site of prediction.hazards) if (site.kind === "gradient-sum" && site.tensor !== undefined) sites.set(site.tensor, site);
  if (sites.size === 0) return prediction.tensors;
  return prediction.tensors.map((t) => {
    const site = t.role === "weight-gradient" ? sites.get(t.id) : undefined;
    return site === undefined ? t : withProfiles(t, site.input, site.end?.input ?? site.input);
  });
}

/**
 * Judge a prediction (from the magnitude engine, or measured) against the spec's plan. This is `check` after the
 * prediction step; it lets a caller judge a prediction it made or adjusted itself.
 */
export function judgePrediction(spec: NetworkSpec, prediction: Prediction, options: CheckOptions = {}): CheckResult {
  return judged(spec, prediction, options, undefined);
}

/**
 * {@link judgePrediction} at other loss scales than an earlier judgement `earlier` of the same spec, prediction and
 * options (the same formats, thresholds and output options; only the windows' picks differ, as when check's weighed
 * pick moves): what no loss scale moves — the tensors of roles the scale does not multiply (activations, weights: a
 * factor of 1 at every scale, lossScaleFactor) and the operation sites that are not scaled ({@link isScaledSite}) — is
 * taken from `earlier` as judged there, the rest judged afresh. The result is the one judgePrediction gives.
 */
export function judgePredictionAgain(earlier: CheckResult, spec: NetworkSpec, prediction: Prediction, options: CheckOptions): CheckResult {
  return judged(spec, prediction, options, earlier);
}

function judged(spec: NetworkSpec, prediction: Prediction, options: CheckOptions, earlier: CheckResult | undefined): CheckResult {
  const plan = spec.precision;
  const thresholds = thresholdsOf(options.thresholds === undefined ? DEFAULT_THRESHOLDS : { ...DEFAULT_THRESHOLDS, ...options.thresholds });
  // a bad loss scale is reported before an unknown format, as it always was
  const given = givenLossScale(plan, options);
  const formats = judgedFormats(plan, options);
  const settings = formatSettings(plan, formats, thresholds);
  const scales = settingScales(given, settings, options);
  for (let i = 0; i < settings.length; i++) (settings[i] as FormatSetting).lossScale = (scales[i] as AppliedLossScale).value;
  const lossScale = scales[0] as AppliedLossScale;
  const tensors = judgeTensors(storedTensors(prediction, plan), settings, lossScale.value, thresholds, options.everyFormat === true, options.ledger === true, earlier?.tensors);
  const allWeightGradients = weightGradientsOf(prediction);
  // only Adam's epsilon count reads them: as its states see them, clipped
  const weightGradients = clippedWeightGradients(allWeightGradients, spec.training.optimizer.clipNorm);
  const training = trainingSites(spec, prediction, allWeightGradients, weightGradients);
  const contexts = hazardContexts(spec, settings, thresholds, weightGradients);
  const hazards = judgeSites(prediction.hazards, training, settings, contexts, spec, lossScale.value, thresholds, weightGradients, earlier?.hazards);
  const formatChecks: FormatCheck[] = [];
  const sums = gradientContributions(spec.training) > 1;
  let verdict: Verdict = "fits";
  for (let i = 0; i < settings.length; i++) {
    const formatCheck = judgeFormat(settings[i] as FormatSetting, plan, hazards, scales[i] === lossScale ? undefined : scales[i], sums);
    verdict = worseVerdict(verdict, formatCheck.verdict);
    formatChecks.push(formatCheck);
  }
  const assumptions: string[] = [];
  for (let i = 0; i < prediction.assumptions.length; i++) assumptions.push(prediction.assumptions[i] as string);
  checkAssumptions(assumptions, plan, settings, scales, training.length > 0, thresholds);
  for (let i = 0; i < settings.length; i++) {
    const setting = settings[i] as FormatSetting;
    const lost = valuesLost(setting);
    if (lost === undefined) continue;
    (formatChecks[i] as FormatCheck).valuesLost = lost;
    assumptions.push(
      `Each tensor is predicted from exact values of the tensors it is computed from. In ${setting.format}, ${lost.tensors === 1 ? "one stored tensor flushes or overflows" : `${lost.tensors} stored tensors flush or overflow`} (${lost.tensors === 1 ? "" : "the first: "}${lost.first}); ` +
        "what they lose is not carried into the tensors computed from them, forward or backward, so those can differ from these predictions: " +
        "a flushed value arrives as an exact zero, an overflowed one as infinity, and a ReLU whose input flushed zeroes its gradient too. Fix those first, then check again.",
    );
  }

  return {
    version: 2,
    spec: { name: spec.name, source: spec.source, description: spec.description },
    plan,
    lossScale,
    verdict,
    formats: formatChecks,
    tensors,
    hazards,
    thresholds,
    assumptions,
    caution: CAUTION,
  };
}

/**
 * What moves with the loss scale in a prediction: the gradient tensors, and the sites of the scaled loss and of
 * gradient sums (the prediction's and the training setup's, as {@link judgePrediction} makes them). Made once and
 * judged at many scales by {@link judgeScaled}.
 */
export interface ScaledSubjects {
  spec: NetworkSpec;
  tensors: readonly TensorPrediction[];
  sites: readonly { site: HazardSite; origin: HazardCheck["origin"] }[];
  weightGradients: readonly TensorPrediction[];
  /** the parts of each stored array that holds several tensors (storedArrays) */
  arrays: Map<string, TensorPrediction[]> | null;
}

/** Whether an operation site's numbers move with the loss scale: the scaled loss, and gradients summed across workers or steps. */
export function isScaledSite(kind: HazardKind, gradient?: boolean): boolean {
  return kind === "loss-value" || kind === "gradient-sum" || gradient === true;
}

export function scaledSubjects(spec: NetworkSpec, prediction: Prediction): ScaledSubjects {
  const sites: ScaledSubjects["sites"][number][] = [];
  for (const site of prediction.hazards) if (isScaledSite(site.kind, site.gradient)) sites.push({ site, origin: "prediction" });
  const allWeightGradients = weightGradientsOf(prediction);
  const weightGradients = clippedWeightGradients(allWeightGradients, spec.training.optimizer.clipNorm);
  for (const site of trainingSites(spec, prediction, allWeightGradients, weightGradients)) if (isScaledSite(site.kind)) sites.push({ site, origin: "training setup" });
  const tensors = storedTensors(prediction, spec.precision).filter((t) => isGradientRole(t.role));
  // as judgePrediction passes them to the hazards: clipped
  return { spec, tensors, sites, weightGradients, arrays: storedArrays(tensors) };
}

/**
 * The findings of the scaled subjects in one format with gradients at `lossScale`, by {@link judgePrediction}'s rules
 * and thresholds, subject by subject in `order`: index i < sites.length is site i, the rest tensor i − sites.length.
 * The scaled loss is visited in every format that holds it (the activation and the accumulate format), since the same
 * scale moves it there. `visit` gets each finding with its subject's index and whether it is conditional (at risk only
 * where an implementation keeps the value in the activation format, {@link isConditionalFinding}), and returns false to
 * stop: a caller comparing scales stops one once it cannot do better. The findings are made to be counted: their
 * numbers are judgePrediction's, but no sentence is written (a weighed scale's thousands of findings are never told),
 * and a tensor's finding decided by bounds (src/risk/decide.ts countedFindings) carries no moment (`at`). `kindsOnly`:
 * the visitor reads only each finding's kind and severity (besides the subject's index and the condition), so the
 * tensors' findings may be shared records without values or subject (the loss-scale pick's counts).
 */
export function judgeScaled(
  subjects: ScaledSubjects,
  format: FormatName,
  lossScale: number,
  thresholds: Partial<RiskThresholds> | undefined,
  order: readonly number[],
  visit: (finding: CountedFinding, subject: number, conditional: boolean) => boolean,
  kindsOnly = false,
): void {
  const complete = thresholdsOf(thresholds === undefined ? DEFAULT_THRESHOLDS : { ...DEFAULT_THRESHOLDS, ...thresholds });
  const settings = formatSettings(subjects.spec.precision, [format], complete);
  const setting = settings[0] as FormatSetting;
  setting.lossScale = lossScale;
  setting.held.countOnly = true;
  setting.notHeld.countOnly = true;
  let context: HazardContext | undefined;
  const sites = subjects.sites.length;
  const memo = scaledMemo(subjects, format, complete);
  const quiet = memo.scales;
  // indexed loops: an iterator's result objects are a heap allocation per subject where the loop is not optimized
  for (let o = 0; o < order.length; o++) {
    const i = order[o] as number;
    if (i < sites) {
      const { site, origin } = subjects.sites[i] as ScaledSubjects["sites"][number];
      if (context === undefined) {
        context = hazardContext(subjects.spec, setting.evaluated, lossScale, complete, subjects.weightGradients);
        context.countOnly = true;
      }
      // a site whose overflow side a scale at least this large showed quiet has it quiet here (overflowQuietKnown)
      const shows = site.kind === "gradient-sum" || (site.kind === "accumulation" && site.gradient === true);
      const knownAbove = quiet[i] as number;
      context.overflowQuietKnown = shows && lossScale <= knownAbove;
      context.overflowQuietShown = true;
      // a gradient site whose count's first tests all pass leaves no finding: its drafts and record are not made
      if (shows && countedQuiet(site, context)) {
        if (context.overflowQuietShown && lossScale > knownAbove) quiet[i] = lossScale;
        continue;
      }
      context.overflowQuietShown = true;
      const checked = evaluateHazard(site, context, origin);
      if (shows && context.overflowQuietShown && lossScale > knownAbove) quiet[i] = lossScale;
      const loss = site.kind === "loss-value";
      const findings = checked.findings;
      for (let k = 0; k < findings.length; k++) {
        const f = findings[k] as Finding;
        if (f.format !== format && !loss) continue;
        if (!visit(f, i, isConditionalFinding(checked, f))) return;
      }
      continue;
    }
    const tensor = subjects.tensors[i - sites] as TensorPrediction;
    // not held in the format: no findings (as judgeTensor judges it)
    if (entryFormat(setting.evaluated, heldBy(tensor)) !== format) continue;
    // the findings' kinds and severities alone, decided without the tensor's numbers where the bounds read its law
    const found = countedTensor(tensor, setting, lossScale, subjects.arrays, kindsOnly);
    if (found === 0) continue;
    if (found > 0) {
      // FOUND holds them until the next tensor's judgement, which a visitor may start (judging again): read out first,
      // into locals, not an array (countedFindings puts at most four: the overflow's or the headroom's, the energy's,
      // the flushed share's and the noise's)
      const f1 = FOUND[1] as Finding;
      const f2 = FOUND[2] as Finding;
      const f3 = FOUND[3] as Finding;
      if (!visit(FOUND[0] as Finding, i, false)) return;
      if (found > 1 && !visit(f1, i, false)) return;
      if (found > 2 && !visit(f2, i, false)) return;
      if (found > 3 && !visit(f3, i, false)) return;
      continue;
    }
    // the findings alone: the tensor's risk objects are not made
    for (const f of CheckedTensor.findingsIn(judgeTensor(tensor, settings, lossScale, complete, false, subjects.arrays, false, false, true), format)) {
      if (!visit(f, i, false)) return;
    }
  }
}

/**
 * What judgeScaled keeps of scaled subjects between its calls (a weighing counts the same subjects at several scales),
 * for the format and thresholds they were last counted in: per site, the largest loss scale at which its overflow side
 * was shown quiet (0: none; HazardContext.overflowQuietShown), quiet at every smaller one. The subjects are made once
 * and not changed (ScaledSubjects).
 */
interface ScaledMemo {
  format: FormatName;
  thresholds: RiskThresholds;
  scales: number[];
}
const SCALED_MEMOS = new WeakMap<ScaledSubjects, ScaledMemo>();

function scaledMemo(subjects: ScaledSubjects, format: FormatName, thresholds: RiskThresholds): ScaledMemo {
  const known = SCALED_MEMOS.get(subjects);
  if (known !== undefined && known.format === format && sameThresholds(known.thresholds, thresholds)) return known;
  // (a plain array: a typed array costs microseconds to make, as much as a small spec's count)
  const memo: ScaledMemo = { format, thresholds, scales: new Array<number>(subjects.sites.length).fill(0) };
  SCALED_MEMOS.set(subjects, memo);
  return memo;
}

function sameThresholds(a: RiskThresholds, b: RiskThresholds): boolean {
  if (a === b) return true;
  for (const key of Object.keys(a) as (keyof RiskThresholds)[]) if (a[key] !== b[key]) return false;
  return Object.keys(a).length === Object.keys(b).length;
}

// A tensor's counted findings in a setting that holds it (src/risk/decide.ts countedFindings, into FOUND), or −1 where
// judgeTensor judges it: a part of a stored array, a probability row, scale factors, a law the bounds do not read;
// `kindsOnly` as judgeScaled takes it
function countedTensor(tensor: TensorPrediction, setting: FormatSetting, lossScale: number, arrays: Map<string, TensorPrediction[]> | null, kindsOnly: boolean): number {
  if (setting.held.perTensorScaling || arrays?.has(tensor.id) === true || isProbabilityRow(tensor)) return -1;
  const same = sameDistribution(tensor.start, tensor.end);
  // the profiles before the factor, which the decision applies where it works a number out
  return countedFindings(tensor, tensor.start, same ? tensor.start : tensor.end, same, setting.decision, lossScaleFactor(tensor.role, lossScale), kindsOnly);
}

/**
 * A judged tensor's findings in one format (none where the format does not hold it), without making its risk objects
 * where the judgement has not made them yet (a check's tensors make them when their `risks` are first read).
 */
export function findingsOfTensor(tensor: TensorCheck, format: FormatName): readonly Finding[] {
  if (tensor instanceof CheckedTensor) return CheckedTensor.findingsIn(tensor, format);
  for (const risk of tensor.risks) if (risk.format === format) return risk.findings;
  return [];
}

/** A finding {@link judgeScaled} visits: what a count of findings reads (its sentence is not written). */
export type CountedFinding = Omit<Finding, "sentence">;

/**
 * Whether an operation's finding holds only where an implementation keeps the result in the activation format though
 * the plan accumulates in a wider one (the scaled loss, a norm's sum of squares): its rule caps it at "at risk"
 * (README "Verdicts"), and a pick of the loss scale weighs it after every finding that holds as planned.
 */
export function isConditionalFinding(hazard: Pick<HazardCheck, "evaluations">, finding: Pick<Finding, "source" | "severity" | "format">): boolean {
  if (finding.source !== "hazard" || finding.severity !== "at-risk") return false;
  // the activation format is evaluated apart only when it is not the accumulate format (src/risk/hazards.ts)
  return hazard.evaluations.some((e) => e.format === finding.format && e.heldIn === "activations" && e.measure === "overflow-risk" && e.verdict === "at-risk");
}

/** What every tensor's judgement in one format shares: the plan it is judged under, its range, its scaling. */
interface FormatSetting {
  format: FormatName;
  evaluated: PrecisionPlan;
  limits: RangeLimits;
  /** the risk options of a tensor the format holds, and of one it does not hold (reported with `everyFormat`) */
  held: TensorRiskOptions;
  notHeld: TensorRiskOptions;
  /** what deciding a held tensor's findings by bounds reads, worked out once for the format (src/risk/decide.ts) */
  decision: FormatDecision;
  /** index of the first setting judged under the same plan: one hazard evaluation serves both */
  contextIndex: number;
  /** the loss scale its gradients are judged at (settings under the same plan share one) */
  lossScale: number;
  /** the findings of the tensors it judges (judgeTensors fills them, judgeFormat adds the hazards'), and their count */
  findings: Finding[];
  tensorsJudged: number;
  /** whether `evaluated` is the plan itself (the format is planned) */
  planned: boolean;
  /** in a planned format, the stored tensors it loses values of and the first of them (gathered by judgeTensors) */
  lost: number;
  lostFirst: string;
}

function formatSettings(plan: PrecisionPlan, formats: readonly FormatName[], thresholds: RiskThresholds): FormatSetting[] {
  const settings: FormatSetting[] = [];
  for (let i = 0; i < formats.length; i++) {
    const format = formats[i] as FormatName;
    const evaluated = planFor(plan, format);
    const eightBit = FORMATS[format].bits === 8;
    const perTensorScaling = eightBit && evaluated.scaling !== "none";
    const blockScaling = eightBit && evaluated.scaling === "block" ? blockScaledRiskCached(FORMATS[format]) : null;
    let contextIndex = i;
    for (let j = 0; j < i; j++) {
      if ((settings[j] as FormatSetting).evaluated === evaluated) {
        contextIndex = j;
        break;
      }
    }
    const limits = limitsFor(evaluated, format);
    settings.push({
      format,
      evaluated,
      limits,
      held: { judged: true, perTensorScaling, blockScaling, thresholds, countOnly: false },
      notHeld: { judged: false, perTensorScaling, blockScaling, thresholds, countOnly: false },
      decision: new FormatDecision(limits, thresholds),
      contextIndex,
      lossScale: 1,
      findings: [],
      tensorsJudged: 0,
      planned: evaluated === plan,
      lost: 0,
      lostFirst: "",
    });
  }
  return settings;
}

// a copy of complete thresholds built by one literal, so every check's thresholds share one layout
function thresholdsOf(t: RiskThresholds): RiskThresholds {
  return {
    overflowAtRisk: t.overflowAtRisk,
    overflowFails: t.overflowFails,
    energyAtRisk: t.energyAtRisk,
    energyFails: t.energyFails,
    flushedAtRisk: t.flushedAtRisk,
    flushedFails: t.flushedFails,
    subnormalNoiseAtRisk: t.subnormalNoiseAtRisk,
    headroomAtRisk: t.headroomAtRisk,
    accumulationAtRisk: t.accumulationAtRisk,
    accumulationFails: t.accumulationFails,
    maxQuantile: t.maxQuantile,
    lowQuantile: t.lowQuantile,
  };
}

function judgeTensors(
  predicted: readonly TensorPrediction[],
  settings: readonly FormatSetting[],
  lossScale: number,
  thresholds: RiskThresholds,
  everyFormat: boolean,
  ledger: boolean,
  earlier: readonly TensorCheck[] | undefined,
): TensorCheck[] {
  // made at its length and filled in order (grown by push, its copies were ~90 kB of garbage a 1,000-layer check)
  const tensors: TensorCheck[] = new Array<TensorCheck>(predicted.length);
  const arrays = storedArrays(predicted);
  // each format's findings and count gathered by judgeTensor, in tensor order, rather than by a walk over every tensor
  // per format
  for (let i = 0; i < predicted.length; i++) {
    const tensor = predicted[i] as TensorPrediction;
    const before = earlier?.[i];
    // a tensor no scale multiplies, judged alone (not with the parts of a stored array), is what it was
    if (before instanceof CheckedTensor && before.id === tensor.id && lossScaleFactor(tensor.role, 2) === 1 && arrays?.has(tensor.id) !== true) {
      gatherFindings(before, tensor, settings, everyFormat);
      tensors[i] = before;
    } else {
      tensors[i] = judgeTensor(tensor, settings, lossScale, thresholds, everyFormat, arrays, ledger, true);
    }
  }
  return tensors;
}

// what judgeTensor gathers into each setting, for a tensor judged before
function gatherFindings(checked: CheckedTensor, tensor: TensorPrediction, settings: readonly FormatSetting[], everyFormat: boolean): void {
  const entry = heldBy(tensor);
  for (let i = 0; i < settings.length; i++) {
    const setting = settings[i] as FormatSetting;
    const judged = entryFormat(setting.evaluated, entry) === setting.format;
    if (!judged && !everyFormat) continue;
    gather(setting, tensor, CheckedTensor.findingsIn(checked, setting.format), judged);
  }
}

// a tensor's findings into its setting's, counted where the setting judges it (the loss in the accumulate format, not in
// its slot's), and in a planned format the tensor counted where they lose values (valuesLost)
function gather(setting: FormatSetting, tensor: TensorPrediction, found: readonly Finding[], judged: boolean): void {
  let loses = false;
  for (let k = 0; k < found.length; k++) {
    const finding = found[k] as Finding;
    setting.findings.push(finding);
    if (!loses) loses = LOSES_VALUES.has(finding.kind);
  }
  if (!judged) return;
  setting.tensorsJudged++;
  // judged in a planned format, its slot's format (the loss, held in the accumulate one, is not counted)
  if (loses && setting.planned && tensor.role !== "weight-gradient" && tensor.role !== "loss" && setting.lost++ === 0) setting.lostFirst = tensor.id;
}

// the plan entry whose format holds a tensor: the loss is a reduction, held in the accumulate format (Micikevicius et
// al. 2018 §3.3: reductions in FP32) as the scaled loss summed (lossScaleFactor); the loss-value hazard judges that
// value there too, and covers a loss kept in the activation format
function heldBy(tensor: TensorPrediction): PlanEntry {
  return tensor.role === "loss" ? "accumulate" : tensor.slot;
}

/** Per tensor that shares its stored array with others (`partOf`), every part of that array; null when none does. */
function storedArrays(predicted: readonly TensorPrediction[]): Map<string, TensorPrediction[]> | null {
  let arrays: Map<string, TensorPrediction[]> | null = null;
  for (let i = 0; i < predicted.length; i++) {
    const whole = (predicted[i] as TensorPrediction).partOf;
    if (whole === undefined) continue;
    arrays ??= new Map();
    if (!arrays.has(whole)) {
      const parts = predicted.filter((t) => t.id === whole || t.partOf === whole);
      for (const part of parts) arrays.set(part.id, parts);
    }
  }
  return arrays;
}

/** The statistics of a tensor that is part of a stored array, with the array's max (the larger of its parts'). */
function withArrayMax(scaled: ScaledTensor, parts: readonly TensorPrediction[], tensor: TensorPrediction, thresholds: RiskThresholds): ScaledTensor {
  let start = scaled.statistics.start.max;
  let end = scaled.statistics.end.max;
  for (const part of parts) {
    if (part === tensor) continue;
    const other = scaledTensor(part, scaled.statistics.factor, thresholds).statistics;
    start = Math.max(start, other.start.max);
    end = Math.max(end, other.end.max);
  }
  return { ...scaled, statistics: { ...scaled.statistics, arrayMax: { start, end } } };
}

/**
 * One tensor in every judged format that holds it (every judged format with `everyFormat`). Its findings and verdicts
 * are decided here, by bounds where they decide (src/risk/decide.ts); its statistics and numbers are worked out when
 * first read (src/risk/tensor-check.ts), except where the findings were judged from them (they are kept) or a stored
 * array, scale factors, a probability row or another format's loss scale is involved (worked out here, as before).
 */
function judgeTensor(
  tensor: TensorPrediction,
  settings: readonly FormatSetting[],
  lossScale: number,
  thresholds: RiskThresholds,
  everyFormat: boolean,
  arrays: Map<string, TensorPrediction[]> | null,
  ledger = false,
  gathering = false,
  counted = false,
): CheckedTensor {
  const parts = arrays?.get(tensor.id);
  // a part of a stored array is judged with the array's max, which its statistics carry: worked out here
  let scaled = parts === undefined ? undefined : withArrayMax(scaledTensor(tensor, lossScale, thresholds), parts, tensor, thresholds);
  const checked = new CheckedTensor(tensor, lossScale, thresholds, scaled, ledger, counted);
  const factor = lossScaleFactor(tensor.role, lossScale);
  const same = sameDistribution(tensor.start, tensor.end);
  const bounded = parts === undefined && !isProbabilityRow(tensor);
  // a format judged at another loss scale sees the tensor scaled by its own (gradients and the loss; the rest are unscaled)
  let other: ScaledTensor | undefined;
  const entry = heldBy(tensor);
  let verdict: Verdict = "fits";
  for (let i = 0; i < settings.length; i++) {
    const setting = settings[i] as FormatSetting;
    const judged = entryFormat(setting.evaluated, entry) === setting.format;
    if (!judged && !everyFormat) continue;
    const options = judged ? setting.held : setting.notHeld;
    // the risk's findings and verdict (its object is made when the tensor's risks are first read)
    let found: readonly Finding[];
    let riskVerdict: Verdict;
    if (setting.lossScale === lossScale || lossScaleFactor(tensor.role, setting.lossScale) === factor) {
      let findings: Finding[] | null = null;
      // the overflow probabilities deciding the findings worked out (−1: none), which the numbers then report
      let startOverflow = -1;
      let endOverflow = -1;
      if (!options.perTensorScaling) {
        if (!judged) findings = NO_FINDINGS;
        else if (bounded) {
          const decision = setting.decision;
          // the profiles before the factor, which the decision applies where it works a number out
          findings = decidedFindings(tensor, tensor.start, same ? tensor.start : tensor.end, same, decision, factor, options.countOnly !== true);
          startOverflow = decision.startOverflow;
          endOverflow = decision.endOverflow;
        }
      }
      if (findings !== null) {
        riskVerdict = worstVerdict(findings);
        CheckedTensor.addDecided(checked, findings, setting.limits, options, startOverflow, endOverflow);
        found = findings;
      } else {
        const risk = scaledTensorRisk(tensor, (scaled ??= CheckedTensor.scaled(checked)), setting.limits, options);
        CheckedTensor.addJudged(checked, risk);
        riskVerdict = risk.verdict;
        found = risk.findings;
      }
    } else {
      if (other === undefined || other.statistics.factor !== setting.lossScale) {
        other = scaledTensor(tensor, setting.lossScale, thresholds);
        if (parts !== undefined) other = withArrayMax(other, parts, tensor, thresholds);
      }
      const risk: TensorCheckRisk = { ...scaledTensorRisk(tensor, other, setting.limits, options), statistics: other.statistics };
      CheckedTensor.addJudged(checked, risk);
      riskVerdict = risk.verdict;
      found = risk.findings;
    }
    verdict = worseVerdict(verdict, riskVerdict);
    if (gathering) gather(setting, tensor, found, judged);
  }
  checked.verdict = verdict;
  return checked;
}

// per setting, the hazard context of its plan (settings judged under the same plan share one)
function hazardContexts(
  spec: NetworkSpec,
  settings: readonly FormatSetting[],
  thresholds: RiskThresholds,
  weightGradients: readonly TensorPrediction[],
): HazardContext[] {
  const contexts: HazardContext[] = [];
  for (let i = 0; i < settings.length; i++) {
    const setting = settings[i] as FormatSetting;
    contexts.push(
      setting.contextIndex === i
        ? hazardContext(spec, setting.evaluated, setting.lossScale, thresholds, weightGradients)
        : (contexts[setting.contextIndex] as HazardContext),
    );
  }
  return contexts;
}

// The checks of the prediction's operation sites, then the training setup's
function judgeSites(
  sites: readonly HazardSite[],
  training: readonly HazardSite[],
  settings: readonly FormatSetting[],
  contexts: readonly HazardContext[],
  spec: NetworkSpec,
  lossScale: number,
  thresholds: RiskThresholds,
  weightGradients: readonly TensorPrediction[],
  earlier: readonly HazardCheck[] | undefined,
): HazardCheck[] {
  // made at its length and filled in order, as judgeTensors' list
  const hazards: HazardCheck[] = new Array<HazardCheck>(sites.length + training.length);
  const one = oneContext(settings);
  // the earlier judgement's check of a site no scale moves serves as it is (the sites come in the same order)
  const reusable = earlier !== undefined && earlier.length === sites.length + training.length ? earlier : undefined;
  const judge = (site: HazardSite, origin: HazardCheck["origin"], at: number): HazardCheck => {
    const before = reusable?.[at];
    if (before !== undefined && !isScaledSite(site.kind, site.gradient) && before.kind === site.kind && before.origin === origin) return before;
    return one
      ? judgeSiteOnce(site, origin, settings, contexts[0] as HazardContext)
      : judgeSite(site, origin, settings, contexts, spec, lossScale, thresholds, weightGradients);
  };
  for (let i = 0; i < sites.length; i++) hazards[i] = judge(sites[i] as HazardSite, "prediction", i);
  for (let i = 0; i < training.length; i++) hazards[sites.length + i] = judge(training[i] as HazardSite, "training setup", sites.length + i);
  return hazards;
}

// whether every setting is judged under the first one's plan (the plan's own formats): one evaluation of a site then
// serves them all
function oneContext(settings: readonly FormatSetting[]): boolean {
  if (settings.length === 0) return false;
  for (let i = 0; i < settings.length; i++) if ((settings[i] as FormatSetting).contextIndex !== 0) return false;
  return true;
}

// One operation site under one plan for every judged format: judgeSite's check without a check per format to gather
// from. Its evaluations and findings are those of the judged formats, format by format in the settings' order, as
// judgeSite gathers them: evaluateSite's check itself where they are so already (most sites hold one format, or the
// activation format before the accumulate one).
function judgeSiteOnce(site: HazardSite, origin: HazardCheck["origin"], settings: readonly FormatSetting[], context: HazardContext): HazardCheck {
  const judged = evaluateSite(site, context, origin);
  const evaluations = judged.evaluations;
  const findings = judged.findings;
  const ordered = inSettingsOrder(evaluations, settings);
  const orderedFindings = inSettingsOrder(findings, settings);
  // evaluateSite's check has siteCheck's layout, and none of its evaluations names the check's own layer
  if (ordered && orderedFindings) return judged;
  return siteCheck(judged, judged, ordered ? evaluations : bySettings(evaluations, settings), orderedFindings ? findings : bySettings(findings, settings));
}

// whether each item's format is a judged one, the formats in the settings' order
function inSettingsOrder(items: readonly { format: FormatName }[], settings: readonly FormatSetting[]): boolean {
  let k = 0;
  for (let i = 0; i < items.length; i++) {
    const format = (items[i] as { format: FormatName }).format;
    while (k < settings.length && (settings[k] as FormatSetting).format !== format) k++;
    if (k === settings.length) return false;
  }
  return true;
}

// the items of each judged format, format by format in the settings' order
function bySettings<T extends { format: FormatName }>(items: readonly T[], settings: readonly FormatSetting[]): T[] {
  const kept: T[] = [];
  for (let k = 0; k < settings.length; k++) {
    const format = (settings[k] as FormatSetting).format;
    for (let i = 0; i < items.length; i++) if ((items[i] as T).format === format) kept.push(items[i] as T);
  }
  return kept;
}

const SITE_EVALUATIONS: HazardEvaluation[] = [];
const SITE_FINDINGS: Finding[] = [];

// One operation site: each judged format sees it under its own plan; keep the evaluations in that format.
function judgeSite(
  site: HazardSite,
  origin: HazardCheck["origin"],
  settings: readonly FormatSetting[],
  contexts: readonly HazardContext[],
  spec: NetworkSpec,
  lossScale: number,
  thresholds: RiskThresholds,
  weightGradients: readonly TensorPrediction[],
): HazardCheck {
  const perFormat: HazardCheck[] = [];
  for (let i = 0; i < settings.length; i++) {
    const shared = (settings[i] as FormatSetting).contextIndex;
    perFormat.push(shared === i ? evaluateHazard(site, contexts[i] as HazardContext, origin) : (perFormat[shared] as HazardCheck));
  }
  const first = perFormat[0] ?? evaluateHazard(site, hazardContext(spec, spec.precision, lossScale, thresholds, weightGradients), origin);
  // the layer and input named: those of the first plan whose evaluation names the tensor contributing most to a
  // network-wide count (Adam's epsilon), as its sentence does; else the site's
  let named = first;
  for (let i = 0; i < perFormat.length && named.input === site.input; i++) named = perFormat[i] as HazardCheck;
  // gathered in SITE_EVALUATIONS and SITE_FINDINGS and copied out at their exact length, as a tensor's risks are
  let evaluationCount = 0;
  let findingCount = 0;
  for (let i = 0; i < perFormat.length; i++) {
    const format = (settings[i] as FormatSetting).format;
    const c = perFormat[i] as HazardCheck;
    for (let j = 0; j < c.evaluations.length; j++) {
      const e = c.evaluations[j] as HazardEvaluation;
      // an evaluation of a plan whose check names another layer than the one named here keeps its own
      if (e.format === format) SITE_EVALUATIONS[evaluationCount++] = e.layer === undefined && c.layer !== named.layer ? { ...e, layer: c.layer } : e;
    }
    for (let j = 0; j < c.findings.length; j++) {
      const f = c.findings[j] as Finding;
      if (f.format === format) SITE_FINDINGS[findingCount++] = f;
    }
  }
  return siteCheck(first, named, SITE_EVALUATIONS.slice(0, evaluationCount), SITE_FINDINGS.slice(0, findingCount));
}

// `{ ...first, layer, input, evaluations, findings }` (layer and input those of `named`), by literals: the keys of
// evaluateHazard's result in its order
function siteCheck(first: HazardCheck, named: HazardCheck, evaluations: HazardEvaluation[], findings: Finding[]): HazardCheck {
  // an evaluation names its own layer only where it differs from the check's
  for (let i = 0; i < evaluations.length; i++) {
    const evaluation = evaluations[i] as HazardEvaluation;
    if (evaluation.layer === named.layer) delete evaluation.layer;
  }
  const check: HazardCheck = {
    kind: first.kind,
    layer: named.layer,
    detail: first.detail,
    guarded: first.guarded,
    terms: first.terms,
    input: named.input,
    origin: first.origin,
    evaluations,
    findings,
  };
  if (first.constant !== undefined) check.constant = first.constant;
  if (first.gradient === true) check.gradient = true;
  return check;
}

function judgeFormat(
  setting: FormatSetting,
  plan: PrecisionPlan,
  hazards: readonly HazardCheck[],
  ownScale: AppliedLossScale | undefined,
  sums: boolean,
): FormatCheck {
  const { format, evaluated } = setting;
  // the tensors' findings and count, gathered by judgeTensors
  const findings = setting.findings;
  const tensorsJudged = setting.tensorsJudged;
  // gathered tensor by tensor (gather), each tensor's findings together, tensor ids unique: counted run by run
  const runs = findings.length;
  for (let i = 0; i < hazards.length; i++) {
    const hazardFindings = (hazards[i] as HazardCheck).findings;
    for (let j = 0; j < hazardFindings.length; j++) {
      const finding = hazardFindings[j] as Finding;
      if (finding.format === format) findings.push(finding);
    }
  }
  const judgement = judgeFindings(findings, runs);
  const holds: PlanEntry[] = [];
  for (let i = 0; i < PLAN_ENTRIES.length; i++) {
    const entry = PLAN_ENTRIES[i] as PlanEntry;
    // a sum buffer exists only where contributions are summed (several workers or accumulation steps)
    if (entryFormat(evaluated, entry) === format && (entry !== "gradientSums" || sums)) holds.push(entry);
  }
  return {
    format,
    planned: evaluated === plan,
    holds,
    ...(FORMATS[format].bits === 8 ? { scaling: evaluated.scaling } : {}),
    ...(ownScale === undefined ? {} : { lossScale: ownScale }),
    verdict: judgement.verdict,
    reasons: judgement.reasons,
    tensorsJudged,
    findings,
  };
}

function hazardContext(
  spec: NetworkSpec,
  plan: PrecisionPlan,
  lossScale: number,
  thresholds: RiskThresholds,
  weightGradients: readonly TensorPrediction[],
): HazardContext {
  return {
    activations: limitsFor(plan, plan.activations),
    gradients: limitsFor(plan, plan.gradients),
    gradientSums: limitsFor(plan, gradientSumFormat(plan)),
    optimizerStates: limitsFor(plan, plan.optimizerStates),
    accumulate: limitsFor(plan, plan.accumulate),
    lossScale,
    scaling: plan.scaling,
    beta2: spec.training.optimizer.betas[1],
    workerGradients: spec.training.workerGradients,
    workers: spec.training.workers,
    thresholds,
    weightGradients,
  };
}

/**
 * Operation sites that follow from the training setup rather than from a layer: the loss value, gradient sums
 * across workers and accumulation steps, and Adam's epsilon. Added when the prediction has none of the kind.
 */
export function trainingSites(
  spec: NetworkSpec,
  prediction: Prediction,
  weightGradients: readonly TensorPrediction[] = weightGradientsOf(prediction),
  // the gradients the optimizer's states see (clipped where clip-norm clips: src/risk/second-moments.ts)
  stateGradients: readonly TensorPrediction[] = clippedWeightGradients(weightGradients, spec.training.optimizer.clipNorm),
): HazardSite[] {
  const training = spec.training;
  const sites: HazardSite[] = [];

  // the loss tensor's place: the tensor before it is the network's output (the logits under cross-entropy)
  const lossAt = prediction.tensors.findIndex((t) => t.role === "loss");
  if (!hasSite(prediction.hazards, "loss-value")) {
    const lossTensor = lossAt >= 0 ? prediction.tensors[lossAt] : undefined;
    const perTerm =
      lossTensor !== undefined
        ? lossTensor.start
        : training.loss.kind === "cross-entropy"
          ? constantProfile(Math.log(training.loss.classes))
          : undefined;
    if (perTerm !== undefined) {
      const positions = spec.input.kind === "image" ? 1 : spec.input.positions;
      const terms = training.loss.reduction === "sum" ? training.batch * positions : 1;
      // a mean sums its terms before dividing: one per sample and position for cross-entropy, one per output element
      // (the network's output, the tensor before the loss) for squared error
      const averaged =
        training.loss.reduction !== "mean"
          ? undefined
          : training.loss.kind === "cross-entropy" || lossAt < 1
            ? training.batch * positions
            : (prediction.tensors[lossAt - 1] as TensorPrediction).start.elements;
      sites.push({
        kind: "loss-value",
        layer: "loss",
        input: { ...perTerm, elements: 1, zeroFraction: 0 },
        terms,
        guarded: false,
        constant: undefined,
        detail:
          training.loss.reduction === "sum"
            ? `${training.loss.kind} loss summed over ${terms} terms, times the loss scale`
            : `${training.loss.kind} loss (mean reduction), times the loss scale`,
        output: undefined,
        end: undefined,
        tensor: undefined,
        gradient: undefined,
        ...(averaged !== undefined && averaged > 1 ? { averaged } : {}),
      });
    }
  }

  // the cross-entropy's own softmax: its log-sum-exp subtracts the row maximum (common practice; src/ops/loss/kernel.ts),
  // so only its denominator, up to one term per class, can pass a format's range, as an attention softmax's can
  if (training.loss.kind === "cross-entropy") {
    const logits = lossAt >= 1 ? (prediction.tensors[lossAt - 1] as TensorPrediction).start : undefined;
    if (logits !== undefined) {
      sites.push({
        kind: "softmax-exp",
        layer: "loss",
        input: logits,
        terms: training.loss.classes,
        guarded: true,
        constant: undefined,
        detail: `the cross-entropy's softmax over ${training.loss.classes} classes (row maximum subtracted)`,
        output: undefined,
        end: undefined,
        tensor: undefined,
        gradient: undefined,
      });
    }
  }

  const contributions = gradientContributions(training);
  if (!hasSite(prediction.hazards, "gradient-sum") && contributions > 1) {
    const pick = byRms(weightGradients, training.workerGradients === "sum" ? "largest" : "smallest");
    if (pick !== undefined) {
      sites.push({
        kind: "gradient-sum",
        layer: pick.tensor.layer,
        input: pick.profile,
        terms: contributions,
        guarded: false,
        constant: undefined,
        detail:
          `${pick.tensor.id} summed over ${training.workers} worker${training.workers === 1 ? "" : "s"} × ` +
          `${training.accumulationSteps} accumulation step${training.accumulationSteps === 1 ? "" : "s"} (${training.workerGradients})`,
        output: undefined,
        end: undefined,
        tensor: undefined,
        gradient: undefined,
      });
    }
  }

  const optimizer = training.optimizer;
  if (optimizer.kind === "adam" || optimizer.kind === "adamw") {
    // named after the smallest gradient, whose second moments are the likeliest to flush; the second moment is judged
    // there, while ε's count of zero second moments sums over every weight gradient (src/risk/second-moments.ts) and,
    // where it has zeros to count, names the tensor contributing most instead (src/risk/hazards.ts)
    const pick = byRms(stateGradients, "smallest");
    const layer = pick?.tensor.layer ?? "optimizer";
    const input = pick?.profile ?? constantProfile(0);
    if (!hasSite(prediction.hazards, "optimizer-constant")) {
      sites.push({
        kind: "optimizer-constant",
        layer,
        input,
        terms: 1,
        guarded: false,
        constant: optimizer.epsilon,
        detail: `${optimizer.kind} epsilon ${plainNumber(optimizer.epsilon)} in the optimizer-state format`,
        output: undefined,
        // judged at the start and the end of the horizon all the same: its count sums over the context's weight
        // gradients at each side (src/risk/hazards.ts)
        end: undefined,
        tensor: undefined,
        gradient: undefined,
      });
    }
    if (!hasSite(prediction.hazards, "optimizer-second-moment")) {
      sites.push({
        kind: "optimizer-second-moment",
        layer,
        input,
        terms: 1,
        guarded: false,
        constant: undefined,
        detail: `${optimizer.kind} second moments (1 − β2)·g², β2 = ${optimizer.betas[1]}, in the optimizer-state format`,
        output: undefined,
        end: undefined,
        tensor: undefined,
        gradient: undefined,
      });
    }
  }
  return sites;
}


function constantProfile(value: number): MagnitudeProfile {
  return { elements: 1, zeroFraction: 0, shape: "constant", rms: value, log2Spread: 0 };
}

// the kinds of a stored tensor's finding that change what is computed from it: values lost to zero or past the range
const LOSES_VALUES: ReadonlySet<Finding["kind"]> = new Set(["flushed-values", "gradient-energy-flushed", "probability-mass-flushed", "overflow", "saturation"]);

/**
 * The stored tensors a planned format loses values of (FormatCheck.valuesLost), other than weight gradients (read only
 * by the optimizer, judged there) and the loss. Why it matters: a float64 simulation of specs/deep-relu-glorot.yaml in its
 * binary16 plan (9 draws; hidden-stack.40–48's pre-activations predicted to flush 2.5–39%) measured the gradients below
 * 0.6–0.8 binade under the prediction, where the same run kept in binary64 put them −0.1…+0.4 from it
 * (test/check/carried-flush.test.ts holds the effect on a small stack). Counted as judgeTensors gathers each tensor's
 * findings into its format (gather), in tensor order, rather than by a second walk over every tensor.
 */
function valuesLost(setting: FormatSetting): FormatCheck["valuesLost"] {
  return setting.lost === 0 ? undefined : { tensors: setting.lost, first: setting.lostFirst };
}

// appends the check's assumptions to `notes`
function checkAssumptions(
  notes: string[],
  plan: PrecisionPlan,
  settings: readonly FormatSetting[],
  scales: readonly AppliedLossScale[],
  addedSites: boolean,
  thresholds: RiskThresholds,
): void {
  const lossScale = scales[0] as AppliedLossScale;
  if (lossScale.origin === "none") {
    notes.push(
      lossScale.window?.empty
        ? `No static loss scale keeps every ${lossScale.window.format} gradient both below the overflow budget and above the flush tolerance, so gradients are judged unscaled (loss scale 1).`
        : "The plan gives no loss scale, so gradients are judged unscaled (loss scale 1).",
    );
  } else if (lossScale.origin === "recommended") {
    notes.push(
      `The plan gives no loss scale; gradients are judged multiplied by the recommended ${scaleWords(lossScale.value)}, ` +
        `picked inside the window of powers of two where no ${lossScale.window?.format} gradient overflows beyond the risk budget or flushes beyond the tolerance (the window's default budget and tolerance).`,
    );
  } else {
    notes.push(`Gradients are judged multiplied by the loss scale ${scaleWords(lossScale.value)} (from the ${lossScale.origin === "plan" ? "plan" : "options"}), and the scaled loss as an operation.`);
  }
  // formats judged at another scale than the first (their gradients in another format), one sentence per scale
  const told: AppliedLossScale[] = [lossScale];
  for (let i = 1; i < scales.length; i++) {
    const scale = scales[i] as AppliedLossScale;
    if (told.includes(scale)) continue;
    told.push(scale);
    const names = settings.filter((_, j) => scales[j] === scale).map((setting) => setting.format).join(" and ");
    const gradients = (settings[i] as FormatSetting).evaluated.gradients;
    const is = names.includes(" and ") ? "are" : "is";
    notes.push(
      scale.origin === "recommended"
        ? `${names} ${is} judged at another loss scale: ${gradients} gradients multiplied by the recommended ${scaleWords(scale.value)}, picked inside the window searched for ${gradients} gradients.`
        : scale.window?.empty
          ? `${names} ${is} judged with ${gradients} gradients unscaled (loss scale 1): no static loss scale keeps every ${gradients} gradient both below the overflow budget and above the flush tolerance.`
          : `${names} ${is} judged with ${gradients} gradients unscaled (loss scale 1): they need no loss scale.`,
    );
  }
  notes.push(
    "Overflow risk is the probability that at least one element of a step passes the overflow threshold, with " +
      "elements independent given the scale and the scale spread over draws as predicted.",
  );
  for (let i = 0; i < settings.length; i++) {
    const { format, evaluated } = settings[i] as FormatSetting;
    if (evaluated !== plan) {
      const held = PLAN_ENTRIES.filter((entry) => entryFormat(evaluated, entry) === format);
      notes.push(`${format} is not in the plan; it is judged holding ${held.join(", ")} in place of the plan's formats.`);
    }
  }
  const formats = settings.map((setting) => setting.format);
  if (formats.includes("bfloat16")) {
    notes.push("bfloat16 values below the smallest normal 2^-126 are treated as flushed to zero, as much hardware does (common practice).");
  }
  if (formats.some((format) => FORMATS[format].bits === 8)) {
    notes.push(
      plan.scaling === "none"
        ? "8-bit formats are judged without scale factors."
        : `8-bit formats are judged with a per-tensor scale factor 2^⌊log2(max finite / predicted max)⌋${plan.scaling === "block" ? " (with per-block scaling, flushing and clipping follow the rule for blocks of 32 elements of Gaussian-like values)" : ""}; conversions ${plan.overflow === "saturate" ? "saturate" : "give infinity or NaN"} on overflow.` +
            // the block conversion's own clamp (OCP MX v1.0 §6, from memory; src/risk/blocks.ts)
            (plan.scaling === "block"
              ? " A block's conversion clamps its elements to the largest finite value, so only a block that would need a scale above 2^127 overflows or saturates."
              : "") +
            (plan.scaling === "tensor" && plan.overflow === "saturate"
              ? ` The predicted max is the level passed once in ${plainNumber(1 / thresholds.maxQuantile)} steps, so a tensor's largest elements are clipped about that often by the scale rule itself; saturation counts as a finding only when it comes more often (above ${plainNumber(overflowAtRiskThreshold(thresholds, true))} per step).`
              : ""),
    );
    // e4m3 keeps 3 fraction bits, e5m2 2 (OCP 8-bit floating point specification rev. 1.0), so round to nearest moves a
    // value by up to 2^-4 and 2^-3 of itself (half an ulp, IEEE 754-2019 §2.1 unit roundoff 2^-p)
    const eight = formats.filter((format) => FORMATS[format].bits === 8);
    notes.push(
      `Stored tensors are judged for their range (flushing, subnormals, overflow), not for the rounding of each value to the few significand bits of ${eight.join(" and ")} ` +
        `(a relative error up to ${eight.map((format) => `${plainNumber(2 ** -FORMATS[format].precision)} in ${format}`).join(", ")}); ` +
        "rounding is judged where it adds up, in sums (√n·u). A softmax whose logits are held in an 8-bit format sees each probability move by a factor up to e^(u·|logit|), u that relative error.",
    );
  }
  if (addedSites) {
    notes.push("The loss value, gradient sums across workers and the optimizer epsilon are judged from the training setup.");
  }
}

