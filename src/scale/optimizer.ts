/**
 * The optimizer in the planned formats: its states (first and second moments, momentum buffers), its epsilon,
 * and whether each weight update survives the add into the stored weights (swamping, src/scale/swamping.ts).
 */
import type { Format } from "../formats/index.js";
import { getFormat } from "../formats/index.js";
import type { HazardKind, MagnitudeProfile, Prediction, TensorPrediction } from "../magnitude/types.js";
import { DEFAULT_THRESHOLDS, fractionBelow, limitsFor, nonzeroElements, probabilityAnyAbove, scaleProfile, worseVerdict, type RangeLimits, type RiskThresholds } from "../risk/index.js";
import {
  clippedBy,
  flushedSecondMoments,
  gradientClips,
  type GradientClip,
  flushedSecondMomentsVerdict,
  hasSite,
  networkZeroSecondMoments,
  stateSiteGradients,
  storedEpsilon,
  vanishedEpsilonVerdict,
  weightGradientsOf,
  zeroSecondMoments,
} from "../risk/second-moments.js";
import { notCountedSentence, plainNumber, sentenceStart, tinyShare } from "../risk/words.js";
import type { FormatName } from "../formats/names.js";
import type { OptimizerSpec, PrecisionPlan } from "../spec/types.js";
import { SwampingSums, sameLaw } from "./swamping.js";
import { scaledIn, workingProfile } from "../risk/hazards.js";
import { knownWeightPairs } from "../magnitude/predict.js";

export { swampedShare } from "./swamping.js";

/** The learning rates the assessment looks at: the smallest and largest of the schedule. */
export type SchedulePoint = "warm-up start" | "peak" | "end";

/**
 * Shares of the weight update's squared norm lost to swamping at one point of the schedule, for the plan and for each
 * remedy (src/scale/swamping.ts: updates below half an ulp of their weight, weighed by their energy).
 */
export interface UpdateLoss {
  at: SchedulePoint;
  learningRate: number;
  /** rms of the update elements */
  updateRms: number;
  /** log2(update rms / weight rms): how far below its weight a typical update is */
  relativeLog2: number;
  /** share of the update's squared norm lost under the plan as written (into the master copy if there is one, else into the stored weights) */
  planned: number;
  /** lost share when updating the stored weights directly, with no master copy */
  withoutMaster: number;
  /** lost share with a binary32 master copy */
  withBinary32Master: number;
  /** lost share with compensated (Kahan) summation into the format that receives the update (the master copy if
   * there is one, else the stored weights): about twice its precision */
  compensated: number;
  /** with stochastic rounding nothing is lost in expectation; steps until rounding noise falls below 10% of the summed update */
  stochasticStepsToAverage: number;
  /**
   * present when `clip-norm` scales the gradients down at this point: the factor clip-norm / the predicted global
   * gradient norm (below 1), and that norm. Adam's update m̂/(√v̂ + ε) keeps its size only while ε stays negligible
   */
  clipped?: GradientClip & {
    /** the share of the update's squared norm lost under the plan without the clip */
    plannedUnclipped: number;
  };
}

/** One weight tensor and its optimizer states. */
export interface WeightOptimizerCheck {
  weight: string;
  gradient: string;
  weightRms: number;
  gradientRms: { start: number; end: number };
  /** one per schedule point; weights whose laws and updates' laws are equal share one list (the same numbers) */
  updates: UpdateLoss[];
  /** AdamW only: share of decoupled weight-decay steps (lr·decay·w) lost, at the end learning rate (the peak one when the schedule ends at 0) */
  decayLost: number | null;
  /** share of first-moment (or momentum) elements flushed to zero in the optimizer-state format, first step */
  firstMomentFlushed: number;
  /** share of second-moment elements flushed at the first step ((1−β2)·g²) and once averaged (≈ g²) */
  secondMomentFlushed: { firstStep: number; settled: number };
  /** probability per step that a second-moment element overflows (g² past the overflow level) */
  secondMomentOverflowRisk: number;
}

export type OptimizerVerdict = "fits" | "at-risk" | "fails";

/** The hazard sites that judge the optimizer's states: Adam's epsilon and its stored second moment. */
export type OptimizerStateHazard = Extract<HazardKind, "optimizer-constant" | "optimizer-second-moment">;

export interface OptimizerCheck {
  kind: OptimizerSpec["kind"];
  /** where the update is added: the master copy's format, or the stored weights' format */
  updateFormat: FormatName;
  weightFormat: FormatName;
  stateFormat: FormatName;
  epsilon: { value: number; stored: number; vanishes: boolean } | null;
  tensors: WeightOptimizerCheck[];
  /** the worst share of the update's squared norm lost under the plan, where it happens */
  worst: { weight: string; at: SchedulePoint; lostShare: number } | null;
  /** the worst of the findings in the formats judged (every format unless the caller names them) */
  verdict: OptimizerVerdict;
  /** one sentence each, worst first; a finding in a format not judged says it does not count */
  reasons: string[];
  /** the states' findings told by the operation hazards of these kinds instead of in `reasons` (they still count
   * in `verdict`, and their remedies stay in `remedies`) */
  reportedAsHazards: OptimizerStateHazard[];
  /** remedies with their computed effect, best first (empty when nothing is lost) */
  remedies: string[];
}

/**
 * Thresholds (documented in README.md): a weight tensor whose update loses more than 1e-4 of its squared norm at some
 * point of the schedule is at risk; more than 1e-2 at the peak learning rate fails. A lost update is a zero gradient for
 * that weight in that step, so these are the flushed-gradient-energy limits (DEFAULT_THRESHOLDS energyAtRisk and
 * energyFails). The share of elements, the earlier measure, flagged a binary32 master copy taking updates 2^-18 of its
 * weights: 1.6% of a Gaussian update's elements fall below half an ulp, but they carry ~1e-6 of its energy. Decay steps
 * are one fixed fraction of every weight, the same each step (a weight whose decay is lost never decays): they keep the
 * share of weights, at risk above 1%. Flushed second moments are graded by the risk thresholds' flushed shares
 * (`flushedAtRisk`, `flushedFails`), as their hazard is.
 */
export const OPTIMIZER_THRESHOLDS = { lostAtRisk: 1e-4, lostFails: 1e-2, decayLostAtRisk: 0.01 } as const;

