/**
 * Operation hazards: places where an operation, not a stored tensor, overflows or loses values. Each site
 * is judged against the formats of the plan entries that hold its result.
 */
import { FORMATS, pow2 } from "../formats/index.js";
import type { FormatName } from "../formats/names.js";
import type { HazardSite, MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { anyOf, exp2, LN2, normalSf } from "./_math.js";
import { chiSquareTail } from "../numeric/chi-square.js";
import { blockScaledRiskCached, type BlockScaledRisk } from "./blocks.js";
import { normalLogPdf, normalSf as preciseNormalSf, normalUpperQuantile as preciseUpperQuantile } from "../numeric/normal.js";
import { DRAW_LIMIT, elementLaw, overDraws } from "./laws.js";
import { energyBelow, nonzeroElements, probabilityAnyAbove, profileStatistics } from "./profile.js";
import { DENSITY, energyBelowAtMost, FAR_DRAW, gaussianAt, SETTLED, settledAnyAbove, settledEnergyBelow } from "./settle.js";
import { overflowAtRiskThreshold, perTensorScaleLog2, worstVerdict } from "./tensor.js";
import { VERDICT_RANK } from "./verdict-order.js";
import type { Finding, FindingKind, HazardCheck, HazardEvaluation, RangeLimits, RiskThresholds, Verdict } from "./types.js";
import { flushedSecondMoments, flushedSecondMomentsVerdict, networkZeroSecondMomentsAt, storedEpsilon, vanishedEpsilonVerdict, zeroSecondMoments } from "./second-moments.js";
import { distinctNumbers, flat, limitNumber, plainNumber, probabilityWords, scaleWords, sharePercent, when, Words } from "./words.js";

/** The plan as the hazard checks see it: the range of each plan entry, and the training setup. */
export interface HazardContext {
  activations: RangeLimits;
  gradients: RangeLimits;
  /** the buffer the gradient contributions of workers and accumulation steps are summed in (the plan's gradient-sums) */
  gradientSums: RangeLimits;
  optimizerStates: RangeLimits;
  accumulate: RangeLimits;
  /** the static loss scale multiplying the loss (1 when none) */
  lossScale: number;
  /**
   * the plan's scale factors for 8-bit formats (`none` when absent): a loss value kept in an 8-bit format is stored
   * with them, as every 8-bit tensor of the plan is
   */
  scaling?: "none" | "tensor" | "block";
  /** Adam's β2, which shrinks the stored second moment to (1 − β2)·g² on the first step */
  beta2: number;
  /** how per-worker gradients are combined */
  workerGradients: "sum" | "average";
  workers: number;
  thresholds: RiskThresholds;
  /**
   * the network's weight gradients (the prediction's, as weightGradientsOf gives them): Adam's epsilon site of the
   * training setup counts zero second moments over all of them, at the start and at the end of the horizon; without
   * them it is judged at its own gradient, as a site of the prediction is
   */
  weightGradients?: readonly TensorPrediction[];
  /**
   * the findings are only counted (the loss-scale pick weighs scales by their kinds and severities): no sentences, and
   * the check keeps only the evaluations that do not fit (what a count reads of them: isConditionalFinding in judge.ts);
   * an empty list is one shared frozen array, and the check itself a record the next count-only call writes over
   */
  countOnly?: boolean;
  /**
   * for a count: the site's overflow side was shown quiet at a larger loss scale, so its gradient sums' and gradient
   * accumulation's overflow tests are taken as passed (the same numbers: see {@link shownAtEveryLower}); set per site by
   * judge.ts judgeScaled
   */
  overflowQuietKnown?: boolean;
  /**
   * for a count: left true by a site whose overflow tests all passed by tests exactly monotone in the scale, which
   * judgeScaled then carries to every smaller scale; set false by any other (judgeScaled sets it true before each site)
   */
  overflowQuietShown?: boolean;
}

type HeldIn = HazardEvaluation["heldIn"];
type Measure = HazardEvaluation["measure"];

// The wording of each evaluation's sentence, picked by number in `sentenceOf` (a closure per evaluation would be
// one more object for each, built even for the evaluations the start/end choice drops)
const SOFTMAX_GUARDED = 0;
const SOFTMAX_EXP = 1;
const NORM_SUM = 2;
const ACCUMULATION_ERROR = 3;
const ACCUMULATION_OVERFLOW = 4;
const LOSS_VALUE = 5;
const GRADIENT_SUM_OVERFLOW = 6;
const GRADIENT_SUM_FLUSH = 7;
const EPSILON_KEPT = 8;
const EPSILON_FLUSHED = 9;
const SECOND_MOMENT = 10;
const GRADIENT_SUM_ERROR = 11;
const LOSS_SUM_ERROR = 12;
const GRADIENT_ACCUMULATION_ERROR = 13;
const GRADIENT_ACCUMULATION_OVERFLOW = 14;
const GRADIENT_ACCUMULATION_FLUSH = 15;
const LOSS_PARTIAL_SUM = 16;

/**
 * One evaluation before the start/end choice, graded. The records are reused from call to call (see `DraftList`):
 * every field is written each time; number fields start as non-integers so they are doubles from the first write.
 */
class Draft {
  format: FormatName = "binary32";
  heldIn: HeldIn = "accumulate";
  measure: Measure = "overflow-risk";
  value = Number.NaN;
  /** the evaluation's criticalLevel, where `hasCritical` (else null): a double written in place, boxed only for an
   * evaluation made (a tagged field took a heap number per draft, most of them dropped: the side not reported, a count's
   * evaluations that fit) */
  critical = Number.NaN;
  hasCritical = false;
  kind: FindingKind = "accumulation-error";
  verdict: Verdict = "fits";
  /** the verdict's rank (VERDICT_RANK), written with it: isWorse compares two numbers, not two look-ups by name */
  rank = 0;
  threshold = Number.NaN;
  wording = 0;
  /** the one number the sentence needs beyond the evaluation (an rms, the optimizer epsilon) */
  extra = Number.NaN;
  /** the result overflows only where it is kept in the activation format, not widened */
  notWidened = false;
  /** the 8-bit scale factor the value is stored with: 0 none, 1 per tensor (2^scaleLog2), 2 its own block's */
  scaled = 0;
  scaleLog2 = Number.NaN;
  /** the conversion saturates (clips to the largest finite value) instead of overflowing, as the plan says */
  saturates = false;
  /** the tensor contributing most to a network-wide count, and its share of it ("" and NaN for none) */
  top = "";
  topValue = Number.NaN;
  /** that tensor's layer and profile, which the check then names instead of the site's ("" and undefined for none) */
  topLayer = "";
  topInput: MagnitudeProfile | undefined = undefined;
}

/** The drafts of one side (start or end) of a site: `count` records of `items` are in use. */
interface DraftList {
  items: Draft[];
  count: number;
}

// evaluateHazard runs to completion before it is entered again (nothing it calls judges a hazard), so one pair
// of lists serves every call; it empties them first
const START: DraftList = { items: [], count: 0 };
const END: DraftList = { items: [], count: 0 };

function nextDraft(list: DraftList): Draft {
  let draft = list.items[list.count];
  if (draft === undefined) {
    draft = new Draft();
    list.items.push(draft);
  }
  list.count++;
  return draft;
}

// The numbers of the evaluation putGraded adds, written by its caller through grade(): the value, the at-risk and
// failing thresholds, the sentence's extra number (Draft.extra) and the critical level (NaN: none). A double passed to a
// call the compiler does not inline (putGraded) is boxed, four heap numbers per evaluation (~14,000 a 1,000-layer check,
// ~37,000 where its loss-scale pick is weighed); written here by a call small enough to be inlined, they cross unboxed.
const GRADE = new Float64Array(5);
const VALUE = 0;
const AT_RISK = 1;
const FAILS = 2;
const EXTRA = 3;
const CRITICAL = 4;
function grade(value: number, atRisk: number, fails: number, extra: number, critical: number): void {
  GRADE[VALUE] = value;
  GRADE[AT_RISK] = atRisk;
  GRADE[FAILS] = fails;
  GRADE[EXTRA] = extra;
  GRADE[CRITICAL] = critical;
}

/**
 * Add an evaluation graded against thresholds, its numbers in GRADE (see grade()): above `fails` it fails, above
 * `atRisk` it is at risk (NaN fits); `capAtRisk`: the severity cannot exceed at-risk (e.g.
 * only an implementation that does not widen would overflow); a finding capped so carries the at-risk threshold, the
 * one of the severity it has, even when its value passes `fails`.
 */
function putGraded(
  list: DraftList,
  limits: RangeLimits,
  heldIn: HeldIn,
  measure: Measure,
  kind: FindingKind,
  capAtRisk: boolean,
  wording: number,
  notWidened: boolean,
): void {
  const value = GRADE[VALUE] as number;
  const atRisk = GRADE[AT_RISK] as number;
  const fails = GRADE[FAILS] as number;
  let verdict: Verdict = "fits";
  let rank = 0;
  let threshold = 0;
  if (value > fails) {
    verdict = capAtRisk ? "at-risk" : "fails";
    rank = capAtRisk ? 1 : 2;
    threshold = capAtRisk ? atRisk : fails;
  } else if (value > atRisk) {
    verdict = "at-risk";
    rank = 1;
    threshold = atRisk;
  }
  // fill's fields written here: its numbers passed would be boxed again
  const draft = nextDraft(list);
  draft.format = limits.format;
  draft.heldIn = heldIn;
  draft.measure = measure;
  draft.value = value;
  const critical = GRADE[CRITICAL] as number;
  draft.critical = critical;
  draft.hasCritical = critical === critical;
  draft.kind = kind;
  draft.verdict = verdict;
  draft.rank = rank;
  draft.threshold = threshold;
  draft.wording = wording;
  draft.extra = GRADE[EXTRA] as number;
  draft.notWidened = notWidened;
  draft.scaled = 0;
  draft.scaleLog2 = Number.NaN;
  draft.saturates = false;
  draft.top = "";
  draft.topValue = Number.NaN;
  draft.topLayer = "";
  draft.topInput = undefined;
}

function fill(
  draft: Draft,
  format: FormatName,
  heldIn: HeldIn,
  measure: Measure,
  kind: FindingKind,
  value: number,
  critical: number | null,
  verdict: Verdict,
  threshold: number,
  wording: number,
  extra: number,
  notWidened: boolean,
): void {
  draft.format = format;
  draft.heldIn = heldIn;
  draft.measure = measure;
  draft.value = value;
  draft.critical = critical === null ? Number.NaN : critical;
  draft.hasCritical = critical !== null;
  draft.kind = kind;
  draft.verdict = verdict;
  draft.rank = VERDICT_RANK[verdict];
  draft.threshold = threshold;
  draft.wording = wording;
  draft.extra = extra;
  draft.notWidened = notWidened;
  draft.scaled = 0;
  draft.scaleLog2 = Number.NaN;
  draft.saturates = false;
  draft.top = "";
  draft.topValue = Number.NaN;
  draft.topLayer = "";
  draft.topInput = undefined;
}

/**
 * Judge one operation site against the plan. Every result has one layout: `constant` is undefined for a site without one.
 * @example evaluateHazard({ kind: "softmax-exp", guarded: false, input: logits, ... }, context).findings
 */
export function evaluateHazard(
  site: HazardSite,
  context: HazardContext,
  origin: HazardCheck["origin"] = "prediction",
): HazardCheck {
  return hazardCheck(site, context, origin, true);
}

/**
 * {@link evaluateHazard} in the layout of a check result's hazards, `constant` only where the site has one (judge.ts's
 * siteCheck): a check judged under one plan is kept as it is, not copied into that layout.
 */
export function evaluateSite(site: HazardSite, context: HazardContext, origin: HazardCheck["origin"]): HazardCheck {
  return hazardCheck(site, context, origin, false);
}

function hazardCheck(site: HazardSite, context: HazardContext, origin: HazardCheck["origin"], keepConstant: boolean): HazardCheck {
  const start = START;
  const end = END;
  start.count = 0;
  end.count = 0;
  // the training setup's epsilon site has no profile of its own at the end: its count sums over the network's
  // weight gradients at each side of the horizon
  const network = site.kind === "optimizer-constant" && origin === "training setup" && context.weightGradients !== undefined;
  const siteEnd = site.end;
  const ended = siteEnd !== undefined || network;
  const endJudged = judgesEnd(site, siteEnd);
  if (endJudged && site.kind === "gradient-sum") {
    // both sides at once: only the worse of each is reported, and a far smaller one need not be integrated
    gradientSumSides(site, siteEnd, context, start, end);
  } else {
    draftsFor(site, site.input, site.output, context, start, network ? "start" : null);
    if (endJudged) {
      draftsFor(site, siteEnd.input, siteEnd.output !== undefined ? siteEnd.output : site.output, context, end, null);
    } else if (network) {
      draftsFor(site, site.input, site.output, context, end, "end");
    }
  }
  // gathered in EVALUATIONS and FINDINGS and copied out at their exact length (a fresh array grown by push keeps room
  // for 16, and the result keeps thousands of them)
  const evaluations = EVALUATIONS;
  const findings = FINDINGS;
  let evaluationCount = 0;
  let findingCount = 0;
  // a network-wide count names the tensor contributing most, as its sentence does: the check's layer and input are
  // that tensor's (the first evaluation naming one), and so is its finding's subject
  // the site's fields read once (sites of several kinds have several layouts, so each read is a look-up)
  const siteLayer = site.layer;
  const siteInput = site.input;
  // a layer's weight and bias gradients are summed apart: their findings are told apart by the tensor
  const siteTensor = site.kind === "gradient-sum" || site.gradient === true ? site.tensor : undefined;
  let layer = siteLayer;
  let input = siteInput;
  const counting = context.countOnly === true;
  for (let i = 0; i < start.count; i++) {
    const first = start.items[i] as Draft;
    const second = i < end.count ? (end.items[i] as Draft) : undefined;
    const endWorse = second !== undefined && isWorse(second, first);
    const worse = endWorse ? second : first;
    const verdict = worse.verdict;
    // a count reads no evaluation that fits, and no sentence
    if (counting && verdict === "fits") continue;
    const at = endWorse ? "end" : "start";
    const sentence = counting ? "" : sentenceText(worse, site, context, ended ? at : null, origin);
    const topInput = worse.topInput;
    const subject = topInput !== undefined ? worse.topLayer : siteLayer;
    if (topInput !== undefined && input === siteInput) {
      layer = subject;
      input = topInput;
    }
    const evaluation: HazardEvaluation = {
      format: worse.format,
      heldIn: worse.heldIn,
      measure: worse.measure,
      value: worse.value,
      criticalLevel: worse.hasCritical ? worse.critical : null,
      verdict,
      at,
      sentence,
    };
    // an evaluation names its own layer only where it is not the check's: most name none, and keep one layout
    if (subject !== siteLayer) evaluation.layer = subject;
    evaluations[evaluationCount++] = evaluation;
    if (verdict !== "fits") {
      // `at` always present (undefined for a site without an end, which JSON leaves out): one layout
      findings[findingCount++] = {
        kind: worse.kind,
        severity: verdict,
        format: worse.format,
        subject: siteTensor !== undefined && subject === siteLayer ? siteTensor : subject,
        source: "hazard",
        value: worse.value,
        threshold: worse.threshold,
        at: ended ? at : undefined,
        sentence,
      };
    }
  }
  // the check took a network-wide count's tensor for its layer: that tensor's evaluations name none, the others the site's
  if (layer !== siteLayer) {
    for (let i = 0; i < evaluationCount; i++) {
      const evaluation = evaluations[i] as HazardEvaluation;
      if (evaluation.layer === layer) delete evaluation.layer;
      else if (evaluation.layer === undefined) evaluation.layer = siteLayer;
    }
  }
  const evaluationList = counting && evaluationCount === 0 ? NONE : leading(evaluations, evaluationCount);
  const findingList = counting && findingCount === 0 ? NONE : leading(findings, findingCount);
  if (counting) return countedCheck(site, layer, input, origin, evaluationList, findingList);
  const withConstant = keepConstant || site.constant !== undefined;
  if (!withConstant && site.gradient === true) {
    // a sum of the backward pass (999 of a 1,000-layer check's 2,502 sites) with its flag in the literal: a field added
    // to the literal below would take a property array of its own (~40 bytes a site, kept by the result)
    return {
      kind: site.kind,
      layer,
      detail: site.detail,
      guarded: site.guarded,
      terms: site.terms,
      input,
      origin,
      evaluations: evaluationList,
      findings: findingList,
      gradient: true,
    };
  }
  const check: HazardCheck = {
    kind: site.kind,
    layer,
    detail: site.detail,
    guarded: site.guarded,
    terms: site.terms,
    input,
    origin,
    evaluations: evaluationList,
    findings: findingList,
  };
  if (withConstant) check.constant = site.constant;
  if (site.gradient === true) check.gradient = true;
  return check;
}

// A count's check (HazardContext.countOnly): one of two records written anew by each count-only call, in evaluateHazard's
// layout (a count reads its lists and lets it go before the next site is judged: judge.ts judgeScaled), one without
// `gradient` and one with it
const COUNTED = countedRecord();
const COUNTED_GRADIENT: HazardCheck = { ...countedRecord(), gradient: true };

// (placeholders: the numbers fractional so that V8 gives those fields double storage from the start, and a site whose
// numbers are fractional does not change the layout; every field is written before the record is returned)
function countedRecord(): HazardCheck {
  return {
    kind: "accumulation",
    layer: "",
    detail: "",
    guarded: false,
    terms: 0.5,
    input: { elements: 1.5, zeroFraction: 0.5, shape: "gaussian", rms: 1.5, log2Spread: 0.5 },
    origin: "prediction",
    evaluations: [],
    findings: [],
    constant: undefined,
  };
}

function countedCheck(
  site: HazardSite,
  layer: string,
  input: MagnitudeProfile,
  origin: HazardCheck["origin"],
  evaluations: HazardEvaluation[],
  findings: Finding[],
): HazardCheck {
  const check = site.gradient === true ? COUNTED_GRADIENT : COUNTED;
  check.kind = site.kind;
  check.layer = layer;
  check.detail = site.detail;
  check.guarded = site.guarded;
  check.terms = site.terms;
  check.input = input;
  check.origin = origin;
  check.evaluations = evaluations;
  check.findings = findings;
  check.constant = site.constant;
  return check;
}

// The first n items of a working array as an array of their own, at its exact length: by a literal for the counts a site
// has (at most four evaluations, fewer findings), which the compiler allocates in place; slice past that. Two calls of
// slice a site were ~10% of the sites' judgement (the 1,000-layer check's 2,502 sites without these lists: 0.90×), these
// literals ~0.975× (Dec 2026, one process, 300 fresh variants a run)
function leading<T>(items: T[], n: number): T[] {
  switch (n) {
    case 0:
      return [];
    case 1:
      return [items[0] as T];
    case 2:
      return [items[0] as T, items[1] as T];
    case 3:
      return [items[0] as T, items[1] as T, items[2] as T];
    case 4:
      return [items[0] as T, items[1] as T, items[2] as T, items[3] as T];
    default:
      return items.slice(0, n);
  }
}

// evaluateHazard's working arrays (it runs to completion before it is entered again)
const EVALUATIONS: HazardEvaluation[] = [];
const FINDINGS: Finding[] = [];
// a count-only check's empty lists
const NONE = Object.freeze([]) as never[];

function isWorse(a: Draft, b: Draft): boolean {
  const rank = a.rank - b.rank;
  return rank > 0 || (rank === 0 && a.value > b.value);
}

/** The worst verdict of a hazard check. */
export function hazardVerdict(check: HazardCheck): Verdict {
  return worstVerdict(check.findings);
}

// `networkSide`: the side of the horizon at which a network-wide count is taken (null: the site is judged at `input`)
function draftsFor(
  site: HazardSite,
  input: MagnitudeProfile,
  output: MagnitudeProfile | undefined,
  context: HazardContext,
  list: DraftList,
  networkSide: "start" | "end" | null,
): void {
  switch (site.kind) {
    case "softmax-exp":
      return softmaxExp(site, input, context, list);
    case "norm-sum-of-squares":
      return normSumOfSquares(site, input, context, list);
    case "accumulation":
      return site.gradient === true ? gradientAccumulation(site, input, output, context, list) : accumulation(site, input, context, list);
    case "loss-value":
      return lossValue(site, input, context, list);
    case "gradient-sum":
      return gradientSum(site, context, list);
    case "optimizer-constant":
      return optimizerConstant(site, input, context, list, networkSide);
    case "optimizer-second-moment":
      return secondMoment(input, context, list);
  }
}

function verdictWord(verdict: Verdict): string {
  return verdict === "fits" ? "fits" : verdict === "at-risk" ? "at risk" : "fails";
}

// what a softmax site's sentence names: its layer, or the cross-entropy's own softmax (the training setup's site; a
// layer the user named "loss" is still named by its name)
function softmaxOf(site: HazardSite, origin: HazardCheck["origin"]): string {
  return origin === "training setup" ? "the cross-entropy loss" : site.layer;
}

// what one term of a softmax's denominator stands for: a key of an attention, a class of the cross-entropy
function softmaxTerm(origin: HazardCheck["origin"]): string {
  return origin === "training setup" ? "class" : "key";
}

// Whether a wording's sentence is the site's name between words its memo keeps (Words): left as those few pieces,
// which every sentence of the wording shares, rather than copied into one string of its own (see words.ts flat:
// the pieces a sentence would keep alive are its site's name and a number, no more than the copy would be)
function pieced(wording: number): boolean {
  return (
    wording === ACCUMULATION_ERROR ||
    wording === ACCUMULATION_OVERFLOW ||
    wording === GRADIENT_SUM_OVERFLOW ||
    wording === GRADIENT_SUM_ERROR ||
    wording === GRADIENT_SUM_FLUSH ||
    wording === GRADIENT_ACCUMULATION_ERROR ||
    wording === GRADIENT_ACCUMULATION_OVERFLOW ||
    wording === GRADIENT_ACCUMULATION_FLUSH
  );
}

// the words naming a side of the horizon, made once (the sentences' memos compare them)
const AT_START = ` ${when("start")}`;
const AT_END = ` ${when("end")}`;

// The sentence of the evaluation kept for a site: `draft` holds its numbers, the site and plan the rest; `at` the side
// of the horizon they are from, for a site judged at both (a tensor's finding says it too: a failure at the first step
// and one after the weights have grown call for different remedies)
// an evaluation's sentence as the result keeps it: one flat string, but for the wordings already joined in pieces
function sentenceText(draft: Draft, site: HazardSite, context: HazardContext, at: "start" | "end" | null, origin: HazardCheck["origin"]): string {
  const words = sentenceOf(draft, site, context, at, origin);
  return pieced(draft.wording) ? words : flat(words);
}

function sentenceOf(draft: Draft, site: HazardSite, context: HazardContext, at: "start" | "end" | null, origin: HazardCheck["origin"]): string {
  const side = at === null ? "" : at === "start" ? AT_START : AT_END;
  const format = draft.format;
  const value = draft.value;
  const verdict = draft.verdict;
  switch (draft.wording) {
    case SOFTMAX_GUARDED:
      return value > 0
        ? `The softmax of ${softmaxOf(site, origin)} subtracts the row maximum, but its denominator, up to ${site.terms} (one term per ${softmaxTerm(origin)}, ` +
            `each at most 1), can pass what ${format} holds (${limitNumber(draft.critical)})` +
            `${draft.notWidened ? " if the sum is kept in the activation format" : ""} (${verdictWord(verdict)}).`
        : `The softmax of ${softmaxOf(site, origin)} subtracts the row maximum, so exp cannot overflow, and its denominator (at most ` +
            `${site.terms}) stays within ${format}${draft.extra === 1 ? " with its scale factor" : ""}.`;
    case SOFTMAX_EXP:
      return (
        `The softmax of ${site.layer} does not subtract the row maximum: exp overflows ${format} for logits ` +
        `above ${plainNumber(draft.critical)}, reached with probability ${probabilityWords(value)} per step${side} ` +
        `(${verdictWord(verdict)}).`
      );
    case NORM_SUM: {
      const [limit, predicted] = distinctNumbers(draft.critical, draft.extra);
      return (
        `The sum of squares over ${site.terms} elements in ${site.layer} overflows ${format} once the ` +
        `input rms exceeds ${limit} (predicted ${predicted})${site.statistics === undefined ? "" : ` in one of its ${Math.round(site.input.elements / Math.max(1, site.terms))} statistics, each spread by its own weights`}; probability ` +
        `${probabilityWords(value)} per step${side}${draft.notWidened ? " if the statistics are kept in the activation format" : ""} ` +
        `(${verdictWord(verdict)}).`
      );
    }
    case ACCUMULATION_ERROR: {
      const terms = Math.max(1, site.terms);
      const tail = ACCUMULATION_ERROR_TAIL;
      if (!tail.holds(format, verdict, "", terms, value, 0)) {
        tail.keep(format, verdict, "", terms, value, 0, ` accumulates ${terms} terms in ${format}: relative rounding error about √n·u = ${plainNumber(value)} (${verdictWord(verdict)}).`);
      }
      return site.layer + tail.text;
    }
    case LOSS_SUM_ERROR: {
      const head = `${site.terms > 1 ? `The loss sums its ${site.terms} terms` : `The loss averages ${draft.extra} terms, summed`} in ${format}, the accumulate format: `;
      const u = context.accumulate.unitRoundoff;
      const term = draft.topValue;
      const rounding = sumRoundingError(draft.extra, u);
      const said =
        value > rounding
          ? head +
            `once a sequential sum passes ${limitNumber(stallLevel(term, u))}, half its ulp exceeds a term (about ${plainNumber(term)}) and the sum stops growing, ` +
            `${sharePercent(value)} short of the ${plainNumber(draft.extra * term)} it should reach, a systematic error beyond √n·u = ${plainNumber(rounding)} (${verdictWord(verdict)})`
          : head + `relative rounding error at least √n·u = ${plainNumber(value)} (${verdictWord(verdict)})`;
      return verdict === "fits" ? `${said}.` : `${said}: accumulate in binary32 (\`accumulate: binary32\`).`;
    }
    case LOSS_PARTIAL_SUM:
      return (
        `The loss sums its ${site.averaged ?? 1} terms before it divides, in ${format}, the accumulate format: the sum ` +
        `(predicted ${plainNumber(draft.extra)}) passes ${limitNumber(context.accumulate.overflowLevel)} with probability ${probabilityWords(value)} per step${side} (${verdictWord(verdict)}).`
      );
    case ACCUMULATION_OVERFLOW: {
      const tail = ACCUMULATION_OVERFLOW_TAIL;
      if (!tail.holds(format, verdict, side, value, 0, 0)) {
        tail.keep(format, verdict, side, value, 0, 0, ` reach the ${format} overflow threshold with probability ${probabilityWords(value)} per step${side} (${verdictWord(verdict)}).`);
      }
      return "The partial sums of " + site.layer + tail.text;
    }
    case LOSS_VALUE: {
      const critical = draft.critical;
      const [digits, predicted] = distinctNumbers(critical, draft.extra);
      const limit = Number.isInteger(critical) ? limitNumber(critical) : digits;
      // what multiplies a term: the other terms of a sum, the loss scale (none said when it is 1)
      const factors = [site.terms > 1 ? `${site.terms} terms summed` : "", context.lossScale !== 1 ? `times the loss scale ${scaleWords(context.lossScale)}` : ""].filter((x) => x !== "");
      const scaled =
        draft.scaled === 1
          ? ` with its per-tensor scale factor ${draft.scaleLog2 === 0 ? "1" : `2^${draft.scaleLog2}`}`
          : draft.scaled === 2
            ? " past its own block's largest scale factor, 2^127,"
            : "";
      return (
        `The loss${site.layer === "loss" ? "" : ` of ${site.layer}`}${factors.length > 0 ? ` (${factors.join(", ")})` : ""} ` +
        `${draft.saturates ? "saturates in" : "overflows"} ${format}${scaled} when ${lossSubject(site.terms, context.lossScale)} exceeds ${limit} ` +
        `(predicted ${predicted}); probability ${probabilityWords(value)} per step${side}` +
        `${draft.notWidened ? " if the loss is kept in the activation format" : ""} (${verdictWord(verdict)}).`
      );
    }
    case GRADIENT_SUM_OVERFLOW: {
      const terms = Math.max(1, site.terms);
      const head = GRADIENT_SUM_OVERFLOW_HEAD;
      if (!head.holds("", "", "", terms, 0, 0)) head.keep("", "", "", terms, 0, 0, `The sum of ${terms} gradient contributions of `);
      const tail = GRADIENT_SUM_OVERFLOW_TAIL;
      const lossScale = context.lossScale;
      // keyed by the probability as written: most sums that fail pass the limit with a probability of about 1, each
      // a different double that reads the same
      const probability = probabilityWords(value);
      const sideIndex = side === "" ? 0 : side === AT_START ? 1 : 2;
      if (!tail.holds(format, verdict, probability, sideIndex, lossScale, 0)) {
        // a probability met once (a sum near its limit, at growth 1 most of them): the words around it are kept instead
        const unscaled = lossScale === 1 ? 1 : 0;
        const before = GRADIENT_SUM_OVERFLOW_BEFORE;
        if (!before.holds(format, "", "", unscaled, 0, 0)) before.keep(format, "", "", unscaled, 0, 0, `${unscaled === 1 ? "" : " after the loss scale"}) overflows ${format} with probability `);
        const beforeText = before.text;
        const after = GRADIENT_SUM_OVERFLOW_AFTER;
        if (!after.holds("", verdict, side, 0, 0, 0)) after.keep("", verdict, side, 0, 0, 0, ` per step${side} (${verdictWord(verdict)}).`);
        tail.keepPieces(format, verdict, probability, sideIndex, lossScale, 0, beforeText + probability + after.text);
      }
      return head.text + gradientOf(site) + " (rms " + plainNumber(draft.extra) + tail.text;
    }
    case GRADIENT_SUM_ERROR: {
      const terms = Math.max(1, site.terms);
      const sums = context.gradientSums;
      const which = sums.format === context.gradients.format ? "the gradient format" : "the plan's gradient-sums format";
      const head = GRADIENT_SUM_ERROR_HEAD;
      if (!head.holds(format, which, "", terms, 0, 0)) head.keep(format, which, "", terms, 0, 0, `Summed in ${format}, ${which}, the ${terms} gradient contributions of `);
      const tail = GRADIENT_SUM_ERROR_TAIL;
      const atRisk = context.thresholds.accumulationAtRisk;
      if (!tail.holds("", verdict, "", value, terms, sums.unitRoundoff) || tail.extra !== atRisk) {
        tail.keep("", verdict, "", value, terms, sums.unitRoundoff, gradientSumErrorTail(value, verdict, terms, sums.unitRoundoff, atRisk));
        tail.extra = atRisk;
      }
      return head.text + gradientOf(site) + tail.text;
    }
    case GRADIENT_SUM_FLUSH: {
      const workers = context.workers;
      const middle = GRADIENT_SUM_FLUSH_MIDDLE;
      if (!middle.holds("", "", "", workers, 0, 0)) middle.keep("", "", "", workers, 0, 0, ` by ${workers} before the sum, `);
      const tail = GRADIENT_SUM_FLUSH_TAIL;
      if (!tail.holds(format, verdict, side, 0, 0, 0)) tail.keep(format, verdict, side, 0, 0, 0, ` more of their squared norm flushes in ${format}${side} (${verdictWord(verdict)}).`);
      return "If each worker divides the gradients of " + gradientOf(site) + middle.text + sharePercent(value) + tail.text;
    }
    case GRADIENT_ACCUMULATION_ERROR: {
      const terms = Math.max(1, site.terms);
      const tail = GRADIENT_ACCUMULATION_ERROR_TAIL;
      if (!tail.holds(format, verdict, "", terms, value, 0)) {
        tail.keep(format, verdict, "", terms, value, 0, ` accumulates ${terms} terms in ${format}: relative rounding error about √n·u = ${plainNumber(value)} (${verdictWord(verdict)}).`);
      }
      return sumMaking(site) + tail.text;
    }
    case GRADIENT_ACCUMULATION_OVERFLOW: {
      const unscaled = context.lossScale === 1 ? 1 : 0;
      const tail = GRADIENT_ACCUMULATION_OVERFLOW_TAIL;
      if (!tail.holds(format, verdict, side, value, unscaled, 0)) {
        tail.keep(format, verdict, side, value, unscaled, 0,
          ` reach the ${format} overflow threshold${unscaled === 1 ? "" : " after the loss scale"} with probability ${probabilityWords(value)} per step${side} (${verdictWord(verdict)}).`);
      }
      return "The partial sums of the sum making " + madeBySum(site) + tail.text;
    }
    case GRADIENT_ACCUMULATION_FLUSH: {
      const unscaled = context.lossScale === 1 ? 1 : 0;
      const flushBound = context.accumulate.flushBound;
      const tail = GRADIENT_ACCUMULATION_FLUSH_TAIL;
      if (!tail.holds(format, verdict, side, value, unscaled, flushBound)) {
        const said =
          `${unscaled === 1 ? "" : " after the loss scale"} in ${format}: ` +
          `${sharePercent(value)} of their squared norm lies below its flush bound ${plainNumber(flushBound)} and is lost${side} (${verdictWord(verdict)})`;
        tail.keep(format, verdict, side, value, unscaled, flushBound, verdict === "fits" ? `${said}.` : `${said}: accumulate in binary32 (\`accumulate: binary32\`), or a larger loss scale.`);
      }
      return sumMaking(site) + " adds terms of rms " + plainNumber(draft.extra) + tail.text;
    }
    case EPSILON_KEPT:
      return `The optimizer epsilon ${plainNumber(draft.extra)} stays nonzero in ${format}.`;
    case EPSILON_FLUSHED:
      return (
        `The optimizer epsilon ${plainNumber(draft.extra)} rounds to zero in ${format}` +
        (value >= 1
          ? draft.top !== ""
            ? `, and about ${plainNumber(value)} second-moment elements of the weight gradients are zero per step${side} (most in ` +
              `${draft.top}, about ${plainNumber(draft.topValue)}), so the update divides by zero there.`
            : `, and about ${plainNumber(value)} second-moment elements of ${site.layer} are zero per step${side}, so the update divides by zero there.`
          : `; an update divides by zero wherever a second moment is zero.`)
      );
    default:
      return (
        `The second moment (1 − β2)·g² of ${site.layer} flushes in ${format} for gradients below ` +
        `${plainNumber(draft.critical)}: ${sharePercent(value)} of its elements${side} (${verdictWord(verdict)}).`
      );
  }
}

// The words of a gradient sum's rounding error after the name of its gradient: √n·u, the verdict, and the remedies
// where it does not fit
function gradientSumErrorTail(value: number, verdict: Verdict, terms: number, unitRoundoff: number, atRisk: number): string {
  const said = ` carry a relative rounding error of about √n·u = ${plainNumber(value)} (${verdictWord(verdict)})`;
  if (verdict === "fits") return `${said}.`;
  // the most contributions whose √n·u stays within the at-risk threshold: n ≤ (threshold/u)²
  const most = Math.floor((atRisk / unitRoundoff) ** 2);
  const remedies = [
    // a binary32 sum buffer: the gradients themselves stay in their format
    unitRoundoff > FORMATS.binary32.unitRoundoff ? "sum them in binary32 (`gradient-sums: binary32` in the plan)" : "",
    most >= 1 && most < terms ? `sum at most ${most} contribution${most === 1 ? "" : "s"} (fewer accumulation steps or workers)` : "",
  ].filter((x) => x !== "");
  return remedies.length > 0 ? `${said}: ${remedies.join(", or ")}.` : `${said}.`;
}

const ACCUMULATION_ERROR_TAIL = new Words();
const ACCUMULATION_OVERFLOW_TAIL = new Words();
const GRADIENT_SUM_OVERFLOW_HEAD = new Words();
const GRADIENT_SUM_OVERFLOW_TAIL = new Words();
const GRADIENT_SUM_OVERFLOW_BEFORE = new Words();
const GRADIENT_SUM_OVERFLOW_AFTER = new Words();
const GRADIENT_SUM_ERROR_HEAD = new Words();
const GRADIENT_SUM_ERROR_TAIL = new Words();
const GRADIENT_SUM_FLUSH_MIDDLE = new Words();
const GRADIENT_SUM_FLUSH_TAIL = new Words();
const GRADIENT_ACCUMULATION_ERROR_TAIL = new Words();
const GRADIENT_ACCUMULATION_OVERFLOW_TAIL = new Words();
const GRADIENT_ACCUMULATION_FLUSH_TAIL = new Words();

// a layer's weight and bias have a gradient-sum site each, which the layer's name alone would not tell apart
function gradientOf(site: HazardSite): string {
  return site.tensor ?? site.layer;
}

// what a sum of the backward pass makes, in words (after "the sum making"): a named gradient, or the gradient at its
// layer's input
function madeBySum(site: HazardSite): string {
  const tensor = site.tensor;
  if (tensor !== undefined) return tensor;
  if (site.layer !== madeLayer) {
    madeLayer = site.layer;
    madeInput = `the gradient at ${madeLayer}'s input`;
  }
  return madeInput;
}
// the words madeBySum made last, and the layer they name: a backward sum's three sentences each name what it makes
let madeLayer: string | undefined = undefined;
let madeInput = "";

// "The sum making …", opening two of a backward sum's three sentences: made once for them both (the last kept, with
// what it names)
function sumMaking(site: HazardSite): string {
  const made = madeBySum(site);
  if (made !== sumMade) {
    sumMade = made;
    sumMakingWords = "The sum making " + made;
  }
  return sumMakingWords;
}
let sumMade: string | undefined = undefined;
let sumMakingWords = "";

// A profile times a factor (rms and bound; as scaleProfile of ./profile.ts), written into `slot`, one of the working
// profiles below, laid out as magnitude/profile.ts's profileOf literal (every key, absent ones undefined, in its order),
// so the functions that read it see one layout; the profile itself for a factor 1. The gradient sums' summed, scaled
// and divided profiles are read by the laws while a site is judged and kept by nothing (no draft or result holds a
// profile of theirs), so a thousand sites need not make thousands of profiles. Only the fields the risk module reads
// are written: the engine's own moments and correlations (meanSquare, maxElement, sampleCorrelation,
// positionCorrelation, coherentRms) are read nowhere in src/risk and stay undefined in the slots.
export function scaledIn(slot: MagnitudeProfile, profile: MagnitudeProfile, factor: number): MagnitudeProfile {
  if (factor === 1) return profile;
  const bound = profile.bound;
  slot.elements = profile.elements;
  slot.zeroFraction = profile.zeroFraction;
  slot.shape = profile.shape;
  slot.rms = profile.rms * factor;
  slot.log2Spread = profile.log2Spread;
  slot.bound = bound !== undefined ? bound * factor : undefined;
  slot.elementLog2Spread = profile.elementLog2Spread;
  slot.mixture = profile.mixture;
  return slot;
}

function profileCopy(profile: MagnitudeProfile, elements: number, zeroFraction: number, factor: number): MagnitudeProfile {
  const bound = profile.bound;
  return {
    elements,
    zeroFraction,
    shape: profile.shape,
    rms: profile.rms * factor,
    log2Spread: profile.log2Spread,
    meanSquare: profile.meanSquare,
    maxElement: profile.maxElement,
    bound: bound !== undefined ? bound * factor : undefined,
    elementLog2Spread: profile.elementLog2Spread,
    mixture: profile.mixture,
    sampleCorrelation: profile.sampleCorrelation,
    positionCorrelation: profile.positionCorrelation,
    coherentRms: profile.coherentRms,
  };
}

// the working profiles of scaledIn, laid out as profileCopy's (non-integer numbers: double fields from the start)
const WORKING: MagnitudeProfile = { elements: 1.5, zeroFraction: 0.5, shape: "gaussian", rms: 1.5, log2Spread: 0.5 };
const START_SUMMED = profileCopy(WORKING, 1.5, 0.5, 1);
const END_SUMMED = profileCopy(WORKING, 1.5, 0.5, 1);
const START_SCALED = profileCopy(WORKING, 1.5, 0.5, 1);
const END_SCALED = profileCopy(WORKING, 1.5, 0.5, 1);
const START_DIVIDED = profileCopy(WORKING, 1.5, 0.5, 1);
const END_DIVIDED = profileCopy(WORKING, 1.5, 0.5, 1);
/** A working profile for {@link scaledIn} (a caller's own, kept by nothing it passes it to). */
export function workingProfile(): MagnitudeProfile {
  return profileCopy(WORKING, 1.5, 0.5, 1);
}
// a backward sum's terms and result at the loss scale (gradientAccumulation: one side at a time)
const TERMS_SCALED = profileCopy(WORKING, 1.5, 0.5, 1);
const SUM_SCALED = profileCopy(WORKING, 1.5, 0.5, 1);

// exp(x) overflows where x ≥ ln(overflow level): ln 65520 = 11.0901 in binary16 (SCIENCE.md §4). With the row
// maximum subtracted each term is at most 1 and only the denominator (one term per key) can overflow.
function softmaxExp(site: HazardSite, input: MagnitudeProfile, context: HazardContext, list: DraftList): void {
  const limits = context.activations;
  const t = context.thresholds;
  if (site.guarded) {
    // The denominator Σ exp(s − max) lies in [1, n], n when a row's logits are close (small logits at the start). It is
    // summed in the accumulate format; only an implementation that does not widen keeps it in the activation format,
    // so that case is at most at risk (as the norms' sums of squares). An 8-bit format with scale factors scales the
    // sum as its other tensors (perTensorScaleLog2, OCP MX v1.0 §6), so n stays within it.
    const first = context.activations.format === context.accumulate.format ? 1 : 0;
    for (let k = first; k < 2; k++) {
      const held = k === 0 ? context.activations : context.accumulate;
      const scaled = FORMATS[held.format].bits === 8 && (context.scaling ?? "none") !== "none";
      const value = !scaled && site.terms >= held.overflowLevel ? 1 : 0;
      grade(value, t.overflowAtRisk, t.overflowFails, scaled ? 1 : 0, held.overflowLevel);
      putGraded(list, held, k === 0 ? "activations" : "accumulate", "overflow-risk", "softmax-sum-overflow", k === 0, SOFTMAX_GUARDED, k === 0);
    }
    return;
  }
  const critical = Math.log(limits.overflowLevel);
  const value = probabilityAnyAbove(input, critical, true);
  grade(value, t.overflowAtRisk, t.overflowFails, 0, critical);
  putGraded(list, limits, "activations", "overflow-risk", "softmax-exp-overflow", false, SOFTMAX_EXP, false);
}

// A row's sum of squares S = Σ x_i² over N features has mean N·r² and variance N·(κ − 1)·r⁴ (κ the element
// kurtosis); by the central limit theorem S is close to normal. It overflows once r > √(max/N)
// (DESIGN.md §5 item 7: 4.0 at N = 4096 in binary16). Rows are independent; the scale spreads over draws.
// The result is held in the activation format and the accumulate format (once when they are one format); only
// an implementation that does not widen keeps it in the activation format, so that case is at most at risk.
// In an 8-bit format of a plan with scale factors the sums are stored as its other 8-bit tensors are (as the loss value
// below): per-tensor, with a scale 2^⌊log2(max finite / M)⌋ set from the level M the largest sum passes once in
// 1/maxQuantile steps (perTensorScaleLog2), so they pass the format's level only as often as the scale rule allows;
// per-block, each block's shared exponent follows its own largest sum and only a scale past E8M0's 2^127 leaves the
// range (OCP MX v1.0 §6, from memory; src/risk/blocks.ts).
function normSumOfSquares(site: HazardSite, profile: MagnitudeProfile, context: HazardContext, list: DraftList): void {
  const law = elementLaw(profile);
  const features = Math.max(1, site.terms * (1 - profile.zeroFraction));
  const rows = Math.max(1, profile.elements / Math.max(1, site.terms));
  const t = context.thresholds;
  const first = context.activations.format === context.accumulate.format ? 1 : 0;
  const own = site.statistics;
  // P(any row's sum reaches `level`) in one step, over draws
  const anyAbove = (level: number): number =>
    profile.rms > 0
      ? own !== undefined
        ? ownSpreads(profile, own, features, law.kurtosis, rows, level)
        : overDraws(profile.rms, profile.log2Spread, (r) => {
            const mean = features * r * r;
            const sd = Math.sqrt(features * Math.max(0, law.kurtosis - 1)) * r * r;
            const perRow = sd > 0 ? normalSf((level - mean) / sd) : mean >= level ? 1 : 0;
            return anyOf(perRow, rows);
          })
      : 0;
  for (let k = first; k < 2; k++) {
    const limits = k === 0 ? context.activations : context.accumulate;
    const scaling = FORMATS[limits.format].bits === 8 ? (context.scaling ?? "none") : "none";
    let level = limits.overflowLevel;
    if (scaling === "block") level = blockScaledRiskCached(FORMATS[limits.format]).scaleClampLevel;
    else if (scaling === "tensor" && profile.rms > 0) level = limits.overflowLevel * 2 ** -perTensorScaleLog2(levelPassed(anyAbove, features * profile.rms * profile.rms, t.maxQuantile), limits.maxFinite);
    const criticalRms = Math.sqrt(level / features);
    const value = anyAbove(level);
    const atRisk = overflowAtRiskThreshold(t, scaling === "tensor" && limits.saturates);
    grade(value, atRisk, t.overflowFails, profile.rms, criticalRms);
    putGraded(list, limits, k === 0 ? "activations" : "accumulate", "overflow-risk", "norm-sum-overflow", k === 0, NORM_SUM, k === 0);
  }
}

// P(any of `rows` statistics reaches `level`) when each has a spread of its own (HazardSite.statistics): statistic c's
// mean square is r²·u_c, u_c a chi-square of k degrees of freedom over k (mean 1), independent between statistics, r²
// the draw's common part, whose ln-variance is the tensor's less the statistics' own (their mean's, `ownLogVar`), with
// the tensor's mean kept; the terms' own noise within a statistic, Var/E² = (κ − 1)/N, adds to the 2/k of the chi-square
// (Satterthwaite 1946, matched variance). 1 − (1 − p)^rows over the common draws.
function ownSpreads(profile: MagnitudeProfile, own: { dof: number; ownLogVar: number }, features: number, kurtosis: number, rows: number, level: number): number {
  const spread = 2 * LN2 * profile.log2Spread;
  const V = spread * spread;
  const common = Math.max(V - own.ownLogVar, 0);
  const rms = profile.rms * Math.exp((V - common) / 4);
  const dof = 2 / (2 / own.dof + Math.max(0, kurtosis - 1) / features);
  return overDraws(rms, Math.sqrt(common) / (2 * LN2), (r) => anyOf(chiSquareTail(dof, (dof * level) / (features * r * r)), rows));
}

// The level a decreasing probability of passing it, `anyAbove`, takes the value `p` at: bisection on log2 of the level
// from a bracket grown in steps of 8 binades around `start` (60 halvings: within 2^-40 of a binade, far below the
// whole binades a scale factor moves by).
function levelPassed(anyAbove: (level: number) => number, start: number, p: number): number {
  let low = Math.log2(start);
  let high = low;
  for (let i = 0; i < 64 && anyAbove(2 ** low) < p; i++) low -= 8;
  for (let i = 0; i < 64 && anyAbove(2 ** high) >= p; i++) high += 8;
  for (let i = 0; i < 60; i++) {
    const middle = (low + high) / 2;
    if (anyAbove(2 ** middle) >= p) low = middle;
    else high = middle;
  }
  return 2 ** high;
}

// Rounding error of an n-term sum in a format with unit roundoff u: about √n·u for terms of random sign
// (probabilistic analysis, Higham & Mary 2019; from memory, unconfirmed), at most about n·u (Higham 2002,
// Accuracy and Stability of Numerical Algorithms, §4.2; from memory, unconfirmed).
function sumRoundingError(terms: number, unitRoundoff: number): number {
  return Math.sqrt(terms) * unitRoundoff;
}

// Partial sums of random-sign terms are close to N(0, n·r²), and by the reflection principle their running maximum
// passes a level at most twice as often as the final sum; terms of one sign add up to about n·r.
function accumulation(site: HazardSite, profile: MagnitudeProfile, context: HazardContext, list: DraftList): void {
  const limits = context.accumulate;
  const terms = Math.max(1, site.terms);
  const error = sumRoundingError(terms, limits.unitRoundoff);
  const t = context.thresholds;
  const level = limits.overflowLevel;
  const coherent = elementLaw(profile).positiveShare === 1;
  const overflow = partialSumsOverflow(profile, terms, level, coherent);
  grade(error, t.accumulationAtRisk, t.accumulationFails, 0, Number.NaN);
  putGraded(list, limits, "accumulate", "relative-error", "accumulation-error", false, ACCUMULATION_ERROR, false);
  grade(overflow, t.overflowAtRisk, t.overflowFails, 0, coherent ? level / terms : level / Math.sqrt(terms));
  putGraded(list, limits, "accumulate", "overflow-risk", "accumulation-overflow", false, ACCUMULATION_OVERFLOW, false);
}

// P(some partial sum of `terms` terms of `profile` reaches `level` in a step), `coherent` when the terms share one sign
function partialSumsOverflow(profile: MagnitudeProfile, terms: number, level: number, coherent: boolean): number {
  if (!(profile.rms > 0) || (!coherent && sumFarBelow(profile, level, terms))) return 0;
  if (coherent) {
    // the sum passes the level exactly when the drawn scale passes level/terms: log2 r ~ N(log2 rms, spread²)
    return profile.log2Spread > 0
      ? preciseNormalSf((Math.log2(level / terms) - Math.log2(profile.rms)) / profile.log2Spread)
      : terms * profile.rms >= level ? 1 : 0;
  }
  return partialSumsOverDraws(profile, terms, level);
}

// partialSumsOverflow's draw sum for random-sign terms, a function of its own: the closure's variables would otherwise
// be a context made on every call, even for the sums settled far below (nearly every sum of a large check)
function partialSumsOverDraws(profile: MagnitudeProfile, terms: number, level: number): number {
  const outputs = Math.max(1, nonzeroElements(profile) / terms);
  return overDraws(profile.rms, profile.log2Spread, (r) => {
    // P(|S_n| ≥ level) = 2·Q(level/(√n·r)), doubled for the running maximum
    const perOutput = Math.min(1, 4 * normalSf(level / (Math.sqrt(terms) * r)));
    return anyOf(perOutput, outputs);
  });
}

/**
 * A sum of the backward pass (HazardSite.gradient): its terms are gradients, so they and its result are judged at the
 * loss scale, as gradient tensors are. Besides accumulation's √n·u and partial sums, (1) the result itself where the
 * engine predicts it (a weight gradient's batch sum holds the parts its terms share, coherently: its partial sums reach
 * about as far as the sum), and (2) the terms that flush: a term below the accumulate format's flush bound rounds to
 * zero when it is added to a sum that is itself that small (IEEE 754-2019 §4.3: the sum of an addition is rounded to
 * the destination format), the random-sign terms keeping the partial sums near zero, so the share of the terms'
 * squared norm below it is lost from the sum, judged as a gradient's flushed share is. Numbers the closed-form bounds
 * of src/risk/settle.ts put below 1e-13 are taken as 0, as the tensors' are.
 */
function gradientAccumulation(site: HazardSite, input: MagnitudeProfile, output: MagnitudeProfile | undefined, context: HazardContext, list: DraftList): void {
  const limits = context.accumulate;
  const terms = Math.max(1, site.terms);
  const t = context.thresholds;
  const lossScale = context.lossScale;
  const level = limits.overflowLevel;
  const flushBound = limits.flushBound;
  // findings only counted: the bounds read the unscaled profiles at the levels moved by the loss scale (they read
  // t/rms), a number under half the lower threshold stands as 0 (graded "fits" either way, and beside a larger number
  // it leaves their maximum as it is), and a profile is scaled only for a number they leave open
  const counting = context.countOnly === true;
  let scaled: MagnitudeProfile | null = null;
  let overflow = 0;
  // a count whose overflow side a larger scale showed quiet takes both tests below as passed
  const known = counting && context.overflowQuietKnown === true;
  if (known) {
    // (both bounds passed: the overflow 0 and nothing scaled, as the tests below leave it)
  } else if (!(counting && sumFarBelow(input, level / lossScale, terms))) {
    context.overflowQuietShown = false;
    scaled = scaledIn(TERMS_SCALED, input, lossScale);
    overflow = partialSumsOverflow(scaled, terms, level, false);
  }
  if (!known && output !== undefined && overflow < 1) {
    if (!(counting && anyAboveAtMost(output, level / lossScale, nonzeroElements(output), Math.min(t.overflowAtRisk, t.overflowFails) / 2))) {
      context.overflowQuietShown = false;
      const sum = scaledIn(SUM_SCALED, output, lossScale);
      if (!farQuiet(sum, level) && settledAnyAbove(sum, level, nonzeroElements(sum)) !== 0) overflow = Math.max(overflow, probabilityAnyAbove(sum, level));
    } else if (!shownAtEveryLower(output)) context.overflowQuietShown = false;
  }
  let lost = 0;
  if (!(counting && energyBelowAtMost(input, flushBound / lossScale, Math.min(t.energyAtRisk, t.energyFails) / 2))) {
    if (scaled === null) scaled = scaledIn(TERMS_SCALED, input, lossScale);
    lost = farAbove(scaled, flushBound) || settledEnergyBelow(scaled, flushBound) === 0 ? 0 : energyBelow(scaled, flushBound);
  }
  grade(sumRoundingError(terms, limits.unitRoundoff), t.accumulationAtRisk, t.accumulationFails, 0, Number.NaN);
  putGraded(list, limits, "accumulate", "relative-error", "accumulation-error", false, GRADIENT_ACCUMULATION_ERROR, false);
  grade(overflow, t.overflowAtRisk, t.overflowFails, 0, level / Math.sqrt(terms) / lossScale);
  putGraded(list, limits, "accumulate", "overflow-risk", "accumulation-overflow", false, GRADIENT_ACCUMULATION_OVERFLOW, false);
  // the terms' rms at the loss scale, as scaledIn makes it
  grade(lost, t.energyAtRisk, t.energyFails, lossScale === 1 ? input.rms : input.rms * lossScale, flushBound / lossScale);
  putGraded(list, limits, "accumulate", "flushed-energy", "gradient-energy-flushed", false, GRADIENT_ACCUMULATION_FLUSH, false);
}

// Whether the partial sums' tail is 0 exactly at every draw the rule of overDraws evaluates: at its largest draw
// (z = DRAW_LIMIT = 9, src/risk/laws.ts) the level is over 40 of the sum's standard deviations away, where Q underflows
// to 0 (Q(40) ≈ 4e-350, below the smallest double), so the draw sum is 0 without a closure or a sum, as the sum itself
// would find it
function sumFarBelow(profile: MagnitudeProfile, level: number, terms: number): boolean {
  // the scale at the largest draw, a little high against the rounding of the rule's own factors and of exp2's (within
  // (|x| + 1)·2^-52 relative of `2 **`, src/risk/_math.ts: under 1e-13 for spreads to 100 binades); where the test could
  // tell the two apart, the partial sums sit 40 standard deviations away and the sum gives 0 too
  const y = Math.max(0, profile.log2Spread) * DRAW_LIMIT;
  const root = Math.sqrt(terms);
  // first with 2^(⌈y⌉+1) for exp2(y), which it passes, without the exponential: where the level is far enough below
  // even so, it is below the scale exp2 gives too (every rounding here is monotone)
  // (pow2: exact, Infinity past 2^1023, where the quick test then cannot pass)
  const j = Math.ceil(y) + 1;
  if (level / (root * (profile.rms * pow2(j) * (1 + 1e-9))) > 40) return true;
  const top = profile.rms * exp2(y) * (1 + 1e-9);
  return level / (root * top) > 40;
}

// The loss value times the loss scale, summed over `terms` per-example losses (1 under mean reduction); held in
// the activation and the accumulate format as the sum of squares above. In an 8-bit format of a plan with scale
// factors it is stored as the plan's other 8-bit tensors are: with a per-tensor scale from its predicted max, the
// tensor rule (src/risk/tensor.ts), or as a block of one, whose shared exponent follows the value itself and whose
// conversion clamps it into the element range, so that only a value needing a scale past E8M0's 2^127 leaves it
// (OCP MX v1.0 §6, from memory; src/risk/blocks.ts)
function lossValue(site: HazardSite, input: MagnitudeProfile, context: HazardContext, list: DraftList): void {
  const factor = Math.max(1, site.terms) * context.lossScale;
  const total = profileCopy(input, 1, 0, factor);
  const t = context.thresholds;
  const first = context.activations.format === context.accumulate.format ? 1 : 0;
  for (let k = first; k < 2; k++) {
    const limits = k === 0 ? context.activations : context.accumulate;
    const format = FORMATS[limits.format];
    const scaling = format.bits === 8 ? (context.scaling ?? "none") : "none";
    let level = limits.overflowLevel;
    let scaleLog2 = 0;
    if (scaling === "block") {
      level = blockScaledRiskCached(format).scaleClampLevel;
    } else if (scaling === "tensor") {
      scaleLog2 = perTensorScaleLog2(profileStatistics(total, t).max, limits.maxFinite);
      level = limits.overflowLevel * 2 ** -scaleLog2;
    }
    const value = probabilityAnyAbove(total, level);
    // a saturating per-tensor conversion clips past the scale's own quantile that often: the tensor rule's leeway
    const atRisk = overflowAtRiskThreshold(t, scaling === "tensor" && limits.saturates);
    grade(value, atRisk, t.overflowFails, input.rms, level / factor);
    putGraded(list, limits, k === 0 ? "activations" : "accumulate", "overflow-risk", "loss-value-overflow", k === 0, LOSS_VALUE, k === 0);
    const draft = list.items[list.count - 1] as Draft;
    draft.saturates = limits.saturates;
    if (scaling !== "none") {
      draft.scaled = scaling === "tensor" ? 1 : 2;
      draft.scaleLog2 = scaleLog2;
    }
  }
  // A summed loss is a reduction of `terms` per-example losses in the accumulate format: its rounding error judged as
  // an accumulation's (sumRoundingError, √n·u). Its terms share one sign, so a sequential sum in a narrow format does
  // worse once it passes about a term/u (each term then below half an ulp): √n·u is the least it carries.
  const summed = site.terms > 1 ? site.terms : (site.averaged ?? 1);
  // A mean sums its terms before it divides: that sum, not the mean, is what the accumulate format holds (the loss scale
  // multiplies the mean, after the division: common practice), n times a term for terms of one sign
  if (site.terms <= 1 && summed > 1) {
    const limits = context.accumulate;
    const sum = profileCopy(input, 1, 0, summed);
    const level = limits.overflowLevel;
    const settled = settledAnyAbove(sum, level, 1);
    const value = settled === 0 || settled === 1 ? settled : probabilityAnyAbove(sum, level);
    grade(value, t.overflowAtRisk, t.overflowFails, sum.rms, level / summed);
    putGraded(list, limits, "accumulate", "overflow-risk", "accumulation-overflow", false, LOSS_PARTIAL_SUM, false);
  }
  if (summed > 1) {
    const u = context.accumulate.unitRoundoff;
    grade(Math.max(sumRoundingError(summed, u), stalledShortfall(summed, input.rms, u)), t.accumulationAtRisk, t.accumulationFails, summed, Number.NaN);
    putGraded(list, context.accumulate, "accumulate", "relative-error", "accumulation-error", false, LOSS_SUM_ERROR, false);
    // the term the sentence compares with the running sum's ulp (the draft's spare number; no tensor is named here)
    (list.items[list.count - 1] as Draft).topValue = input.rms;
  }
}

// Where a sequential sum of positive terms of size `term` stops growing: in the binade [2^e, 2^(e+1)) half an ulp is
// u·2^e (u = 2^-p, IEEE 754-2019 §2.1 and Table 3.5), and once it passes a term, adding the term rounds back to the
// sum (round to nearest): the sum stalls at the first power of two above term/u (own algebra).
function stallLevel(term: number, unitRoundoff: number): number {
  return 2 ** (Math.floor(Math.log2(term / unitRoundoff)) + 1);
}

// The relative shortfall of such a sum of n terms, 1 − stall/(n·term) where it stalls before its end, else 0: a
// systematic error (every lost term is lost on the same side), which √n·u for random-sign errors does not cover
function stalledShortfall(n: number, term: number, unitRoundoff: number): number {
  if (!(term > 0)) return 0;
  const exact = n * term;
  const stall = stallLevel(term, unitRoundoff);
  return exact > stall ? 1 - stall / exact : 0;
}

// Gradients summed over `terms` worker-and-step contributions: the engine's predicted sum (`output`) when it
// gives one, otherwise `terms` times one contribution (coherent parts add linearly: the worst case). When
// gradients are averaged, an implementation that divides each worker's gradient by the worker count before
// the sum moves small values down by that factor instead (DESIGN.md §5 item 9); that is judged as a risk only.
// In an 8-bit gradient format with scale factors the sum and each worker's share are stored as the plan's other 8-bit
// tensors are (the tensor rule, src/risk/tensor.ts, and the block rule, src/risk/blocks.ts): a per-tensor scale set from
// the tensor's own predicted max, or per-block scales following each block's maximum. A division by the worker count
// then moves the scale with the values (exactly for a power of two; within the binade the scale is floored to otherwise)
// instead of pushing them under the flush bound, and the sum overflows only as often as the scale rule clips.
function gradientSum(site: HazardSite, context: HazardContext, start: DraftList): void {
  gradientSumSides(site, null, context, start, null);
}

// A side's number the settle bounds put below SETTLED (src/risk/settle.ts) is taken as at most this, a margin of 10^3
// over SETTLED for the rule that computes it (within a factor 2 of the draw integral on any segment, as settle.ts
// takes it): the other side's number, computed, is kept without computing this one only when it is larger still.
const SETTLED_SIDE = 1e-10;

/**
 * {@link gradientSum} at the start and, given `siteEnd` and `end`, the end of the horizon at once, into `start` and
 * `end` (the same drafts, in the same order). Only the worse side of each evaluation is reported (evaluateHazard), so a
 * side whose overflow probability or flushed share the closed-form bounds of src/risk/settle.ts put below SETTLED_SIDE
 * is not integrated where the other side's number, integrated, is above it: that side's draft then holds SETTLED_SIDE,
 * a bound on its number, which the choice of the worse side reads as it would read the number (every verdict rises
 * with the number). Likewise the side likely the larger is computed first, and the other is not where a bound puts it
 * under a sixteenth of that number (overflowBeside, lostBeside): the sides of most sums lie binades apart.
 */
function gradientSumSides(
  site: HazardSite,
  siteEnd: HazardSite["end"] | null,
  context: HazardContext,
  start: DraftList,
  end: DraftList | null,
): void {
  // the running total, and each worker's share before it, sit in the sum buffer
  const limits = context.gradientSums;
  const t = context.thresholds;
  const terms = Math.max(1, site.terms);
  const format = FORMATS[limits.format];
  const scaling = format.bits === 8 ? (context.scaling ?? "none") : "none";
  if (scaling === "none" && context.countOnly === true) {
    countedSums(site, siteEnd, context, start, end);
    return;
  }
  const block = scaling === "block" ? blockScaledRiskCached(format) : null;
  const lossScale = context.lossScale;
  const sides = siteEnd !== null && siteEnd !== undefined && end !== null;
  const endInput = sides ? siteEnd.input : site.input;
  const endOutput = sides ? (siteEnd.output !== undefined ? siteEnd.output : site.output) : site.output;
  const startSummed = summedIn(START_SUMMED, site.input, site.output, lossScale, terms);
  const startLevel = sumOverflowLevel(startSummed, block, scaling, limits, t);
  const endSummed = sides ? summedIn(END_SUMMED, endInput, endOutput, lossScale, terms) : startSummed;
  const endLevel = sides ? sumOverflowLevel(endSummed, block, scaling, limits, t) : startLevel;
  let startOverflow = Number.NaN;
  let endOverflow = Number.NaN;
  const overflowAtRisk = overflowAtRiskThreshold(t, scaling === "tensor" && limits.saturates);
  // findings only counted: a side's number matters only past the lower threshold, so a bound under half of it stands
  // for the number (graded "fits" either way); the numbers past it are the ones the judgement takes
  const counting = context.countOnly === true;
  const overflowFinding = Math.min(overflowAtRisk, t.overflowFails);
  if (counting) {
    startOverflow = countedOverflow(startSummed, startLevel, overflowFinding / 2);
    if (sides) endOverflow = countedOverflow(endSummed, endLevel, overflowFinding / 2);
  } else if (!sides) {
    startOverflow = probabilityAnyAbove(startSummed, startLevel);
  } else if (settledAnyAbove(startSummed, startLevel, nonzeroElements(startSummed)) === 0) {
    endOverflow = probabilityAnyAbove(endSummed, endLevel);
    startOverflow = endOverflow > SETTLED_SIDE ? SETTLED_SIDE : probabilityAnyAbove(startSummed, startLevel);
  } else {
    const endSettled = settledAnyAbove(endSummed, endLevel, nonzeroElements(endSummed)) === 0;
    if (!endSettled && overflowReach(endSummed, endLevel) > overflowReach(startSummed, startLevel)) {
      // the end likely the larger: integrated first, the start then bounded beside it
      endOverflow = probabilityAnyAbove(endSummed, endLevel);
      startOverflow = overflowBeside(startSummed, startLevel, endOverflow, t.overflowFails);
    } else {
      startOverflow = probabilityAnyAbove(startSummed, startLevel);
      endOverflow = startOverflow > SETTLED_SIDE && endSettled ? SETTLED_SIDE : overflowBeside(endSummed, endLevel, startOverflow, t.overflowFails);
    }
  }
  grade(startOverflow, overflowAtRisk, t.overflowFails, startSummed.rms, startLevel / lossScale);
  putGraded(start, limits, "gradientSums", "overflow-risk", "gradient-sum-overflow", false, GRADIENT_SUM_OVERFLOW, false);
  if (end !== null) {
    grade(endOverflow, overflowAtRisk, t.overflowFails, endSummed.rms, endLevel / lossScale);
    putGraded(end, limits, "gradientSums", "overflow-risk", "gradient-sum-overflow", false, GRADIENT_SUM_OVERFLOW, false);
  }
  if (context.workerGradients === "average" && context.workers > 1) {
    const workers = context.workers;
    const startScaled = scaledIn(START_SCALED, site.input, lossScale);
    const startDivided = scaledIn(START_DIVIDED, startScaled, 1 / workers);
    const startLevelDivided = flushLevel(startDivided, block, scaling, limits, t);
    let startLost = Number.NaN;
    let endLost = Number.NaN;
    const endScaled = sides ? scaledIn(END_SCALED, endInput, lossScale) : startScaled;
    const endDivided = sides ? scaledIn(END_DIVIDED, endScaled, 1 / workers) : startDivided;
    const endLevelDivided = sides ? flushLevel(endDivided, block, scaling, limits, t) : Number.NaN;
    // the share lost is at most the divided gradients' share below the level
    if (counting) {
      // a finding past the lower threshold only
      const flushFinding = Math.min(t.energyAtRisk, t.energyFails) / 2;
      startLost = energyBelowAtMost(startDivided, startLevelDivided, flushFinding) ? 0 : lostEnergy(startScaled, startDivided, startLevelDivided, block, scaling, limits, t);
      if (sides) endLost = energyBelowAtMost(endDivided, endLevelDivided, flushFinding) ? 0 : lostEnergy(endScaled, endDivided, endLevelDivided, block, scaling, limits, t);
    } else if (!sides) {
      startLost = lostEnergy(startScaled, startDivided, startLevelDivided, block, scaling, limits, t);
    } else {
      if (settledEnergyBelow(startDivided, startLevelDivided) === 0) {
        endLost = lostEnergy(endScaled, endDivided, endLevelDivided, block, scaling, limits, t);
        startLost = endLost > SETTLED_SIDE ? SETTLED_SIDE : lostEnergy(startScaled, startDivided, startLevelDivided, block, scaling, limits, t);
      } else {
        const endSettled = settledEnergyBelow(endDivided, endLevelDivided) === 0;
        if (!endSettled && flushReach(endDivided, endLevelDivided) > flushReach(startDivided, startLevelDivided)) {
          // the end likely the larger: computed first, the start then bounded beside it
          endLost = lostEnergy(endScaled, endDivided, endLevelDivided, block, scaling, limits, t);
          startLost = lostBeside(startDivided, startLevelDivided, endLost) ? endLost * BESIDE : lostEnergy(startScaled, startDivided, startLevelDivided, block, scaling, limits, t);
        } else {
          startLost = lostEnergy(startScaled, startDivided, startLevelDivided, block, scaling, limits, t);
          endLost =
            startLost > SETTLED_SIDE && endSettled
              ? SETTLED_SIDE
              : lostBeside(endDivided, endLevelDivided, startLost)
                ? startLost * BESIDE
                : lostEnergy(endScaled, endDivided, endLevelDivided, block, scaling, limits, t);
        }
      }
    }
    grade(startLost, t.energyAtRisk, t.energyFails, 0, startLevelDivided * workers);
    putGraded(start, limits, "gradientSums", "flushed-energy", "gradient-sum-flush", true, GRADIENT_SUM_FLUSH, false);
    if (end !== null) {
      grade(endLost, t.energyAtRisk, t.energyFails, 0, endLevelDivided * workers);
      putGraded(end, limits, "gradientSums", "flushed-energy", "gradient-sum-flush", true, GRADIENT_SUM_FLUSH, false);
    }
  }
  // The sum's own rounding error, judged as an accumulation is (sumRoundingError), in the sum buffer's format
  const error = sumRoundingError(terms, limits.unitRoundoff);
  grade(error, t.accumulationAtRisk, t.accumulationFails, 0, Number.NaN);
  putGraded(start, limits, "gradientSums", "relative-error", "accumulation-error", false, GRADIENT_SUM_ERROR, false);
  if (end !== null) {
    grade(error, t.accumulationAtRisk, t.accumulationFails, 0, Number.NaN);
    putGraded(end, limits, "gradientSums", "relative-error", "accumulation-error", false, GRADIENT_SUM_ERROR, false);
  }
}

/**
 * {@link gradientSumSides} for a count (HazardContext.countOnly) in a format without scale factors, into the same drafts:
 * a side's overflow probability or flushed share that a closed-form bound puts under half the lower threshold is taken as
 * 0 (graded "fits" either way), the bounds reading the unscaled profiles at the levels moved by the factors (they read
 * t/rms); a profile is scaled only for the number they leave open, which is then the judgement's own.
 */
function countedSums(site: HazardSite, siteEnd: HazardSite["end"] | null, context: HazardContext, start: DraftList, end: DraftList | null): void {
  const limits = context.gradientSums;
  const t = context.thresholds;
  const terms = Math.max(1, site.terms);
  const lossScale = context.lossScale;
  const sides = siteEnd !== null && siteEnd !== undefined && end !== null;
  const level = limits.overflowLevel;
  const overflowAtRisk = overflowAtRiskThreshold(t, false);
  const overflowBound = Math.min(overflowAtRisk, t.overflowFails) / 2;
  const startSum = site.output !== undefined ? site.output : site.input;
  // as summedIn scales it: the predicted sum by the loss scale, else one contribution by the loss scale times the terms
  const startFactor = site.output !== undefined ? lossScale : lossScale * terms;
  // a side's overflow 0 where a larger scale showed the site's quiet, as the bound then gives it
  const known = context.overflowQuietKnown === true;
  grade(known ? 0 : countedSumOverflow(START_SUMMED, startSum, startFactor, level, overflowBound, context), overflowAtRisk, t.overflowFails, startFactor === 1 ? startSum.rms : startSum.rms * startFactor, level / lossScale);
  putGraded(start, limits, "gradientSums", "overflow-risk", "gradient-sum-overflow", false, GRADIENT_SUM_OVERFLOW, false);
  if (sides) {
    const endOutput = siteEnd.output !== undefined ? siteEnd.output : site.output;
    const endSum = endOutput !== undefined ? endOutput : siteEnd.input;
    const endFactor = endOutput !== undefined ? lossScale : lossScale * terms;
    grade(known ? 0 : countedSumOverflow(END_SUMMED, endSum, endFactor, level, overflowBound, context), overflowAtRisk, t.overflowFails, endFactor === 1 ? endSum.rms : endSum.rms * endFactor, level / lossScale);
    putGraded(end, limits, "gradientSums", "overflow-risk", "gradient-sum-overflow", false, GRADIENT_SUM_OVERFLOW, false);
  }
  if (context.workerGradients === "average" && context.workers > 1) {
    const workers = context.workers;
    grade(countedLost(START_SCALED, START_DIVIDED, site.input, context), t.energyAtRisk, t.energyFails, 0, limits.flushBound * workers);
    putGraded(start, limits, "gradientSums", "flushed-energy", "gradient-sum-flush", true, GRADIENT_SUM_FLUSH, false);
    if (sides) {
      grade(countedLost(END_SCALED, END_DIVIDED, siteEnd.input, context), t.energyAtRisk, t.energyFails, 0, limits.flushBound * workers);
      putGraded(end, limits, "gradientSums", "flushed-energy", "gradient-sum-flush", true, GRADIENT_SUM_FLUSH, false);
    }
  }
  const error = sumRoundingError(terms, limits.unitRoundoff);
  grade(error, t.accumulationAtRisk, t.accumulationFails, 0, Number.NaN);
  putGraded(start, limits, "gradientSums", "relative-error", "accumulation-error", false, GRADIENT_SUM_ERROR, false);
  if (sides) {
    grade(error, t.accumulationAtRisk, t.accumulationFails, 0, Number.NaN);
    putGraded(end as DraftList, limits, "gradientSums", "relative-error", "accumulation-error", false, GRADIENT_SUM_ERROR, false);
  }
}

/**
 * Whether a count (HazardContext.countOnly) of a gradient site, a gradient sum in a format without scale factors or a
 * gradient's accumulation, leaves no evaluation past a threshold, told by the first tests the count takes
 * (countedSums, gradientAccumulation), in their order and with their numbers: every overflow bound and every flushed-share
 * bound passed (each number then stands as 0, graded "fits"), and the sum's rounding error fitting. True only then,
 * with the context's overflowQuietShown left as the count leaves it; false says nothing (the count is taken whole, after
 * judge.ts judgeScaled sets overflowQuietShown afresh). The count's drafts, records and lists are then not made.
 */
export function countedQuiet(site: HazardSite, context: HazardContext): boolean {
  const t = context.thresholds;
  const lossScale = context.lossScale;
  const terms = Math.max(1, site.terms);
  const known = context.overflowQuietKnown === true;
  const siteEnd = site.end;
  const endJudged = judgesEnd(site, siteEnd);
  if (site.kind === "gradient-sum") {
    const limits = context.gradientSums;
    if (FORMATS[limits.format].bits === 8 && (context.scaling ?? "none") !== "none") return false;
    const error = sumRoundingError(terms, limits.unitRoundoff);
    const overflowAtRisk = overflowAtRiskThreshold(t, false);
    if (error > t.accumulationAtRisk || error > t.accumulationFails || 0 > overflowAtRisk || 0 > t.overflowFails) return false;
    if (!known) {
      const level = limits.overflowLevel;
      const overflowBound = Math.min(overflowAtRisk, t.overflowFails) / 2;
      const startSum = site.output !== undefined ? site.output : site.input;
      const startFactor = site.output !== undefined ? lossScale : lossScale * terms;
      if (!anyAboveAtMost(startSum, level / startFactor, nonzeroElements(startSum), overflowBound)) return false;
      if (!shownAtEveryLower(startSum)) context.overflowQuietShown = false;
      if (endJudged) {
        const endOutput = siteEnd.output !== undefined ? siteEnd.output : site.output;
        const endSum = endOutput !== undefined ? endOutput : siteEnd.input;
        const endFactor = endOutput !== undefined ? lossScale : lossScale * terms;
        if (!anyAboveAtMost(endSum, level / endFactor, nonzeroElements(endSum), overflowBound)) return false;
        if (!shownAtEveryLower(endSum)) context.overflowQuietShown = false;
      }
    }
    if (context.workerGradients === "average" && context.workers > 1) {
      if (0 > t.energyAtRisk || 0 > t.energyFails) return false;
      const bound = Math.min(t.energyAtRisk, t.energyFails) / 2;
      const level = (limits.flushBound * context.workers) / lossScale;
      if (!energyBelowAtMost(site.input, level, bound)) return false;
      if (endJudged && !energyBelowAtMost(siteEnd.input, level, bound)) return false;
    }
    return true;
  }
  if (site.kind !== "accumulation" || site.gradient !== true) return false;
  const limits = context.accumulate;
  const error = sumRoundingError(terms, limits.unitRoundoff);
  if (error > t.accumulationAtRisk || error > t.accumulationFails || 0 > t.overflowAtRisk || 0 > t.overflowFails || 0 > t.energyAtRisk || 0 > t.energyFails) return false;
  if (!accumulationQuiet(site.input, site.output, terms, known, context)) return false;
  return !endJudged || accumulationQuiet(siteEnd.input, siteEnd.output !== undefined ? siteEnd.output : site.output, terms, known, context);
}

// Whether a site's end is judged apart from its start: an end whose profiles are the start's own (a forward sum where the
// weights do not grow) would give the start's drafts again, number for number, so the start is then the one reported
// (isWorse: a tie keeps it), as it is with no end drafts
function judgesEnd(site: HazardSite, siteEnd: HazardSite["end"]): siteEnd is NonNullable<HazardSite["end"]> {
  return siteEnd !== undefined && !(siteEnd.input === site.input && (siteEnd.output === undefined || siteEnd.output === site.output));
}

// one side of countedQuiet's gradient accumulation: gradientAccumulation's count tests, in its order
function accumulationQuiet(input: MagnitudeProfile, output: MagnitudeProfile | undefined, terms: number, known: boolean, context: HazardContext): boolean {
  const t = context.thresholds;
  const lossScale = context.lossScale;
  const limits = context.accumulate;
  if (!known) {
    const level = limits.overflowLevel;
    if (!sumFarBelow(input, level / lossScale, terms)) return false;
    if (output !== undefined) {
      if (!anyAboveAtMost(output, level / lossScale, nonzeroElements(output), Math.min(t.overflowAtRisk, t.overflowFails) / 2)) return false;
      if (!shownAtEveryLower(output)) context.overflowQuietShown = false;
    }
  }
  return energyBelowAtMost(input, limits.flushBound / lossScale, Math.min(t.energyAtRisk, t.energyFails) / 2);
}

// a summed side's overflow probability where only its finding counts (no scale factors): 0 where the bound keeps it at
// most `bound`, else that of `sum` times `factor`, scaled into `slot` (the context's overflowQuietShown kept as it is
// only where the bound shows it at every smaller scale)
function countedSumOverflow(slot: MagnitudeProfile, sum: MagnitudeProfile, factor: number, level: number, bound: number, context: HazardContext): number {
  if (anyAboveAtMost(sum, level / factor, nonzeroElements(sum), bound)) {
    if (!shownAtEveryLower(sum)) context.overflowQuietShown = false;
    return 0;
  }
  context.overflowQuietShown = false;
  return probabilityAnyAbove(scaledIn(slot, sum, factor), level);
}

/**
 * Whether anyAboveBounded's last pass holds at every larger level for the profile, so a count's overflow side of a
 * gradient sum or a gradient's accumulation (countedSums, gradientAccumulation) shown quiet at one loss scale is quiet
 * at every smaller one (HazardContext.overflowQuietShown): each of its bounds reads the level over the scale (t = level/L,
 * or level/(L·terms)), which a smaller L leaves at least as large (a rounded division or product is monotone in each
 * operand), and each test it passed passes for a larger t: sumFarBelow's two quotients of t by a number of the profile
 * alone, and anyAboveBounded's test without its exponential or logarithm (t/rms times an exact power of two, squared,
 * against a number of p and the spread alone), for a profile with no bound (with one, a larger t may reach it, where
 * the Gaussian law no longer holds). The test with its exponential and logarithm is not taken as shown (Math.log's
 * monotony is not part of its definition). judge.ts judgeScaled sets overflowQuietKnown for a site a larger scale
 * showed quiet (then every such test counts as passed: the same numbers), and reads overflowQuietShown after each site.
 */
function shownAtEveryLower(profile: MagnitudeProfile): boolean {
  return boundedQuick && (profile.bound === undefined || !(profile.bound > 0));
}

// the share a division by the context's worker count flushes where only its finding counts (no scale factors, the sum
// buffer's format): 0 where the bound on the divided gradients keeps it at most half the lower threshold, else
// lostEnergy's, the gradients scaled into the slots (the context's numbers read here, not passed: doubles passed to a
// call the compiler does not inline are boxed)
function countedLost(scaledSlot: MagnitudeProfile, dividedSlot: MagnitudeProfile, input: MagnitudeProfile, context: HazardContext): number {
  const lossScale = context.lossScale;
  const workers = context.workers;
  const limits = context.gradientSums;
  const t = context.thresholds;
  const bound = Math.min(t.energyAtRisk, t.energyFails) / 2;
  if (energyBelowAtMost(input, (limits.flushBound * workers) / lossScale, bound)) return 0;
  const scaled = scaledIn(scaledSlot, input, lossScale);
  const divided = scaledIn(dividedSlot, scaled, 1 / workers);
  return lostEnergy(scaled, divided, limits.flushBound, null, "none", limits, t);
}

// A side of a gradient sum computed beside the other's number `other` is taken as at most `other`·BESIDE where a closed-form
// bound shows its draw integral is (anyAboveAtMost, energyBelowAtMost; the flushed share lost is at most the divided
// gradients' share below the level): then the number the judgement would compute is below `other` too, as the any-above
// sums are within 1e-6 relative and 1e-12 absolute of the integral (laws.ts, any-above.test.ts) and the energy shares'
// rows within 2e-7 relative, or 2e-19 absolute under 1e-6 (share-tables.test.ts), the rule within a factor 2 of any
// segment's mass (settle.ts): all far inside a factor 16 for an `other` of at least BESIDE_FLOOR. Its draft holds that
// bound: the other side stays the worse (a lower number has no higher verdict), the one choice the draft is read for.
const BESIDE = 1 / 16;
const BESIDE_FLOOR = 1e-10;

// the overflow probability of the side beside `other`, the other side's: at most `other`·BESIDE by the bound, else
// integrated; where `other` fails, at most a quarter of the fails threshold does as well (the end that fails is the
// worse side whatever the start's number)
function overflowBeside(summed: MagnitudeProfile, level: number, other: number, fails: number): number {
  if (other >= BESIDE_FLOOR) {
    const bound = other > fails ? Math.max(other * BESIDE, fails / 4) : other * BESIDE;
    if (anyAboveBounded(summed, level, nonzeroElements(summed), bound)) return bound;
  }
  return probabilityAnyAbove(summed, level);
}

// whether the flushed share lost by the division, at most the divided gradients' energy share below the level, is
// bounded at `other`·BESIDE
function lostBeside(divided: MagnitudeProfile, level: number, other: number): boolean {
  return other >= BESIDE_FLOOR && energyBelowAtMost(divided, level, other * BESIDE);
}

// Which side of a gradient sum to compute first: the one whose number is likely larger, by a rough reach in binades
// (the drawn scale at about 5 standard deviations against the level, the draws that carry a far tail); only the work
// depends on it, not the numbers reported
function overflowReach(summed: MagnitudeProfile, level: number): number {
  return Math.log2(summed.rms / level) + 5 * Math.max(0, summed.log2Spread);
}

// the same for the share below the flush level: a Gaussian's energy share below t grows as (t/r)³, over draws
// E[r^−3] = rms^−3·e^{(3·S·ln 2)²/2} (the log-normal's moment), in binades
function flushReach(divided: MagnitudeProfile, level: number): number {
  const m = 3 * Math.max(0, divided.log2Spread) * LN2;
  return 3 * Math.log2(level / divided.rms) + (m * m) / (2 * LN2);
}

// a summed side's overflow probability where only its finding counts: 0 where the bound keeps it at most `bound`
function countedOverflow(summed: MagnitudeProfile, level: number, bound: number): number {
  return anyAboveAtMost(summed, level, nonzeroElements(summed), bound) ? 0 : probabilityAnyAbove(summed, level);
}

/**
 * Whether the probability that some of the n nonzero elements reach t in a step ({@link probabilityAnyAbove}) is at
 * most p, shown by a closed-form bound (for p of at least 1e-9: the rule's sums are within 1e-6 relative of the
 * integral, src/risk/laws.ts anyAboveSum, and their 1e-12 absolute slack is at most 1e-3·p). The integrand
 * g(z) = anyOf(share·P(|X| ≥ t | r), n) rises with the draw z and is at most 1, so E_z[g] ≤ Q(z₀) + ∫_{z<z₀} g·φ, and
 * g(z) ≤ n·2Q(u) ≤ n·e^{−u²/2} (union and Chernoff bounds, common practice), u = t/r = u₀·e^{m(z₀−z)} (m = S·ln 2, u₀
 * at z₀). Below z₀, u² ≥ u₀²·(1 + 2m(z₀ − z)) (e^x ≥ 1 + x) and φ(z) ≤ φ(z₀)·e^{z₀(z₀−z)}, so the integral is at most
 * n·e^{−u₀²/2}·φ(z₀)/(m·u₀² − z₀) where m·u₀² > z₀, and at most n·e^{−u₀²/2} anyway (own algebra): with Q(z₀) = p/2
 * and the integral's bound at most p/2 the probability is at most p. For the Gaussian magnitude laws only (settle.ts's
 * gaussianAt); false where it cannot tell.
 */
export function anyAboveAtMost(profile: MagnitudeProfile, t: number, n: number, p: number): boolean {
  return p >= 1e-9 && anyAboveBounded(profile, t, n, p);
}

// {@link anyAboveAtMost}'s bound for any p in (0, 1): whether the draw integral itself is at most p (the caller keeps
// the rule's slack in mind)
function anyAboveBounded(profile: MagnitudeProfile, t: number, n: number, p: number): boolean {
  BOUNDED_ASK[0] = t;
  BOUNDED_ASK[1] = n;
  BOUNDED_ASK[2] = p;
  return boundedAsked(profile);
}
// anyAboveBounded's t, n and p, written by it (small enough to be inlined: its doubles cross unboxed) for boundedAsked
const BOUNDED_ASK = new Float64Array(3);

function boundedAsked(profile: MagnitudeProfile): boolean {
  const t = BOUNDED_ASK[0] as number;
  const n = BOUNDED_ASK[1] as number;
  const p = BOUNDED_ASK[2] as number;
  if (!(p > 0 && p < 1) || !(t > 0) || !(n > 0) || !gaussianAt(profile, t)) return false;
  const m = profile.log2Spread > 0 ? profile.log2Spread * LN2 : 0;
  // shown for 2^k ≤ p (k = ⌊log2 p⌋), a stronger claim: z₀ and its numbers are then read off a table per binade of p
  // (the binade of the last p kept: a count asks the same p of every site)
  if (p !== atMostP) {
    let k = Math.floor(Math.log2(p));
    if (2 ** k > p) k--;
    atMostP = p;
    atMostAt = -k * 3;
  }
  const at = atMostAt;
  const k = -at / 3;
  if (!(at < AT_MOST.length)) return false;
  if (AT_MOST[at] !== AT_MOST[at]) {
    // z₀ a little past the quantile of 2^k/2 (src/numeric's, exact to rounding after its Halley steps)
    const far = preciseUpperQuantile(2 ** (k - 1)) + 1e-3;
    AT_MOST[at] = far;
    AT_MOST[at + 1] = normalLogPdf(far);
    AT_MOST[at + 2] = (k - 1) * LN2;
  }
  const far = AT_MOST[at] as number;
  const x = m * far;
  const c = AT_MOST[at + 2] as number;
  // First without an exponential or a logarithm, where that already decides (most sums of a weighed scale sit binades
  // below the level): below is at most 0, ln n at most LN_COUNT_CAP, and u at least floorU's, each as computed (every
  // rounding below is monotone), so the sum tested below is at most the one tested here
  if (n <= COUNT_CAP) {
    const least = floorU(t / profile.rms, x);
    if (LN_COUNT_CAP - (least * least) / 2 <= c) {
      boundedQuick = true;
      return true;
    }
  }
  boundedQuick = false;
  const u = (t / profile.rms) * Math.exp(-x);
  const rate = m * u * u - far;
  const below = rate > 0 ? Math.min(0, (AT_MOST[at + 1] as number) - Math.log(rate)) : 0;
  if (n !== atMostN) {
    atMostN = n;
    atMostLogN = Math.log(n);
  }
  return atMostLogN - (u * u) / 2 + below <= c;
}

// ln n is at most LN_COUNT_CAP for n up to COUNT_CAP: ln 2^53 = 36.74 (Math.log within an ulp of it)
const COUNT_CAP = 2 ** 53;
const LN_COUNT_CAP = 37;
// a lower bound on a·e^{−x} as anyAboveBounded computes it ((a)·Math.exp(−x), x ≥ 0): 2^−j with j = ⌈x·log2 e⌉ + 1 is
// at most e^{−x}/2 (the ceiling and the rounding of x·log2 e move j by less than 1 binade), below Math.exp(−x), which
// is within an ulp of e^{−x} (fdlibm's exp, from memory); a product of a with the smaller factor rounds to no more
function floorU(a: number, x: number): number {
  const j = Math.ceil(x * Math.LOG2E) + 1;
  // (pow2: exact down to the least subnormal, 0 past it)
  return a * pow2(-j);
}
// Whether settledAnyAbove(profile, t, nonzeroElements(profile)) gives 0 (src/risk/settle.ts), shown without its logarithm
// and exponential, where that already decides (a backward sum in binary32 sits a hundred binades and more below the
// level): its test ln n − high²/2 < ln(SETTLED/4), high = (t/rms)·Math.exp(−m·FAR_DRAW) with m = S·ln 2, holds where
// LN_COUNT_CAP − low²/2 is below that bound, low = floorU(t/rms, m·FAR_DRAW) at most its high (floorU) and ln n at most
// LN_COUNT_CAP up to COUNT_CAP, each number computed as settledAnyAbove computes it and every rounding between monotone
// (a larger high, an infinite one included, leaves the difference no larger); false where it cannot tell
export function farQuiet(profile: MagnitudeProfile, t: number): boolean {
  if (!gaussianAt(profile, t) || !(t > 0)) return false;
  const n = nonzeroElements(profile);
  if (!(n > 0) || !(n <= COUNT_CAP)) return false;
  const spread = profile.log2Spread > 0 ? profile.log2Spread : 0;
  const low = floorU(t / profile.rms, spread * LN2 * FAR_DRAW);
  return LN_COUNT_CAP - (low * low) / 2 < LOG_FAR_SHARE;
}
/**
 * Whether settledEnergyBelow(profile, t) gives 0 (src/risk/settle.ts), shown without a logarithm or an exponential where
 * the level lies far below the scale (a backward sum's terms against binary32's flush bound): with c = (DENSITY/3)·(t/rms)³
 * and m = 3·S·ln 2 as it computes them, c ≤ 2^−K for K ≥ (m² + 8.65·m + 41)/ln 2 + 1 puts ln c below −(m² + 8.65·m + 41)
 * − ln 2, so that in capSettled the crossing ln c/m is below −8.65 (past −FAR_DRAW), z* + m below 0, ln c + m²/2 − ln 2
 * below LOG_SETTLED, and its two tail bounds, under φ(8.65)/8.65 and e^−40, together far below SETTLED/2: it returns
 * true, as it does for m = 0 (c < SETTLED). Own algebra; the margins (a binade in K, orders of magnitude in the tails)
 * stand for Math.log's and Math.exp's roundings. False where it cannot tell.
 */
export function farAbove(profile: MagnitudeProfile, t: number): boolean {
  if (!gaussianAt(profile, t)) return false;
  const spread = profile.log2Spread > 0 ? profile.log2Spread : 0;
  const a = t / profile.rms;
  const c = (DENSITY / 3) * a * a * a;
  const m = 3 * spread * LN2;
  const k = Math.ceil((m * m + 8.65 * m + 41) * Math.LOG2E) + 1;
  // (pow2: 0 past the least subnormal, where this cannot tell)
  return c <= pow2(-k);
}

// settle.ts's bound on ln n − high²/2, computed as it computes it
const LOG_FAR_SHARE = Math.log(SETTLED / 4);

// the last p and n anyAboveBounded was asked with, the row of p's binade and ln n
let atMostP = Number.NaN;
let atMostAt = 0;
let atMostN = Number.NaN;
let atMostLogN = Number.NaN;
// whether anyAboveBounded's last true came from its test without an exponential or a logarithm (shownAtEveryLower)
let boundedQuick = false;
// per binade of p, 2^k for k = 0, −1, …, −99: z₀, ln φ(z₀) and ln(2^k/2), filled as asked (NaN until then)
const AT_MOST = new Float64Array(300).fill(Number.NaN);

// The summed gradients of one side in the sum buffer's units: the engine's predicted sum (`output`) when it gives one,
// else `terms` times one contribution, after the loss scale
function summedIn(slot: MagnitudeProfile, input: MagnitudeProfile, output: MagnitudeProfile | undefined, lossScale: number, terms: number): MagnitudeProfile {
  return output !== undefined ? scaledIn(slot, output, lossScale) : scaledIn(slot, input, lossScale * terms);
}

// the level summed gradients overflow from, in their own units (before any scale factor), as gradientSum takes it
function sumOverflowLevel(summed: MagnitudeProfile, block: BlockScaledRisk | null, scaling: "none" | "tensor" | "block", limits: RangeLimits, t: RiskThresholds): number {
  return block !== null
    ? block.scaleClampLevel
    : scaling === "tensor"
      ? limits.overflowLevel * 2 ** -perTensorScaleLog2(profileStatistics(summed, t).max, limits.maxFinite)
      : limits.overflowLevel;
}

// the squared-norm share a division by the worker count flushes beyond what the undivided gradients lose, as gradientSum
// takes it
function lostEnergy(
  scaled: MagnitudeProfile,
  divided: MagnitudeProfile,
  dividedLevel: number,
  block: BlockScaledRisk | null,
  scaling: "none" | "tensor" | "block",
  limits: RangeLimits,
  t: RiskThresholds,
): number {
  return Math.max(0, energyBelow(divided, dividedLevel) - energyBelow(scaled, flushLevel(scaled, block, scaling, limits, t)));
}

// The flush level in a gradient profile's own units: the bound, moved by the profile's own per-tensor scale; under block
// scales, the floor of a scale clamped at 2^-127 (a block's own flushing does not move with a common factor). A function,
// not a closure per site.
function flushLevel(profile: MagnitudeProfile, block: BlockScaledRisk | null, scaling: "none" | "tensor" | "block", limits: RangeLimits, t: RiskThresholds): number {
  return block !== null
    ? block.smallestScale * limits.flushBound
    : scaling === "tensor"
      ? limits.flushBound * 2 ** -perTensorScaleLog2(profileStatistics(profile, t).max, limits.maxFinite)
      : limits.flushBound;
}

// Adam's update m/(√v + ε): ε = 1e-8 rounds to 0 in binary16 (SCIENCE.md §3.3). Where the stored second moment
// is zero too — an exactly zero gradient, or (1 − β2)·g² flushed — the update divides by zero.
// The training setup's site sums the count over the context's weight gradients at the side judged (the optimizer check
// counts by the same function); a site of the prediction is judged at its gradient.
function optimizerConstant(site: HazardSite, gradient: MagnitudeProfile, context: HazardContext, list: DraftList, side: "start" | "end" | null): void {
  const limits = context.optimizerStates;
  const epsilon = site.constant;
  if (epsilon === undefined) return;
  // its own verdict: fits while ε stays nonzero; else fails where some second moment is zero every step. Kept or
  // not by rounding ε itself, as the optimizer check does: the smallest normal is kept where subnormals flush, though
  // flushBound (for profiles) equals it
  if (storedEpsilon(limits, epsilon) !== 0) {
    fill(nextDraft(list), limits.format, "optimizerStates", "zero-second-moments", "optimizer-epsilon-flushed", 0, limits.flushBound,
      "fits", 0, EPSILON_KEPT, epsilon, false);
  } else {
    const weightGradients = context.weightGradients;
    const network =
      side === null || weightGradients === undefined ? undefined : networkZeroSecondMomentsAt(weightGradients, side, limits.flushBound, context.beta2);
    const zeros = network === undefined ? zeroSecondMoments(gradient, limits.flushBound, context.beta2) : network.perStep;
    const draft = nextDraft(list);
    fill(draft, limits.format, "optimizerStates", "zero-second-moments", "optimizer-epsilon-flushed", zeros, limits.flushBound,
      vanishedEpsilonVerdict(zeros), 0, EPSILON_FLUSHED, epsilon, false);
    if (network !== undefined && network.top !== "") {
      draft.top = network.top;
      draft.topValue = network.topCount;
      draft.topLayer = network.topLayer;
      draft.topInput = network.topProfile;
    }
  }
}

function secondMoment(gradient: MagnitudeProfile, context: HazardContext, list: DraftList): void {
  const { bound, share } = flushedSecondMoments(gradient, context.optimizerStates.flushBound, context.beta2);
  // one rule with the optimizer check (src/risk/second-moments.ts), so both give it one severity
  const { verdict, threshold } = flushedSecondMomentsVerdict(share, context.thresholds);
  fill(nextDraft(list), context.optimizerStates.format, "optimizerStates", "flushed-share", "second-moment-flushed", share, bound,
    verdict, threshold, SECOND_MOMENT, 0, false);
}

// the limit of the loss-value sentence is in the loss's own units, before the loss scale multiplies it: "it" after
// "(times the loss scale 2^16)" read as the scaled loss
function lossSubject(terms: number, lossScale: number): string {
  if (terms > 1) return lossScale === 1 ? "a term" : "an unscaled term";
  return lossScale === 1 ? "it" : "the unscaled loss";
}