/**
 * Steps of stochastic rounding until the rounding noise of the summed update falls below 10% of it.
 * With q = |Δ|/ulp < 1, each step rounds up with probability q (unbiased), adding noise of variance
 * q(1−q)·ulp²; after N steps the relative noise is sqrt((1−q)/(N·q)) (binomial counting; common practice).
 */
export function stochasticStepsToAverage(updateRms: number, weightRms: number, format: Pick<Format, "precision">): number {
  return stepsToAverage(updateRms, weightRms > 0 ? ulpOf(weightRms, format) : -1);
}

// the ulp of a weight of this rms in the format (the weight's binade)
function ulpOf(weightRms: number, format: Pick<Format, "precision">): number {
  return 2 ** (Math.floor(Math.log2(weightRms)) - format.precision + 1);
}

// stochasticStepsToAverage with the weight's ulp already worked out (-1 for a weight of rms 0): one per weight, not per update
function stepsToAverage(updateRms: number, ulp: number): number {
  if (!(updateRms > 0) || !(ulp >= 0)) return 0;
  const q = updateRms / ulp;
  if (q >= 1) return 1;
  return Math.ceil((100 * (1 - q)) / q);
}

/** ε/σ below which Adam's damping σ/(σ + ε) is taken as 1: the update moves by less than 0.1%. */
const EPSILON_NEGLIGIBLE = 1e-3;

/**
 * The update elements at one learning rate (unscaled gradients: the loss scale is removed before the optimizer, and
 * clipping applied). `epsilon`: Adam's ε as the state format stores it.
 */
function updateProfile(optimizer: OptimizerSpec, gradient: MagnitudeProfile, lr: number, firstStep: boolean, epsilon: number): MagnitudeProfile {
  const beta1 = optimizer.betas[0];
  switch (optimizer.kind) {
    case "sgd":
      return { ...scaleProfile(gradient, lr), zeroFraction: gradient.zeroFraction };
    case "momentum":
      // a momentum buffer of independent gradients settles at variance σ²/(1−μ²) (geometric sum; common practice)
      return scaleProfile(gradient, (lr * (firstStep ? 1 : 1)) / Math.sqrt(1 - optimizer.momentum ** 2));
    case "adam":
    case "adamw": {
      // the update is m̂/(√v̂ + ε) (Kingma & Ba 2015, Algorithm 1): with √v̂ ≈ σ, the gradients' rms, it keeps the size
      // below while ε ≪ σ and shrinks by σ/(σ + ε) as ε takes over (derived), as it does for clipped gradients
      const sigma = gradient.rms;
      // √v̂ ≈ σ is itself an estimate: a damping within 1e-3 of 1 (ε < 1e-3·σ) is left at 1, so the updates of one
      // learning rate keep one law, and its swamping sums serve every weight (src/scale/swamping.ts)
      const damping = !(sigma > 0) ? 0 : epsilon < EPSILON_NEGLIGIBLE * sigma ? 1 : sigma / (sigma + epsilon);
      if (firstStep) {
        // at the first step m̂ = g and v̂ = g², so |Δ| = lr·|g|/(|g| + ε): lr for every nonzero gradient while ε is
        // negligible (Kingma & Ba 2015, step size); where ε exceeds σ, most elements move by lr·g/ε, the gradient's shape
        return sigma >= epsilon
          ? { elements: gradient.elements, zeroFraction: gradient.zeroFraction, shape: "constant", rms: lr * damping, log2Spread: 0 }
          : scaleProfile(gradient, (lr * damping) / sigma);
      }
      // settled, for noise-dominated gradients: m has variance σ²(1−β1)/(1+β1) (exponential average of
      // independent terms) and √v̂ ≈ σ, so Δ ≈ lr·sqrt((1−β1)/(1+β1))·Z (derived; SCIENCE.md §3.3 gives |Δ| ≈ lr early)
      return {
        elements: gradient.elements,
        zeroFraction: gradient.zeroFraction,
        shape: "gaussian",
        rms: lr * Math.sqrt((1 - beta1) / (1 + beta1)) * damping,
        log2Spread: 0,
      };
    }
  }
}

interface SchedulePointRate {
  at: SchedulePoint;
  lr: number;
  firstStep: boolean;
}

function schedule(optimizer: OptimizerSpec): SchedulePointRate[] {
  const points: SchedulePointRate[] = [];
  const { peak, end } = optimizer.learningRate;
  // linear warm-up from near 0 (common practice); judged one hundredth of the way in (or at its first step when
  // shorter), since the very first updates of any warm-up are vanishingly small in every format
  if (optimizer.warmupSteps > 0) {
    points.push({ at: "warm-up start", lr: peak * Math.max(1 / optimizer.warmupSteps, 0.01), firstStep: true });
  }
  points.push({ at: "peak", lr: peak, firstStep: optimizer.warmupSteps === 0 });
  if (end !== peak) points.push({ at: "end", lr: end, firstStep: false });
  return points;
}

/** Pair each weight with its weight gradient by layer and suffix (`dense-1/weight` ↔ `dense-1/weight-gradient`). */
export function weightPairs(prediction: Prediction): { weight: TensorPrediction; gradient: TensorPrediction }[] {
  const tensors = prediction.tensors;
  // the gradients of each layer (a layer has a few weights) chained by index, newest first: the layer's newest in a map,
  // each gradient's previous one of its layer in a typed array (a list per layer made ~140 kB a 1,000-layer check),
  // with no key string made per tensor
  const newest = new Map<string, number>();
  const previous = new Int32Array(tensors.length);
  for (let i = 0; i < tensors.length; i++) {
    const t = tensors[i] as TensorPrediction;
    if (t.role !== "weight-gradient") continue;
    const layer = t.layer;
    const before = newest.get(layer);
    previous[i] = before === undefined ? -1 : before;
    newest.set(layer, i);
  }
  const pairs: { weight: TensorPrediction; gradient: TensorPrediction }[] = [];
  // the weights in order
  for (let i = 0; i < tensors.length; i++) {
    const t = tensors[i] as TensorPrediction;
    if (t.role !== "weight") continue;
    // the last of the layer's gradients with the weight's suffix, as one keyed table of them would keep: the newest
    // matching one in the chain
    let k = newest.get(t.layer);
    if (k === undefined) continue;
    while (k >= 0 && !sameSuffix(t.id, (tensors[k] as TensorPrediction).id)) k = previous[k] as number;
    if (k >= 0) pairs.push({ weight: t, gradient: tensors[k] as TensorPrediction });
  }
  return pairs;
}

// whether two ids have the same suffix from their last colon, or both none (`d1/weight:bias` and `d1/weight-gradient:bias`)
function sameSuffix(a: string, b: string): boolean {
  const ca = a.lastIndexOf(":");
  const cb = b.lastIndexOf(":");
  if (ca < 0 || cb < 0) return ca < 0 && cb < 0;
  const length = a.length - ca;
  if (length !== b.length - cb) return false;
  for (let i = 1; i < length; i++) if (a.charCodeAt(ca + i) !== b.charCodeAt(cb + i)) return false;
  return true;
}

// The updates of one weight at one point of the schedule, and their shares lost in each format (in the order the
// sums were given: without a master copy, with a binary32 one, as planned, compensated).
function updateLoss(
  optimizer: OptimizerSpec,
  sums: SwampingSums,
  gradient: TensorPrediction,
  w: MagnitudeProfile,
  point: SchedulePointRate,
  ulp: number,
  clip: Clips | null,
  epsilon: number,
): UpdateLoss {
  const side = point.at === "end" ? "end" : "start";
  const clipped = clip?.[side];
  // clipping multiplies every gradient by one factor before the step: SGD's and momentum's updates follow it, Adam's
  // once ε is no longer negligible beside the clipped gradients
  const g = clipped !== undefined ? scaleProfile(gradient[side], clipped.factor) : gradient[side];
  const loss = lossOf(sums, w, point, updateProfile(optimizer, g, point.lr, point.firstStep, epsilon), ulp);
  // the same update without the clip: what raising clip-norm would keep
  if (clipped !== undefined) {
    const plannedUnclipped = sums.lost(w, updateProfile(optimizer, gradient[side], point.lr, point.firstStep, epsilon))[2] as number;
    loss.clipped = { ...clipped, plannedUnclipped };
  }
  return loss;
}

// An update's numbers against its weight: its lost shares in each format and its size.
function lossOf(sums: SwampingSums, w: MagnitudeProfile, point: SchedulePointRate, update: MagnitudeProfile, ulp: number): UpdateLoss {
  const lost = sums.lost(w, update);
  return {
    at: point.at,
    learningRate: point.lr,
    updateRms: update.rms,
    relativeLog2: Math.log2(update.rms / w.rms),
    planned: lost[2] as number,
    withoutMaster: lost[0] as number,
    withBinary32Master: lost[1] as number,
    compensated: lost[3] as number,
    stochasticStepsToAverage: stepsToAverage(update.rms, ulp),
  };
}

/** Where `clip-norm` scales the gradients down, at each side of the horizon (src/risk/second-moments.ts). */
type Clips = Partial<Record<"start" | "end", GradientClip>>;

/**
 * Assess the optimizer of a spec under a precision plan. `plannedSteps` (the horizon's training steps), when
 * given, is set against the steps stochastic rounding needs to average out, so a remedy that would not within
 * the run says so. `hazards`: the state hazards whose findings the caller reports in the plan's state format (as
 * `check` does); a state finding of those kinds is then left out of `reasons` and listed in `reportedAsHazards`.
 * `thresholds`: the flushed shares that grade second moments, the caller's overrides included (as the judge takes
 * them), so the optimizer and the `optimizer-second-moment` hazard give one severity.
 * `judged`: the formats whose findings count in `verdict` (as `check` passes the planned formats it judged); a
 * finding in another format is still told, and its reason says it does not count. Default: every format.
 * @example checkOptimizer(optimizer, plan, prediction).worst?.lostShare // => share of the update's squared norm lost, e.g. 0.93
 */
export function checkOptimizer(
  optimizer: OptimizerSpec,
  plan: PrecisionPlan,
  prediction: Prediction,
  plannedSteps?: number,
  hazards: readonly OptimizerStateHazard[] = [],
  thresholds: Pick<RiskThresholds, "flushedAtRisk" | "flushedFails"> = DEFAULT_THRESHOLDS,
  judged?: readonly FormatName[],
): OptimizerCheck {
  const weightFormat = getFormat(plan.weights);
  const stateFormat = getFormat(plan.optimizerStates);
  const master = plan.masterWeights === "none" ? null : getFormat(plan.masterWeights);
  const binary32 = getFormat("binary32");
  const updateFormat = master ?? weightFormat;
  // compensated summation into the format that receives the update: about twice its precision (Kahan 1965)
  const compensatedFormat = { precision: 2 * updateFormat.precision, emin: updateFormat.emin };
  // the hazards' bound for figures, epsilon and verdicts alike: half the smallest subnormal (IEEE 754-2019 §4.3.1),
  // or the smallest normal where subnormals flush, as bfloat16's are taken to by default (SCIENCE.md §1.2)
  const stateLimits = limitsFor(plan, plan.optimizerStates);
  const stateFlushBound = stateLimits.flushBound;
  const stateOverflow = stateFormat.overflowThreshold;
  const adamLike = optimizer.kind === "adam" || optimizer.kind === "adamw";

  const points = schedule(optimizer);
  // lost shares: without a master copy, with a binary32 one, as planned, with compensated summation
  const sums = new SwampingSums([weightFormat, binary32, updateFormat, compensatedFormat]);
  // decoupled decay subtracts lr·λ·w: a fixed fraction of each weight (Loshchilov & Hutter 2019), the same share lost
  // for every weight
  const decayLost =
    optimizer.kind === "adamw" && optimizer.weightDecay > 0 ? decoupledDecayLost(decayRate(optimizer).lr * optimizer.weightDecay, updateFormat) : null;
  // check's own prediction knows its pairs (the same list: src/magnitude/predict.ts knownWeightPairs)
  const pairs = knownWeightPairs(prediction.tensors) ?? weightPairs(prediction);
  // the states and the update see the gradients after clipping, whatever the optimizer (src/risk/second-moments.ts)
  const weightGradients = weightGradientsOf(prediction);
  const clip = gradientClips(optimizer.clipNorm, weightGradients);
  const stateGradients = clippedBy(weightGradients, clip);
  const epsilon = adamLike
    ? (() => {
        const stored = storedEpsilon(stateLimits, optimizer.epsilon);
        return { value: optimizer.epsilon, stored, vanishes: stored === 0 };
      })()
    : null;
  const context: WeightCheckContext = { optimizer, points, sums, updateFormat, stateFlushBound, stateOverflow, adamLike, decayLost, clip, epsilon: epsilon?.stored ?? 0, made: [] };
  const tensors: WeightOptimizerCheck[] = [];
  for (let p = 0; p < pairs.length; p++) {
    const { weight, gradient } = pairs[p] as { weight: TensorPrediction; gradient: TensorPrediction };
    tensors.push(weightCheck(context, weight, gradient));
  }

  // zero second moments per step where a vanishing epsilon is judged: the same gradient, flush bound and count as
  // the optimizer-constant hazard (src/risk/second-moments.ts), so both give it one severity
  // — summed over every weight gradient, at the worse of start and end, unless the prediction has its own site (by
  // the function the hazard counts with)
  let zeros: ZeroCount = { perStep: 0, top: "" };
  if (epsilon?.vanishes) {
    if (hasSite(prediction.hazards, "optimizer-constant")) {
      const gradients = stateSiteGradients(prediction, "optimizer-constant", stateGradients).gradients;
      for (let i = 0; i < gradients.length; i++) {
        zeros.perStep = Math.max(zeros.perStep, zeroSecondMoments(gradients[i] as MagnitudeProfile, stateFlushBound, optimizer.betas[1]));
      }
    } else {
      const network = networkZeroSecondMoments(stateGradients, stateFlushBound, optimizer.betas[1]);
      zeros = { perStep: network.perStep, top: network.top };
    }
  }

  // flushed second moments where their hazard judges them: the same gradients, flush bound, share and thresholds as
  // the optimizer-second-moment hazard (src/risk/second-moments.ts), so both give them one severity
  let secondMoments: SecondMoments | null = null;
  if (adamLike) {
    const site = stateSiteGradients(prediction, "optimizer-second-moment", stateGradients);
    const binary32Bound = limitsFor(plan, "binary32").flushBound;
    let share = 0;
    let inBinary32 = 0;
    for (let i = 0; i < site.gradients.length; i++) {
      const gradient = site.gradients[i] as MagnitudeProfile;
      share = Math.max(share, flushedSecondMoments(gradient, stateFlushBound, optimizer.betas[1]).share);
      inBinary32 = Math.max(inBinary32, flushedSecondMoments(gradient, binary32Bound, optimizer.betas[1]).share);
    }
    // the share the same site would flush without the clip: what raising clip-norm would keep
    let unclipped: number | null = null;
    if (clip !== null) {
      unclipped = 0;
      const free = stateSiteGradients(prediction, "optimizer-second-moment").gradients;
      for (let i = 0; i < free.length; i++) unclipped = Math.max(unclipped, flushedSecondMoments(free[i] as MagnitudeProfile, stateFlushBound, optimizer.betas[1]).share);
    }
    secondMoments = {
      layer: site.layer,
      share,
      inBinary32: binary32Bound < stateFlushBound ? inBinary32 : null,
      unclipped,
      verdict: flushedSecondMomentsVerdict(share, thresholds).verdict,
    };
  }

  return summarise(optimizer, plan, tensors, epsilon, zeros, secondMoments, { weightFormat, stateFormat, stateSmallest: stateLimits.smallest, stateLimits, updateFormat, binary32, compensatedFormat }, plannedSteps, hazards, judged, clip);
}

// Zero second moments per step where a vanishing epsilon is judged, and the weight gradient giving most ("" when
// judged at one site of the prediction).
interface ZeroCount {
  perStep: number;
  top: string;
}

// Flushed second moments at their hazard's gradients: the share in the state format, the share binary32 states
// would flush (null when binary32 keeps no smaller values), and the verdict.
interface SecondMoments {
  layer: string;
  share: number;
  inBinary32: number | null;
  /** the share without the clip (null when clip-norm clips nowhere) */
  unclipped: number | null;
  verdict: OptimizerVerdict;
}

// What every weight's check reads, fixed for one assessment.
interface WeightCheckContext {
  optimizer: OptimizerSpec;
  points: SchedulePointRate[];
  sums: SwampingSums;
  updateFormat: Format;
  stateFlushBound: number;
  stateOverflow: number;
  adamLike: boolean;
  decayLost: number | null;
  /** where clip-norm scales the gradients down (null: nowhere) */
  clip: Clips | null;
  /** Adam's ε as the state format stores it (0 for the others) */
  epsilon: number;
  /** the update lists made so far (without a clip), for weights whose laws and updates' laws meet one again */
  made: MadeUpdates[];
}

/**
 * A weight's update list and what its numbers are made of: the weight's law and its updates' laws, point by point, and
 * for each point whether Adam's update there is set by the learning rate alone (see {@link settledBy}).
 */
interface MadeUpdates {
  weight: MagnitudeProfile;
  laws: MagnitudeProfile[];
  keys: number[];
  updates: UpdateLoss[];
}

/** How many update lists an assessment keeps to share: a network has few weight laws (a width, its bias). */
const MADE_LIMIT = 16;

/**
 * The updates of a weight at each point of the schedule. Every number of an update is a function of the weight's law
 * and the update's (its lost shares, src/scale/swamping.ts; its rms, its size against the weight's rms and the ulp of
 * that rms), so weights whose laws and updates' laws meet an earlier weight's share that weight's list: a network's
 * layers of one width, under Adam, whose update sizes are set by the learning rate alone, make it once.
 */
function updatesOf(c: WeightCheckContext, gradient: TensorPrediction, w: MagnitudeProfile): UpdateLoss[] {
  const { optimizer, points } = c;
  if (c.clip !== null) {
    const updates: UpdateLoss[] = [];
    const ulp = w.rms > 0 ? ulpOf(w.rms, c.updateFormat) : -1;
    for (let j = 0; j < points.length; j++) updates.push(updateLoss(optimizer, c.sums, gradient, w, points[j] as SchedulePointRate, ulp, c.clip, c.epsilon));
    return updates;
  }
  const made = c.made;
  // first by the keys alone, with no update made: Adam's updates where ε is negligible (measured Dec 2026 on the
  // 1,000-layer bench spec, 3 alternating pairs of 80 fresh checks: checkOptimizer 1.24–1.41 ms best with it, 1.56–1.63
  // with the law matcher alone, which makes each weight's update laws to compare them); the keys worked out in one
  // array for every weight, copied only into a list kept to share
  const keys = KEYS;
  const count = points.length;
  let keyed = true;
  for (let j = 0; j < count; j++) {
    const key = settledBy(c, points[j] as SchedulePointRate, gradient);
    keys[j] = key;
    if (key < 0) keyed = false;
  }
  if (keyed) {
    for (let k = 0; k < made.length; k++) {
      const m = made[k] as MadeUpdates;
      if (sameKeys(m.keys, keys, count) && sameLaw(m.weight, w) && m.weight.zeroFraction === w.zeroFraction) return m.updates;
    }
  }
  const laws: MagnitudeProfile[] = [];
  for (let j = 0; j < count; j++) {
    const point = points[j] as SchedulePointRate;
    laws.push(updateProfile(optimizer, point.at === "end" ? gradient.end : gradient.start, point.lr, point.firstStep, c.epsilon));
  }
  for (let k = 0; k < made.length; k++) {
    const m = made[k] as MadeUpdates;
    if (!sameLaw(m.weight, w) || m.weight.zeroFraction !== w.zeroFraction) continue;
    let same = true;
    for (let j = 0; j < laws.length && same; j++) same = sameLaw(m.laws[j] as MagnitudeProfile, laws[j] as MagnitudeProfile);
    if (same) return m.updates;
  }
  // the ulp of the weight's rms: a list shared above needs none
  const ulp = w.rms > 0 ? ulpOf(w.rms, c.updateFormat) : -1;
  const updates: UpdateLoss[] = [];
  for (let j = 0; j < count; j++) updates.push(lossOf(c.sums, w, points[j] as SchedulePointRate, laws[j] as MagnitudeProfile, ulp));
  if (made.length < MADE_LIMIT) made.push({ weight: w, laws, keys: keys.slice(0, count), updates });
  return updates;
}

// updatesOf's keys of the weight being checked (it runs to completion before it is entered again)
const KEYS: number[] = [];

/**
 * Adam's update at a point is set by the point alone where ε is negligible beside the gradients' rms (updateProfile:
 * the damping is then 1, and at the first step every nonzero gradient moves by the learning rate): its law is then
 * the point's and whether any element is nonzero, 1 or 0. −1 where it is not (another optimizer, a larger ε).
 */
function settledBy(c: WeightCheckContext, point: SchedulePointRate, gradient: TensorPrediction): number {
  if (!c.adamLike) return -1;
  const g = point.at === "end" ? gradient.end : gradient.start;
  const sigma = g.rms;
  if (!(sigma > 0 && c.epsilon < EPSILON_NEGLIGIBLE * sigma)) return -1;
  return nonzeroElements(g) > 0 ? 1 : 0;
}

// whether a kept list's keys (settledBy) equal the first `count` of `b` and are all settled
function sameKeys(a: readonly number[], b: readonly number[], count: number): boolean {
  if (a.length !== count) return false;
  for (let j = 0; j < count; j++) if ((a[j] as number) < 0 || a[j] !== b[j]) return false;
  return true;
}

// One weight and its optimizer states, in a function of its own: the per-weight work that gets hot, apart from the
// once-per-check setup around it.
function weightCheck(c: WeightCheckContext, weight: TensorPrediction, gradient: TensorPrediction): WeightOptimizerCheck {
  const { optimizer, adamLike, stateFlushBound } = c;
  // the weights at the end of the horizon have grown; their ulp with them
  const w = weight.end;
  const updates = updatesOf(c, gradient, w);
  // the states hold the clipped gradients
  const end = scaleProfile(gradient.end, c.clip?.end?.factor ?? 1);
  const start = scaleProfile(gradient.start, c.clip?.start?.factor ?? 1);
  // the first moment is read once, by fractionBelow (which keeps no profile): written into one working profile
  const firstMoment = adamLike
    ? scaledIn(FIRST_MOMENT, end, 1 - optimizer.betas[0])
    : optimizer.kind === "momentum"
      ? end
      : null;
  return {
    weight: weight.id,
    gradient: gradient.id,
    weightRms: w.rms,
    gradientRms: { start: gradient.start.rms, end: gradient.end.rms },
    updates,
    decayLost: c.decayLost,
    firstMomentFlushed: firstMoment ? fractionBelow(firstMoment, stateFlushBound) : 0,
    secondMomentFlushed: adamLike
      ? {
          // (1−β2)·g² ≤ bound ⇔ |g| ≤ sqrt(bound/(1−β2)) (SCIENCE.md §3.3 / DESIGN.md §5 item 5)
          firstStep: fractionBelow(end, Math.sqrt(stateFlushBound / (1 - optimizer.betas[1]))),
          settled: fractionBelow(end, Math.sqrt(stateFlushBound)),
        }
      : { firstStep: 0, settled: 0 },
    secondMomentOverflowRisk: adamLike ? overflowRisk(start, Math.sqrt(c.stateOverflow)) : 0,
  };
}

// weightCheck's first moment (it runs to completion before it is entered again)
const FIRST_MOMENT = workingProfile();

/** Below this bound on an overflow probability the risk is reported as 0, its integral not run. */
const OVERFLOW_NEGLIGIBLE = 1e-15;

/** How far out in the draws the bound splits (z*): P(z > 8.5) < 1.1e-17. */
const DRAW_SPLIT = 8.5;

// φ(x)/x, the upper bound on the Gaussian tail P(Z > x) for x > 0 (Mills' ratio; Gordon 1941)
function tailBound(x: number): number {
  return Math.exp(-0.5 * x * x) / (x * Math.sqrt(2 * Math.PI));
}

/**
 * A bound on P(some of a Gaussian tensor's elements reach t) over draws, or Infinity where it does not apply (another
 * element law, a bound on the magnitudes, a zero or non-finite scale): the draws past z* (at most P(Z > z*)) plus, below
 * them, every element within the largest of those draws' scale r* = rms·2^(z*·s), n·P(|x| ≥ t | r*) (union bound;
 * P(|x| ≥ t | r) = 2·P(Z > t/r) rises with r; own algebra).
 */
export function anyAboveBound(profile: MagnitudeProfile, t: number): number {
  if (profile.shape !== "gaussian" && profile.shape !== "half-gaussian") return Infinity;
  if (profile.bound !== undefined || !(profile.rms > 0) || !(t > 0) || !(profile.log2Spread >= 0)) return Infinity;
  const reach = t / (profile.rms * 2 ** (DRAW_SPLIT * profile.log2Spread));
  if (!(reach > 0) || !Number.isFinite(reach) || !(profile.elements >= 0)) return Infinity;
  return (profile.log2Spread > 0 ? tailBound(DRAW_SPLIT) : 0) + 2 * profile.elements * tailBound(reach);
}

/**
 * The probability that a second moment overflows in one step: 0 where {@link anyAboveBound} puts it below 1e-15 (within
 * 1e-12 of the draw integral, which then need not run: test/scale/optimizer-overflow-bound.test.ts), else the integral.
 */
function overflowRisk(profile: MagnitudeProfile, t: number): number {
  return anyAboveBound(profile, t) < OVERFLOW_NEGLIGIBLE ? 0 : probabilityAnyAbove(profile, t);
}

/**
 * The learning rate decay steps are judged at: the end one, the smallest the schedule keeps applying; the peak one
 * when the schedule ends at 0, where no decay step is taken to lose (it would read as every step lost).
 */
function decayRate(optimizer: OptimizerSpec): { at: "end" | "peak"; lr: number } {
  const { peak, end } = optimizer.learningRate;
  return end > 0 ? { at: "end", lr: end } : { at: "peak", lr: peak };
}

/** Share of weights whose decoupled decay step lr·λ·|w| is below half an ulp: independent of |w|'s binade position. */
function decoupledDecayLost(ratio: number, format: Pick<Format, "precision">): number {
  // a schedule that ends at learning rate 0 takes no decay step there: nothing to lose
  if (!(ratio > 0)) return 0;
  // for w = m·2^e with m in [1, 2): lost when ratio·m < 2^-p, i.e. m < 2^-p/ratio; weights spread log-uniformly
  // within a binade (Benford-like, common practice), so the share is log2 of that bound clamped to [0, 1]
  const bound = 2 ** -format.precision / ratio;
  if (bound <= 1) return 0;
  if (bound >= 2) return 1;
  return Math.log2(bound);
}

// The worst lost share under the plan and where, the worst at the peak learning rate and the largest decay loss:
// the one pass over the tensors, in a function of its own (summarise then runs too little per check to be worth a
// large optimised compile)
function worstFindings(tensors: readonly WeightOptimizerCheck[]): {
  worst: OptimizerCheck["worst"];
  worstPeak: number;
  decay: number;
} {
  let worst: OptimizerCheck["worst"] = null;
  let worstPeak = 0;
  let decay = 0;
  for (let i = 0; i < tensors.length; i++) {
    const t = tensors[i] as WeightOptimizerCheck;
    for (let j = 0; j < t.updates.length; j++) {
      const u = t.updates[j] as UpdateLoss;
      if (!worst || u.planned > worst.lostShare) worst = { weight: t.weight, at: u.at, lostShare: u.planned };
      if (u.at === "peak") worstPeak = Math.max(worstPeak, u.planned);
    }
    decay = Math.max(decay, t.decayLost ?? 0);
  }
  return { worst, worstPeak, decay };
}

function summarise(
  optimizer: OptimizerSpec,
  plan: PrecisionPlan,
  tensors: WeightOptimizerCheck[],
  epsilon: OptimizerCheck["epsilon"],
  zeros: ZeroCount,
  secondMoments: SecondMoments | null,
  formats: {
    weightFormat: Format;
    stateFormat: Format;
    /** the smallest value the state format keeps: its smallest subnormal, or its smallest normal where subnormals flush */
    stateSmallest: number;
    /** the state format's limits, as the epsilon is rounded into it */
    stateLimits: RangeLimits;
    updateFormat: Format;
    binary32: Format;
    compensatedFormat: Pick<Format, "precision" | "emin">;
  },
  plannedSteps: number | undefined,
  hazards: readonly OptimizerStateHazard[],
  judged: readonly FormatName[] | undefined,
  clip: Clips | null,
): OptimizerCheck {
  const { worst, worstPeak, decay } = worstFindings(tensors);
  const reasons: string[] = [];
  const remedies: string[] = [];
  // remedies that would not work within the horizon, said so and told after the others, as the loss scale's are
  const notWorking: string[] = [];
  const reportedAsHazards: OptimizerStateHazard[] = [];
  // a state finding the operation hazards tell is named there once, not again here
  const tell = (kind: OptimizerStateHazard, reason: string) => {
    if (hazards.includes(kind)) reportedAsHazards.push(kind);
    else reasons.push(reason);
  };
  let verdict: OptimizerVerdict = "fits";
  // a finding in a format left out of the judged ones is told but not counted, as the formats' verdicts leave it out;
  // returns the sentence that says so
  const raise = (v: OptimizerVerdict, format: Format): string => {
    if (judged !== undefined && !judged.includes(format.name)) return ` ${notCountedSentence(format.name)}`;
    verdict = worseVerdict(verdict, v);
    return "";
  };
  // a share below the risk sentences' display floor reads as they do ("less than 1e-6%"), not as the model's far tail
  // a share short of all that would round to "100%" reads as certainty: "more than 99.9%" (common practice)
  const digits = (x: number) => tinyShare(x) ?? `${(100 * x).toPrecision(x < 0.001 ? 1 : 3)}%`;
  const pct = (x: number) => (x < 1 && digits(x) === "100%" ? "more than 99.9%" : digits(x));
  // a remedy must lose visibly less than the plan, at three digits: never "100% lost instead of 100%", nor
  // "more than 99.9% lost instead of 100%"
  const less = (share: number, planned: number) => share < planned && digits(share) !== digits(planned);
  const { weightFormat, stateFormat, updateFormat, binary32 } = formats;
  const master = plan.masterWeights !== "none";
  const into = master ? `the ${updateFormat.name} master copy` : `the stored ${weightFormat.name} weights`;

  /**
   * The remedies for lost updates (the worst tensor at its worst point) and lost decay steps, each with its
   * computed effect and memory cost. Only changes that differ from the plan and lose less are proposed: a
   * binary32 master copy only when binary32 is more precise than the format receiving the update.
   */
  function updateRemedies(u: UpdateLoss | null, weight: string, decayLoss: { ratio: number; lost: number } | null): string[] {
    // what a remedy does to each finding: a smaller share, or the same one still lost
    const effect = (updates: number, decaySteps: number) =>
      [
        u === null
          ? null
          : less(updates, u.planned)
            ? `${pct(updates)} of the update's squared norm lost instead of ${pct(u.planned)}`
            : `${pct(updates)} of the update's squared norm still lost`,
        decayLoss === null
          ? null
          : less(decaySteps, decayLoss.lost)
            ? `weight decay steps lost for ${pct(decaySteps)} of the weights instead of ${pct(decayLoss.lost)}`
            : `weight decay steps still lost for ${pct(decaySteps)} of the weights`,
      ]
        .filter((x) => x !== null)
        .join("; ");
    const better = (updates: number, decaySteps: number) =>
      (u !== null && less(updates, u.planned)) || (decayLoss !== null && less(decaySteps, decayLoss.lost));
    const found: string[] = [];
    if (binary32.precision > updateFormat.precision) {
      const updates = u?.withBinary32Master ?? 0;
      const decaySteps = decayLoss === null ? 0 : decoupledDecayLost(decayLoss.ratio, binary32);
      if (better(updates, decaySteps)) {
        // the plan's key, so that the remedy can be checked again
        const what = `${master ? `a binary32 master copy instead of ${updateFormat.name}` : "keep a binary32 master copy of the weights"} (master-weights: binary32 in the plan)`;
        found.push(`${what}: ${effect(updates, decaySteps)} (+${binary32.bytes - (master ? updateFormat.bytes : 0)} bytes per parameter)`);
      }
    }
    // compensated (Kahan 1965) summation carries the rounding error of each add in a second buffer of the same
    // format: the sum keeps about twice the precision, in the same exponent range (common practice)
    const compensated = {
      updates: u?.compensated ?? 0,
      decaySteps: decayLoss === null ? 0 : decoupledDecayLost(decayLoss.ratio, formats.compensatedFormat),
    };
    const kahan = better(compensated.updates, compensated.decaySteps)
      ? `compensated (Kahan) summation into ${into}: ${effect(compensated.updates, compensated.decaySteps)} (+${updateFormat.bytes} bytes per parameter for the compensation buffer)`
      : null;
    // it comes before stochastic rounding when it brings the lost share within the tolerated one
    const kahanFirst = compensated.updates <= OPTIMIZER_THRESHOLDS.lostAtRisk && !(decayLoss !== null && compensated.decaySteps > OPTIMIZER_THRESHOLDS.decayLostAtRisk);
    if (kahan !== null && kahanFirst) found.push(kahan);
    // stochastic rounding (Gupta et al. 2015) rounds up with probability equal to the remainder: unbiased, so
    // an update below half an ulp still moves the weight in expectation
    const target = master ? ` into ${into}` : "";
    const steps = u !== null ? u.stochasticStepsToAverage : stochasticStepsToAverage(decayLoss!.ratio, 1, updateFormat);
    // a typical update of an ulp or more needs no averaging: only the noise of smaller ones would be worth a count
    const count = (n: number) => (n < 1e6 ? `${n}` : n.toExponential(2).replace("e+", "e"));
    // noise that averages out only after the horizon's steps leaves the run with it: the remedy does not work there
    const late = steps > 1 && plannedSteps !== undefined && steps > plannedSteps;
    const noise =
      steps <= 1
        ? ""
        : late
          ? `, but the rounding noise of ${u !== null ? weight : "the decay steps"} averages below 10% only after about ${count(steps)} steps, more than the ${count(plannedSteps as number)} planned`
          : `; the rounding noise of ${u !== null ? weight : "the decay steps"} averages below 10% after about ${count(steps)} steps`;
    const stochastic = `round the weight update stochastically${target}: nothing lost in expectation${u !== null && decayLoss !== null ? ", weight decay steps included" : ""}${noise} (no extra memory)`;
    if (late) notWorking.push(`does not work: ${stochastic}`);
    else found.push(stochastic);
    if (kahan !== null && !kahanFirst) found.push(kahan);
    return found;
  }

  // the updates of the worst tensor at its worst point, when more than the tolerated share is lost
  let lostUpdate: UpdateLoss | null = null;
  if (worst && worst.lostShare > OPTIMIZER_THRESHOLDS.lostAtRisk) {
    const uncounted = raise(worstPeak > OPTIMIZER_THRESHOLDS.lostFails ? "fails" : "at-risk", updateFormat);
    const t = tensors.find((x) => x.weight === worst!.weight)!;
    lostUpdate = t.updates.find((x) => x.at === worst!.at)!;
    // the updates are that small because clipping scaled the gradients: say so, with the numbers
    const clipped = lostUpdate.clipped
      ? ` The gradients are clipped there: clip-norm ${plainNumber(optimizer.clipNorm as number)} against a predicted global norm of ${plainNumber(lostUpdate.clipped.globalNorm)} scales them by ${plainNumber(lostUpdate.clipped.factor)}.`
      : "";
    reasons.push(
      `The updates to ${worst.weight} lose ${pct(worst.lostShare)} of their squared norm against half an ulp of ${into} at the ${worst.at} learning rate.${clipped}${uncounted}`,
    );
  }
  const decayAt = decayRate(optimizer);
  const decayRatio = decayAt.lr * optimizer.weightDecay;
  const decayFinding = decay > OPTIMIZER_THRESHOLDS.decayLostAtRisk;
  if (decayFinding) {
    const uncounted = raise("at-risk", updateFormat);
    reasons.push(
      `weight decay steps (learning rate × decay = ${plainNumber(decayRatio)} of each weight) are lost for ${pct(decay)} of the weights in ${updateFormat.name} at the ${decayAt.at} learning rate.${uncounted}`,
    );
  }
  if (lostUpdate !== null || decayFinding) remedies.push(...updateRemedies(lostUpdate, worst?.weight ?? "", decayFinding ? { ratio: decayRatio, lost: decay } : null));

  if (secondMoments !== null && secondMoments.verdict !== "fits") {
    const { layer, share, inBinary32 } = secondMoments;
    const uncounted = raise(secondMoments.verdict, stateFormat);
    tell(
      "optimizer-second-moment",
      `${sentenceStart(pct(share))} of the second moments of ${layer} flush to zero in ${stateFormat.name} at the first step ((1 − β2)·g² below the smallest value kept).${uncounted}`,
    );
    // binary32 states only where they flush less, on the same gradients
    if (inBinary32 !== null && inBinary32 < share) {
      // Adam keeps two states per parameter (first and second moments; Kingma & Ba 2015)
      const extra = 2 * (binary32.bytes - stateFormat.bytes);
      remedies.push(
        `hold the optimizer states in binary32 instead of ${stateFormat.name} (optimizer-states: binary32 in the plan): ${pct(inBinary32)} of the second moments flush at the first step instead of ${pct(share)} (+${extra} bytes per parameter for the two states)`,
      );
    }
  }
  if (epsilon?.vanishes) {
    const uncounted = raise(vanishedEpsilonVerdict(zeros.perStep), stateFormat);
    const where =
      zeros.perStep >= 1
        ? `about ${plainNumber(zeros.perStep)} second moments are 0 per step${zeros.top !== "" ? ` (most in ${zeros.top})` : ""}, so the update divides by zero there.`
        : "where a second moment is also 0 the update divides by zero.";
    tell("optimizer-constant", `epsilon ${plainNumber(epsilon.value)} rounds to 0 in ${stateFormat.name}; ${where}${uncounted}`);
    const floor = epsilonFloor(formats.stateSmallest, (x) => storedEpsilon(formats.stateLimits, x) !== 0);
    // with the spec's key and the printed value, so that the remedy can be checked again
    const raiseTo = `raise epsilon to at least ${floor.replace(/\)$/, `; training.optimizer.epsilon: ${floor.slice(0, floor.indexOf(" "))})`)}`;
    const either = stateFormat.precision < binary32.precision ? `compute the update in binary32, or ${raiseTo}` : raiseTo;
    // a kept epsilon does not bring back second moments that flush: where v̂ is 0 the update is m̂/ε (Kingma & Ba 2015,
    // Algorithm 1), as large as epsilon is small, so the remedy says so and points to the states' format
    const flushed = secondMoments !== null && secondMoments.verdict !== "fits" ? secondMoments.share : 0;
    remedies.push(
      flushed > 0
        ? `${either}; ${stateFormat.precision < binary32.precision ? "either" : "it"} alone leaves ${pct(flushed)} of the second moments flushed, where the update becomes m̂/ε instead of m̂/√v̂: hold the states in binary32${secondMoments!.inBinary32 !== null && secondMoments!.inBinary32 < flushed ? " (above)" : ""}, which keeps both`
        : either,
    );
  }
  // when the clip is what makes updates or second moments small enough to lose, raising it is the first remedy: the
  // predicted global norm, rounded up at two digits, and what the plan keeps without the clip
  if (clip !== null) {
    const effects: string[] = [];
    const unclippedUpdates = lostUpdate?.clipped?.plannedUnclipped;
    if (lostUpdate !== null && unclippedUpdates !== undefined && less(unclippedUpdates, lostUpdate.planned)) {
      effects.push(`${pct(unclippedUpdates)} of the update's squared norm lost instead of ${pct(lostUpdate.planned)}`);
    }
    if (secondMoments !== null && secondMoments.verdict !== "fits" && secondMoments.unclipped !== null && less(secondMoments.unclipped, secondMoments.share)) {
      effects.push(`${pct(secondMoments.unclipped)} of the second moments flush at the first step instead of ${pct(secondMoments.share)}`);
    }
    if (effects.length > 0) {
      const norm = Math.max(clip.start?.globalNorm ?? 0, clip.end?.globalNorm ?? 0);
      remedies.unshift(
        `raise clip-norm above the predicted global gradient norm of ${plainNumber(norm)} (training.optimizer.clip-norm: ${plainNumber(roundUpTwoDigits(norm))}), so that it no longer scales the gradients down: ${effects.join("; ")} (no extra memory)`,
      );
    }
  }
  remedies.push(...notWorking);
  return {
    kind: optimizer.kind,
    updateFormat: formats.updateFormat.name,
    weightFormat: formats.weightFormat.name,
    stateFormat: formats.stateFormat.name,
    epsilon,
    tensors,
    worst,
    verdict,
    reasons,
    reportedAsHazards,
    remedies,
  };
}

/**
 * The smallest value the state format keeps (a power of two), written so that the printed number is itself enough:
 * to nearest at three significant digits when that number rounds to a nonzero value in the state format
 * (2^-24 = 5.96e-8 in binary16: round to nearest, IEEE 754-2019 §4.3.1), else rounded up at those digits (2^-14 with
 * subnormals flushed: 6.10e-5 rounds to a subnormal and flushes, 6.11e-5 does not).
 */
export function epsilonFloor(smallest: number, keeps: (x: number) => boolean): string {
  const power = `2^${Math.round(Math.log2(smallest))}`;
  const nearest = smallest.toExponential(2);
  if (keeps(Number(nearest))) return `${compactExponent(nearest)} (${power})`;
  const digits = 10 ** (Math.floor(Math.log10(smallest)) - 2);
  let up = Math.ceil(smallest / digits) * digits;
  while (!keeps(up) || up < smallest) up += digits;
  return `${compactExponent(up.toExponential(2))} (just above ${power})`;
}

// The smallest number of two significant digits above x (28.7 → 29, 4.81e17 → 4.9e17).
function roundUpTwoDigits(x: number): number {
  const step = 10 ** (Math.floor(Math.log10(x)) - 1);
  let up = Number((Math.ceil(x / step) * step).toPrecision(2));
  if (!(up > x)) up = Number((up + step).toPrecision(2));
  return up;
}

// "5.96e-8", as the other figures are written (no "+", no leading zeros in the exponent)
function compactExponent(text: string): string {
  return text.replace("e+", "e");
}
