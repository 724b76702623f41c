/**
 * The loss-scale answer for one plan: the static window in the gradient format, the pick, which tensors set
 * each edge, and — when no static scale exists — remedies ranked by their computed effect.
 */
import { getFormat } from "../formats/index.js";
import type { FormatName } from "../formats/names.js";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../magnitude/types.js";
import { DRAWS, energyBelowUpper, energyBelowUpperClosed, energyBelowWithinLog2, energyBelowWithinLog2Of, probabilityAnyAboveBounds, probabilityAnyAboveUpper, ProfileDrawBounds } from "../risk/bounds.js";
import { CurveParts, curvePartsOf, gradientProfiles, pow2Below, profilesOf, type GradientProfiles } from "../risk/curve-parts.js";
import { riskProfile } from "../risk/profile.js";
import { elementLaw, energyBelow, limitsFor, probabilityAnyAbove, storedTensors, type RangeLimits } from "../risk/index.js";
import { INNER_DRAW_OUTSIDE } from "../risk/laws.js";
import { exp2 } from "../risk/_math.js";
import type { PrecisionPlan } from "../spec/types.js";
import { DEFAULT_DYNAMIC_SCALE, simulateDynamicScale, type DynamicScaleModel, type DynamicScaleResult, type DynamicScaleSettings, type OverflowBounds } from "./dynamic.js";
import { lossScaleWindow, lossScaleWindows, DEFAULT_WINDOW_OPTIONS, type ScaledTensorCurves, type ScaleWindow, type WindowOptions, type WindowsOf } from "./window.js";
import { BucketQueue } from "./heap.js";
import { enclosedLaw, enclosureHolds, enclosureMoments, enclosureQuick, enclosureWith, quickRemainder, shiftBounds, shiftBoundsGridded, shiftBoundsTabled, shiftLevels, shiftTabledFar, shiftTabledFarFrom, SHIFT_GRID_ORIGIN, SHIFT_GRID_STEPS, SHIFT_LEVELS_LENGTH, type LevelMoments } from "./overflow-enclosure.js";
import { fewerFindings, findingsTotal, unscaledAsGood, type PickWeighing, type ScaledFindings } from "./pick.js";
import { percent, plainNumber, scaleWords } from "../risk/words.js";

/** A remedy for an empty (or missing) window, with its effect computed. */
export interface ScaleRemedy {
  kind: "hold-in-binary32" | "dynamic-scale" | "bfloat16-gradients";
  /** one sentence: what to do and what it gives */
  sentence: string;
  /** whether the remedy gives a usable answer (a non-empty window, or a dynamic scale that rarely skips) */
  works: boolean;
  /** hold-in-binary32: the tensors to move, and the window once they are moved */
  tensors?: string[];
  window?: ScaleWindow;
  /** bytes per step the remedy adds (tensors held in binary32 instead of the gradient format) */
  extraBytes?: number;
}

export interface LossScaleAnswer {
  /** the gradient format the window is for */
  format: FormatName;
  window: ScaleWindow;
  /** 2^pickLog2, or null */
  pick: number | null;
  /**
   * the scale asked to evaluate, and whether it lies in the window: the caller's (`origin` "option", check's
   * `lossScale`, `--loss-scale`), else the plan's own `loss-scale` ("plan")
   */
  requested: { scale: number; inside: boolean; origin: "plan" | "option" } | null;
  /**
   * false when S = 1 lies in the window and, once the pick is weighed (src/scale/pick.ts, as check does), is the pick
   * or leaves no more findings than it: no scaling needed
   */
  needed: boolean;
  options: WindowOptions;
  /** plain sentences: the answer, the edges and what sets them */
  sentences: string[];
  remedies: ScaleRemedy[];
  /** the simulated dynamic scale; null unless asked for or the window is empty (it is then a remedy) */
  dynamic: DynamicScaleResult | null;
  /**
   * present when the window's centre left findings that move with the scale: the pick is then the scale of the window
   * with the fewest (src/scale/pick.ts), and this says how many the centre and the pick leave
   */
  weighing?: PickWeighing;
}

export interface LossScaleOptions {
  window?: Partial<WindowOptions>;
  dynamic?: Partial<DynamicScaleSettings>;
  /** steps of the horizon the dynamic scale is simulated over (the spec's horizon; default 10,000) */
  steps?: number;
  /** a loss scale the caller gives (check's `lossScale`): compared with the window in place of the plan's */
  lossScale?: number;
  /** simulate the dynamic scale always, or only when no static scale exists (the default) */
  simulate?: "always" | "when-empty";
  seed?: number;
}

/**
 * A tensor's profile part-way through the horizon: the rms moves geometrically from its start to its end value
 * (gradients shrink as the loss falls; the horizon's end is the spec's own statement), the spread linearly. In the one
 * layout the risk functions read (src/risk/tensor.ts riskProfile), not a copy of every field the prediction carries.
 */
export function profileAt(tensor: TensorPrediction, progress: number): MagnitudeProfile {
  const from = progress <= 0 ? tensor.start : progress >= 1 ? tensor.end : undefined;
  if (from !== undefined) return riskProfile(from);
  return profileBetween(tensor.start, tensor.end, progress);
}

// profileAt strictly inside the horizon, from the start and end profiles (or their riskProfile views: the same values)
function profileBetween(start: MagnitudeProfile, end: MagnitudeProfile, progress: number): MagnitudeProfile {
  return {
    elements: start.elements,
    zeroFraction: start.zeroFraction,
    shape: start.shape,
    rms: rmsBetween(start.rms, end.rms, progress),
    log2Spread: spreadBetween(start.log2Spread, end.log2Spread, progress),
    bound: start.bound,
    elementLog2Spread: start.elementLog2Spread,
    mixture: start.mixture,
  };
}

// profileBetween's rms (geometric between two positive ends, else the start's) and spread (linear) from the ends'
// numbers, for callers that keep them without making the profile
function rmsBetween(start: number, end: number, progress: number): number {
  return start > 0 && end > 0 ? start ** (1 - progress) * end ** progress : start;
}
function spreadBetween(start: number, end: number, progress: number): number {
  return start + (end - start) * progress;
}

function gradientLimits(plan: PrecisionPlan, format: FormatName): RangeLimits {
  return limitsFor({ ...plan, gradients: format }, format);
}

/**
 * The loss-scale answer for a prediction (made with loss scale 1) under a plan.
 * @example lossScaleAnswer(prediction, plan).pick // => 1024
 */
export function lossScaleAnswer(prediction: Prediction, plan: PrecisionPlan, options: LossScaleOptions = {}): LossScaleAnswer {
  // the edges use the window's own budget and tolerance (whole-model, src/scale/window.ts); the pick sits at the
  // centre, binades away from either edge, where the check's stricter per-tensor thresholds are met too
  const windowOptions = { ...DEFAULT_WINDOW_OPTIONS, ...options.window };
  const format = plan.gradients;
  const limits = gradientLimits(plan, format);
  // the gradients as the gradient format holds them (one contribution each where the plan sums them apart)
  const stored = storedTensors(prediction, plan);
  // the gradients' profiles and draw bounds serve every format the answer tries and the simulation's ends
  const profiles = gradientProfiles(stored);
  const curves = boundedLossScaleCurves(stored, limits, profiles);
  // the remedies' windows are this one with tensors set aside: one search serves them all (the curves' ids are their
  // tensors', unique within a prediction: magnitude/types.ts)
  const windowWithout = lossScaleWindows(curves, windowOptions, undefined, true);
  const window = windowWithout();
  const pick = window.pickLog2 === null ? null : 2 ** window.pickLog2;
  // the caller's scale wins over the plan's, as it does in the judgement
  const given = options.lossScale ?? plan.lossScale;
  const requested =
    given === undefined
      ? null
      : {
          scale: given,
          inside: !window.empty && Math.log2(given) >= window.lowestLog2! && Math.log2(given) <= window.highestLog2!,
          origin: options.lossScale === undefined ? ("plan" as const) : ("option" as const),
        };

  // the gradient tensors themselves are needed only to simulate a dynamic scale (and for the remedies, which come
  // with it): most answers, a window found, never gather them
  let gradients: TensorPrediction[] = [];
  let dynamic: DynamicScaleResult | null = null;
  if (window.empty || options.simulate === "always") {
    // the curves are the profiles', one each in order, and ids are unique within a prediction (magnitude/types.ts): the
    // stored tensors with a curve are the profiles' tensors, taken without a set of every id
    gradients = profiles.map((p) => p.tensor);
    // the simulation fills in the other defaults of the settings itself
    dynamic = simulateDynamicScale(dynamicModel(gradients, limits, windowOptions, options.dynamic?.lowestScale ?? DEFAULT_DYNAMIC_SCALE.lowestScale, profiles), {
      steps: Math.max(1, Math.min(options.steps ?? 10_000, 1_000_000)),
      seed: options.seed ?? 1,
      horizonPoints: 8,
      ...(options.dynamic ? { settings: options.dynamic } : {}),
    });
  }

  const sentences = describe(window, format, windowOptions, requested);
  const remedies =
    window.empty && dynamic ? rankRemedies(windowWithout, gradients, window, windowOptions, plan, limits, dynamic, profiles) : [];
  return { format, window, pick, requested, needed: !window.unscaledFits, options: windowOptions, sentences, remedies, dynamic };
}

/**
 * The loss-scale curves of {@link lossScaleCurves}, with tighter upper bounds on offer (the segment bounds below) and
 * values computed with fewer integrals: a curve's value is the worse of the start and end profiles' (as the curves
 * take it), and when one profile's segment bound lies below the other's value the other is not integrated. Values
 * equal the curves' own (test/scale/recommend-bounds.test.ts); the window's searches then integrate only the tensors
 * that come near the budget or the tolerance. Values are not memoised here: the window's search keeps them.
 */
export function boundedLossScaleCurves(tensors: readonly TensorPrediction[], limits: RangeLimits, profiles?: readonly GradientProfiles[]): ScaledTensorCurves[] {
  // the window keeps values and bounds itself: the parts without memos
  const shared = profiles ?? gradientProfiles(tensors);
  // the shifted tails' levels depend on the counts alone: one table serves every format's curves of these profiles
  const table = levelTable(shared);
  // each tensor's bounds at the exponent last asked, for this format: one typed array for all the tensors
  // (and after them the exponent last asked of any of them and log2 of its overflow threshold: LAST_K); every exponent
  // NaN, asked of none (each field is read only where its exponent is the one asked, and so written first)
  const memo = new Float64Array(MEMO_FIELDS * shared.length + 2).fill(NaN);
  return curvePartsOf(shared, limits, (p, edgeGuessesLog2, i) => new BoundedCurves(p, edgeGuessesLog2, limits, table, i, memo));
}

/**
 * The shifted tails' levels (overflow-enclosure.ts shiftLevels, LEVELS numbers each) of each tensor's start count at
 * 2·LEVELS·i … and its end count at (2i + 1)·LEVELS …, made on first use: one typed array for all the tensors of an answer, shared by the
 * curves of its formats (the gradient format's and bfloat16's remedy), instead of a small one per tensor and format.
 */
class ShiftLevelTable {
  readonly levels: Float64Array;
  private readonly made: Uint8Array;
  // per profile (2i start, 2i + 1 end), made with its levels: log2 of its rms, its spread, 1 where the shifted tails
  // apply at some t (enclosureHolds: a positive rms and spread, a Gaussian law of 16 elements or more), and
  // its bound (+∞ without one): the rough bounds read these instead of the profile's fields
  readonly rmsLog2: Float64Array;
  readonly spread: Float64Array;
  readonly applies: Uint8Array;
  readonly bound: Float64Array;
  constructor(n: number) {
    this.levels = new Float64Array(2 * LEVELS * n);
    this.made = new Uint8Array(n);
    this.rmsLog2 = new Float64Array(2 * n);
    this.spread = new Float64Array(2 * n);
    this.applies = new Uint8Array(2 * n);
    this.bound = new Float64Array(2 * n);
  }

  /** the offset of tensor i's levels, made now from its profiles where they are not yet */
  at(i: number, start: MagnitudeProfile, end: MagnitudeProfile): number {
    const base = 2 * LEVELS * i;
    if (this.made[i] === 0) {
      this.levelsOf(start.elements * (1 - start.zeroFraction), base);
      this.levelsOf(end.elements * (1 - end.zeroFraction), base + LEVELS);
      this.numbers(2 * i, start);
      this.numbers(2 * i + 1, end);
      this.made[i] = 1;
    }
    return base;
  }

  // per profile (2i start, 2i + 1 end) the moments of the grid counts below and above its count (enclosureMoments),
  // made on first use
  private below: (LevelMoments | undefined)[] | undefined;
  private above: (LevelMoments | undefined)[] | undefined;
  momentsBelow(j: number, profile: MagnitudeProfile): LevelMoments {
    const below = (this.below ??= new Array<LevelMoments | undefined>(this.bound.length));
    const made = below[j];
    if (made !== undefined) return made;
    const moments = enclosureMoments(profile.elements * (1 - profile.zeroFraction));
    below[j] = moments[0];
    (this.above ??= new Array<LevelMoments | undefined>(this.bound.length))[j] = moments[1];
    return moments[0];
  }
  // (after momentsBelow of the same profile)
  momentsAbove(j: number): LevelMoments {
    return this.above![j]!;
  }

  // the last few counts whose levels were made, and where: a stack of alike layers has a few counts for thousands of
  // profiles, and the levels are a function of the count alone (shiftLevels: a logarithm and two look-ups each)
  private readonly counts = new Float64Array(LEVEL_COUNTS).fill(NaN);
  private readonly countAt = new Int32Array(LEVEL_COUNTS);
  private nextCount = 0;

  // shiftLevels(count) into the levels at `at`, copied from a profile of the same count where one was made lately
  private levelsOf(count: number, at: number): void {
    const levels = this.levels;
    const counts = this.counts;
    for (let c = 0; c < LEVEL_COUNTS; c++) {
      if (counts[c] !== count) continue;
      const from = this.countAt[c]!;
      for (let l = 0; l < LEVELS; l++) levels[at + l] = levels[from + l]!;
      return;
    }
    shiftLevels(count, levels, at);
    const c = this.nextCount;
    counts[c] = count;
    this.countAt[c] = at;
    this.nextCount = (c + 1) % LEVEL_COUNTS;
  }

  // per tensor the least of its profiles' energyBelowWithinLog2 at `withinTolerance` (NaN until asked): the threshold
  // does not depend on the format, so the curves of every format the answer searches read one number
  private within: Float64Array | undefined;
  private withinTolerance = NaN;
  withinLog2(i: number, parts: GradientProfiles, tolerance: number): number {
    let within = this.within;
    if (within === undefined || tolerance !== this.withinTolerance) {
      within = this.within ??= new Float64Array(this.made.length);
      within.fill(NaN);
      this.withinTolerance = tolerance;
    }
    let log2T = within[i]!;
    if (log2T === log2T) return log2T;
    log2T = energyBelowWithinLog2(parts.start, tolerance);
    if (!parts.same) log2T = Math.min(log2T, energyBelowWithinLog2(parts.end, tolerance));
    within[i] = log2T;
    return log2T;
  }

  private numbers(j: number, profile: MagnitudeProfile): void {
    this.rmsLog2[j] = Math.log2(profile.rms);
    this.spread[j] = profile.log2Spread;
    this.applies[j] = enclosureHolds(profile) ? 1 : 0;
    this.bound[j] = profile.bound !== undefined && profile.bound > 0 ? profile.bound : Infinity;
  }
}
// the counts ShiftLevelTable remembers the levels of
const LEVEL_COUNTS = 8;
// the numbers shiftLevels gives a count (ShiftLevelTable): c_hi, c_lo, lowMass, c_mid, the bound on P(V > c_mid)
const LEVELS = SHIFT_LEVELS_LENGTH;
// each set of gradient profiles' level table (an answer's profiles serve several formats and the dynamic simulation)
const LEVEL_TABLES = new WeakMap<readonly GradientProfiles[], ShiftLevelTable>();
function levelTable(profiles: readonly GradientProfiles[]): ShiftLevelTable {
  let table = LEVEL_TABLES.get(profiles);
  if (table === undefined) LEVEL_TABLES.set(profiles, (table = new ShiftLevelTable(profiles.length)));
  return table;
}

// What a BoundedCurves keeps of the exponent last asked, at these offsets of its tensor's place in one typed array of
// all the tensors of a format (numbers kept on each object would be a boxed double each, for the collector to copy
// for as long as the answer lives): each profile's upper bound and the moment bounds' lower end (NaN where the law has
// none, src/scale/overflow-enclosure.ts) at OVERFLOW_K, the flushed shares' upper bounds at FLUSH_K, and the shifted
// tails' lower bound at ROUGH_K (overflowRiskRoughLower).
const OVERFLOW_K = 0;
const OVERFLOW_START = 1;
const OVERFLOW_END = 2;
const OVERFLOW_START_LOW = 3;
const OVERFLOW_END_LOW = 4;
const FLUSH_K = 5;
const FLUSH_START = 6;
const FLUSH_END = 7;
const ROUGH_K = 8;
const ROUGH_LOW = 9;
const MEMO_FIELDS = 10;
// roughOf's bounds [lower, upper] of the profile it last bounded (read at once by its caller), and overflowRiskRough's
// of the tensor (typed arrays' slots: a module variable boxed each double stored, one per rough bound)
const ROUGH_OF = new Float64Array(2);
// the flush bound flushedEnergyWithinFrom last took, and its log2
const FLUSH_LOG2 = Float64Array.of(NaN, NaN);
const ROUGH = new Float64Array(2);

// One tensor's curves of boundedLossScaleCurves: the parts (profiles, their bounds, the cheap bounds: one object with
// them, not one more per tensor and format), and each profile's segment upper bounds at the exponent last asked (the
// window asks for a tensor's bound and then its value at one exponent; it keeps both itself, src/scale/window.ts), kept
// in the format's memo array. One object per tensor, its methods shared.
class BoundedCurves extends CurveParts implements ScaledTensorCurves {
  constructor(
    profiles: GradientProfiles,
    edgeGuessesLog2: { overflow: number; flush: number },
    limits: RangeLimits,
    // the shifted tails' levels of the start's count at 2·LEVELS·index … and the end's LEVELS on (ShiftLevelTable)
    private readonly levels: ShiftLevelTable,
    private readonly index: number,
    private readonly memo: Float64Array,
  ) {
    super(profiles, edgeGuessesLog2, limits);
  }

  // worked out when the search reads it (once per tensor, for the few whose flushed shares it bounds from a binade up),
  // not when the curves are made
  get flushedEnergyGrowth(): number | undefined {
    return growsAtMostEightfold(this.parts.start) && growsAtMostEightfold(this.parts.end) ? FLUSH_GROWTH : undefined;
  }

  // this tensor's offset in `memo` (worked out, not kept: a field more on each of ~4,000 objects)
  private get m(): number {
    return MEMO_FIELDS * this.index;
  }

  // each profile's upper bound at k: the moment bounds where the law has them (both ends kept), else the segment bound
  private overflowUppers(k: number): void {
    const memo = this.memo;
    const m = this.m;
    if (k === memo[m + OVERFLOW_K]) return;
    const t = this.limits.overflowLevel * pow2Below(k);
    this.levelsAt();
    // (log2 t once per exponent for every tensor of the format, overflowLog2)
    const tLog2 = this.overflowLog2(k, t);
    this.boundsOf(0, t, tLog2);
    memo[m + OVERFLOW_START] = PAIR[1]!;
    memo[m + OVERFLOW_START_LOW] = PAIR[0]!;
    if (this.parts.same) {
      memo[m + OVERFLOW_END] = memo[m + OVERFLOW_START]!;
      memo[m + OVERFLOW_END_LOW] = memo[m + OVERFLOW_START_LOW]!;
    } else {
      this.boundsOf(1, t, tLog2);
      memo[m + OVERFLOW_END] = PAIR[1]!;
      memo[m + OVERFLOW_END_LOW] = PAIR[0]!;
    }
    memo[m + OVERFLOW_K] = k;
  }

  private levelsAt(): number {
    return this.levels.at(this.index, this.parts.start, this.parts.end);
  }

  // log2 of the overflow threshold t at k, kept at the end of the format's memo for the exponent last asked: the
  // window's scans ask every tensor at one exponent in turn, and t is the same double for all of them (one Math.log2
  // per exponent, not per tensor; the same double)
  private overflowLog2(k: number, t: number): number {
    const memo = this.memo;
    const at = memo.length - 2;
    if (memo[at] === k) return memo[at + 1]!;
    const v = Math.log2(t);
    memo[at] = k;
    memo[at + 1] = v;
    return v;
  }

  // Bounds on one profile's any-above probability at t into PAIR (low NaN when there is none), side 0 the start
  // profile, 1 the end (its levels made): where the law has moment bounds (src/scale/overflow-enclosure.ts), first the
  // shifted tails (two normal tails, read off their fixed grid: shiftBoundsTabled, a few percent looser than evaluated
  // and far cheaper), which settle a tensor far from t alone; else, at a spread of a binade or more, the
  // moment bounds (a few normal tails more, far tighter, both ways). Otherwise the segment upper bound (a handful of
  // evaluations far in the tail, where it falls fast; at a narrow spread it beats the moment bounds, whose remainder
  // grows as the spread's inverse cube), and where it leaves more than SEGMENT_ENOUGH the moment bounds where the law
  // has them. Any of them serves the window's search, which then integrates where they do not decide. The tests of
  // enclosureApplies, x = log2 t − log2 rms and the grid counts' moments are the level table's of the profile (as
  // roughOf and quickOf read them): the same tests, doubles and moments anyAboveEnclosure takes, bit for bit.
  private boundsOf(side: number, t: number, tLog2: number): void {
    const table = this.levels;
    const j = 2 * this.index + side;
    const base = 2 * LEVELS * this.index + LEVELS * side;
    const profile = side === 0 ? this.parts.start : this.parts.end;
    const into = PAIR;
    const applies = table.applies[j] === 1 && t > 0 && !(t > table.bound[j]!);
    const x = tLog2 - table.rmsLog2[j]!;
    const spread = table.spread[j]!;
    if (applies) {
      const levels = table.levels;
      shiftBoundsTabled(x, spread, levels[base]!, levels[base + 1]!, levels[base + 2]!, levels[base + 3]!, levels[base + 4]!, into, 0);
      if (!(into[1]! > SEGMENT_ENOUGH)) return;
      if (spread >= 1 && enclosureWith(table.momentsBelow(j, profile), table.momentsAbove(j), spread, x, ENCLOSED, 0)) {
        if (ENCLOSED[0]! > into[0]!) into[0] = ENCLOSED[0]!;
        if (ENCLOSED[1]! < into[1]!) into[1] = ENCLOSED[1]!;
        return;
      }
    }
    const shiftLow = applies ? into[0]! : NaN;
    const shiftHigh = applies ? into[1]! : 1;
    const segment = Math.min(shiftHigh, probabilityAnyAboveUpper(profile, t));
    into[0] = shiftLow;
    into[1] = segment;
    if (!(segment > SEGMENT_ENOUGH) || !applies) return;
    if (!enclosureWith(table.momentsBelow(j, profile), table.momentsAbove(j), spread, x, ENCLOSED, 0)) return;
    into[0] = Math.max(shiftLow, ENCLOSED[0]!);
    into[1] = Math.min(segment, ENCLOSED[1]!);
  }

  // The shifted tails' upper bound at k (two normal tails per profile, read off the fixed grid of the normal tail:
  // overflow-enclosure.ts shiftBoundsTabled), 1 where they do not apply: rougher than overflowRiskUpper and a fraction
  // of its cost, for the edge setter's scan and the union bound's first narrowing. Their lower end comes with it
  // (overflowRiskRoughLower): a few of them settle a union bound far over the budget.
  overflowRiskRough(k: number): number {
    this.overflowRiskRoughInto(k, ROUGH);
    return ROUGH[1]!;
  }

  // the shifted tails' lower bound at k, taken with overflowRiskRough (0 where they do not apply)
  overflowRiskRoughLower(k: number): number {
    if (k !== this.memo[this.m + ROUGH_K]) this.overflowRiskRough(k);
    return this.memo[this.m + ROUGH_LOW]!;
  }

  // overflowRiskRoughLower and overflowRiskRough at k into `into` at 0 and 1 (each profile's pair through ROUGH_OF, not
  // returned: a double returned from a call not inlined is a heap number)
  overflowRiskRoughInto(k: number, into: Float64Array): boolean {
    const t = this.limits.overflowLevel * pow2Below(k);
    // (log2 t once per exponent for every tensor of the format, overflowLog2: the same double roughOf took twice)
    const tLog2 = this.overflowLog2(k, t);
    // the end only where the start's upper end is below 1 (one call of roughOf in a loop: two would not both be inlined
    // with the tail read they make, whose doubles would then go to it as heap numbers)
    const sides = this.parts.same ? 1 : 2;
    let low = 0;
    let high = 0;
    for (let side = 0; side < sides; side++) {
      this.roughOf(side, t, tLog2);
      if (side === 0) {
        low = ROUGH_OF[0]!;
        high = ROUGH_OF[1]!;
        if (!(high < 1)) break;
      } else {
        // the worse of two values is at least either's lower bound
        low = Math.max(low, ROUGH_OF[0]!);
        high = Math.max(high, ROUGH_OF[1]!);
      }
    }
    const memo = this.memo;
    const m = this.m;
    into[0] = memo[m + ROUGH_LOW] = low;
    memo[m + ROUGH_K] = k;
    into[1] = high;
    return true;
  }

  // side 0 the start profile, 1 the end: the shifted tails' [lower, upper] into ROUGH_OF ([0, 1] where they do not
  // apply); enclosureApplies(profile, t) and its x = log2 t − log2 rms from the level table's numbers of the profile
  // (the same tests and the same doubles)
  private roughOf(side: number, t: number, tLog2: number): void {
    const base = this.levelsAt() + LEVELS * side;
    const table = this.levels;
    const j = 2 * this.index + side;
    if (table.applies[j] === 0 || !(t > 0) || t > table.bound[j]!) {
      ROUGH_OF[0] = 0;
      ROUGH_OF[1] = 1;
      return;
    }
    const levels = table.levels;
    shiftBoundsTabled(tLog2 - table.rmsLog2[j]!, table.spread[j]!, levels[base]!, levels[base + 1]!, levels[base + 2]!, levels[base + 3]!, levels[base + 4]!, ROUGH_OF, 0);
  }

  // The shifted tails' far end (src/scale/window.ts ScaledTensorCurves.overflowRiskFarInto): where they apply to both
  // profiles, the largest k at which x = log2 t − log2 rms of each lies past overflow-enclosure.ts shiftTabledFarFrom (a
  // millionth of a binade to spare for the rounding of log2 t), and the larger of their upper bounds from there (a few
  // times 1e-19): at least roughOf's upper bound at every k up to it. Past a profile's bound the probability is 0.
  overflowRiskFarInto(into: Float64Array): boolean {
    const base = this.levelsAt();
    const table = this.levels;
    const levels = table.levels;
    const sides = this.parts.same ? 1 : 2;
    let from = -Infinity;
    let far = 0;
    for (let side = 0; side < sides; side++) {
      const j = 2 * this.index + side;
      if (table.applies[j] === 0) return false;
      const l = base + LEVELS * side;
      from = Math.max(from, table.rmsLog2[j]! + shiftTabledFarFrom(levels[l]!, levels[l + 3]!, table.spread[j]!));
      far = Math.max(far, shiftTabledFar(levels[l + 4]!));
    }
    // (t = overflowLevel·2^−k stays a positive double up to k = 1000)
    const k = Math.min(1000, Math.floor(Math.log2(this.limits.overflowLevel) - from - 1e-6));
    if (!Number.isFinite(k)) return false;
    into[0] = k;
    into[1] = far;
    return true;
  }

  // The moment bounds with the remainder at its peak (overflow-enclosure.ts enclosureQuick) of the worse of the two
  // profiles at k, as the dynamic simulation's first narrowing takes them: four normal tails and densities per profile
  // in place of the tighter bounds' dozen or more; false where either profile has none (as anyAboveEnclosure: a
  // Gaussian law of 16 elements or more, a positive rms and spread, t not past a bound), and where a profile's remainder
  // alone reaches `below` (overflow-enclosure.ts quickRemainder: the upper bound would not come under it)
  overflowRiskQuickInto(k: number, into: Float64Array, below = Infinity): boolean {
    const t = this.limits.overflowLevel * pow2Below(k);
    if (!(t > 0)) return false;
    const tLog2 = this.overflowLog2(k, t);
    if (!this.quickOf(0, t, tLog2, below)) return false;
    if (this.parts.same) {
      into[0] = QUICK[0]!;
      into[1] = QUICK[1]!;
      return true;
    }
    const low = QUICK[0]!;
    const high = QUICK[1]!;
    if (!this.quickOf(1, t, tLog2, below)) return false;
    // the worse of two values lies between the larger of their lower bounds and the larger of their upper bounds
    into[0] = Math.max(low, QUICK[0]!);
    into[1] = Math.max(high, QUICK[1]!);
    return true;
  }

  // side 0 the start profile, 1 the end: its quick moment bounds at t into QUICK (the same x = log2 t − log2 rms as
  // anyAboveEnclosure's, from the level table's numbers of the profile)
  private quickOf(side: number, t: number, tLog2: number, under: number): boolean {
    this.levelsAt();
    const table = this.levels;
    const j = 2 * this.index + side;
    if (table.applies[j] === 0 || t > table.bound[j]!) return false;
    const below = table.momentsBelow(j, side === 0 ? this.parts.start : this.parts.end);
    const above = table.momentsAbove(j);
    const spread = table.spread[j]!;
    if (quickRemainder(below, above, spread) >= under) return false;
    return enclosureQuick(below, above, spread, tLog2 - table.rmsLog2[j]!, QUICK, 0);
  }

  private flushUppers(k: number): void {
    const memo = this.memo;
    const m = this.m;
    if (k === memo[m + FLUSH_K]) return;
    const t = this.limits.flushBound * pow2Below(k);
    // (one call in a loop, as overflowRiskRoughInto's: inlined once, its doubles need no heap numbers)
    const parts = this.parts;
    const sides = parts.same ? 1 : 2;
    for (let side = 0; side < sides; side++) memo[m + FLUSH_START + side] = energyBelowUpper(side === 0 ? parts.start : parts.end, t);
    if (parts.same) memo[m + FLUSH_END] = memo[m + FLUSH_START]!;
    memo[m + FLUSH_K] = k;
  }

  // The worse of the start and end values, as the curves take it, skipping the profile whose upper bound is below the
  // other's value (the larger of two values is the one the other cannot reach); the first value is kept, not
  // integrated again (max is symmetric, so the order of the two does not matter).
  overflowRisk(k: number): number {
    const level = this.limits.overflowLevel * pow2Below(k);
    if (this.parts.same) return probabilityAnyAbove(this.parts.start, level);
    this.overflowUppers(k);
    const start = this.memo[this.m + OVERFLOW_START]!;
    const end = this.memo[this.m + OVERFLOW_END]!;
    const startFirst = start >= end;
    const a = probabilityAnyAbove(startFirst ? this.parts.start : this.parts.end, level);
    if ((startFirst ? end : start) <= a) return a;
    return Math.max(a, probabilityAnyAbove(startFirst ? this.parts.end : this.parts.start, level));
  }

  flushedEnergy(k: number): number {
    const bound = this.limits.flushBound * pow2Below(k);
    if (this.parts.same) return energyBelow(this.parts.start, bound);
    this.flushUppers(k);
    const start = this.memo[this.m + FLUSH_START]!;
    const end = this.memo[this.m + FLUSH_END]!;
    const startFirst = start >= end;
    const a = energyBelow(startFirst ? this.parts.start : this.parts.end, bound);
    if ((startFirst ? end : start) <= a) return a;
    return Math.max(a, energyBelow(startFirst ? this.parts.end : this.parts.start, bound));
  }

  overflowRiskUpper(k: number): number {
    this.overflowUppers(k);
    return Math.max(this.memo[this.m + OVERFLOW_START]!, this.memo[this.m + OVERFLOW_END]!);
  }

  // the moment bounds' lower end (0 for a profile without them: the worse of two values is at least either's)
  overflowRiskLower(k: number): number {
    this.overflowUppers(k);
    const a = this.memo[this.m + OVERFLOW_START_LOW]!;
    const b = this.memo[this.m + OVERFLOW_END_LOW]!;
    return Math.max(a === a ? a : 0, b === b ? b : 0);
  }

  flushedEnergyUpper(k: number): number {
    this.flushUppers(k);
    return Math.max(this.memo[this.m + FLUSH_START]!, this.memo[this.m + FLUSH_END]!);
  }

  // the exponent from which both profiles' energyBelowUpper is within the tolerance by its Chernoff bound (src/risk/
  // bounds.ts energyBelowWithinLog2: a few operations per profile, once per search), ∞ where they do not take the closed
  // form; the threshold flushBound·2^−k is exact, so log2 of it is log2 flushBound − k
  flushedEnergyWithinFrom(tolerance: number): number {
    const log2T = this.levels.withinLog2(this.index, this.parts, tolerance);
    if (log2T === -Infinity) return Infinity;
    // (log2 of the format's flush bound taken once for every tensor of the format, the same double)
    const bound = this.limits.flushBound;
    if (bound !== FLUSH_LOG2[0]) {
      FLUSH_LOG2[0] = bound;
      FLUSH_LOG2[1] = Math.log2(bound);
    }
    return FLUSH_LOG2[1]! - log2T;
  }

  // where both profiles take energyBelowUpper's closed form (two normal tails, src/risk/bounds.ts) at every threshold: no
  // dearer than the cheap bounds' two to four law evaluations per profile, and within 1.0–1.3× of the share where
  // they are often far above it (worked out when the search asks, not kept: a field more on each of ~4,000 objects)
  get flushedEnergyUpperFirst(): boolean {
    return energyBelowUpperClosed(this.parts.start) && (this.parts.same || energyBelowUpperClosed(this.parts.end));
  }
}

// The flushed share of a Gaussian or half-Gaussian law without a cap, or of a scale mixture of Gaussians, at any spread
// of its scale, grows at most eightfold per binade the threshold doubles (the magnitudes' density does not rise away
// from 0: src/scale/window.ts flushedEnergyGrowth); 9 = 8·(1 + 1/8) leaves room far above the integrals' own error
// (tables within 1.1e-4 relative, src/risk/laws.ts).
const FLUSH_GROWTH = 9;
function growsAtMostEightfold(profile: MagnitudeProfile): boolean {
  const shape = profile.shape;
  return (shape === "gaussian" || shape === "half-gaussian" || shape === "gaussian-mixture") && (profile.bound === undefined || !(profile.bound > 0));
}

const PAIR = new Float64Array(2);
// one profile's quick moment bounds (BoundedCurves.quickOf)
const QUICK = new Float64Array(2);

// the lower bound on the overflow probability from the product Π(1 − low_i), widened by `widen` for its rounding
// (OverflowNarrowing.update)
function overflowLow(noneHigh: number, widen: number): number {
  return Math.max(0, 1 - (noneHigh * (1 + widen) + 1e-300));
}

// the tensors whose shifted-tail constants a horizon point makes at once (HorizonPoint.makeShifts)
const SHIFT_BLOCK = 128;
// a tensor's shifted-tail constants at a horizon point, at these offsets of its record (HorizonPoint.shifts)
const SHIFT_BOUND = 0;
const SHIFT_SLOPE = 1;
const SHIFT_UP = 2;
const SHIFT_MIDDLE = 3;
const SHIFT_MIDDLE_TAIL = 4;
const SHIFT_DOWN = 5;
const SHIFT_MASS = 6;
const SHIFT_RMS_LOG2 = 7;
const SHIFT_SPREAD = 8;
const SHIFT_HIGH = 9;
const SHIFT_LOW = 10;
const SHIFT_MIDDLE_LEVEL = 11;
const SHIFT_FIELDS = 12;
// one tensor's shifted-tail bounds in the simulation's sweep
const SHIFTED = new Float64Array(2);
// one tensor's moment bounds in the simulation's narrowing
const ENCLOSURE = new Float64Array(2);
// one tensor's flushed-share bounds in the simulation's flushing test
const FLUSHED = new Float64Array(2);
// HorizonPoint.sweep's products over the tensors it keeps, Π(1 − low) and Π(1 − high), for OverflowNarrowing.update,
// 1 where one of them is not integrated, and 1 where it left out a tensor whose upper bound lies in (2^−54, DROPPED]
// (the passes after the sweep leave such tensors out, the upper bound widened by n·DROPPED for them,
// OverflowNarrowing.boundBy; a draw that close to the bounds is left to the exact value, which takes every tensor)
const SWEPT = new Float64Array(4);
// BoundedCurves.boundsOf's moment bounds, before they are merged with the shifted tails' or the segment's
const ENCLOSED = new Float64Array(2);
const SEGMENT_ENOUGH = 1e-9;
const DROPPED = 2 ** -30;

/**
 * Overflow probability per step over all gradient tensors as they drift from their start to their end profiles: the
 * model {@link lossScaleAnswer} simulates a dynamic scale with (exported for tests of its bounds). `lowestScale` is the
 * simulation's lowest scale: it never asks about a smaller one (it clamps every cut to it).
 */
export function dynamicModel(
  gradients: TensorPrediction[],
  limits: RangeLimits,
  options: WindowOptions,
  lowestScale = 1,
  profiles: readonly GradientProfiles[] = gradients.map(profilesOf),
): DynamicScaleModel {
  // the simulation asks for a few points of the horizon at many scales: keep each point's profiles
  const points = new Map<number, HorizonPoint>();
  const ends = new ShiftEnds(profiles, levelTable(profiles));
  const at = (progress: number): HorizonPoint => {
    let point = points.get(progress);
    if (point === undefined) {
      point = new HorizonPoint(profiles, progress, ends);
      points.set(progress, point);
    }
    return point;
  };
  const narrowings = new Map<number, [number, OverflowNarrowing][]>();
  const lead = { index: -1 };
  // per point of the horizon: for each tensor the smallest scale at which its flushing was found within the tolerance,
  // and whether its bound at the lowest scale was taken; and the tensors not known to be within it at the lowest scale
  // (the first `open` of `rest`, in order): the simulation asks no scale below the lowest, so it visits no other
  const flushing = new Map<number, { tolerated: Float64Array; anchored: Uint8Array; rest: Int32Array; open: number }>();
  // per tensor 1 when its flushed share at the lowest scale is within the tolerance at every point before the end, read
  // off its two ends once (flushWithinBeforeEnd): such tensors are never looked at again, nor their profiles made
  let within: Uint8Array | undefined;
  // a profile scaled by S against a level is the profile against level/S (exact for the powers of two a dynamic
  // scale takes), without a scaled copy per scale
  return {
    overflowProbability(scale: number, progress: number) {
      return new OverflowNarrowing(at(progress), limits.overflowLevel / scale).value();
    },
    overflowBounds(scale: number, progress: number) {
      // a tensor's probability grows with the scale: what is known at a larger scale of the same point bounds it here
      let atPoint = narrowings.get(progress);
      if (atPoint === undefined) narrowings.set(progress, (atPoint = []));
      let above: OverflowNarrowing | undefined;
      for (const [s, n] of atPoint) if (s > scale && (above === undefined || s < above.scale)) above = n;
      const narrowing = new OverflowNarrowing(at(progress), limits.overflowLevel / scale, scale, above, lead);
      atPoint.push([scale, narrowing]);
      return narrowing;
    },
    flushesTooMuch(scale: number, progress: number) {
      const point = at(progress);
      const n = point.n;
      let known = flushing.get(progress);
      if (known === undefined) {
        const tolerated = new Float64Array(n).fill(Infinity);
        const anchored = new Uint8Array(n);
        let open = n;
        if (progress < 1) {
          within ??= flushWithinBeforeEnd(profiles, ends, limits.flushBound / lowestScale, options.flushTolerance);
          for (let i = 0; i < n; i++) {
            if (within[i] === 1) {
              tolerated[i] = lowestScale;
              anchored[i] = 1;
              open--;
            }
          }
        }
        // (the list as long as it needs to be: at growth 1.1 one tensor of 2,000)
        const rest = new Int32Array(open);
        for (let i = 0, k = 0; k < open; i++) if (anchored[i] === 0) rest[k++] = i;
        known = { tolerated, anchored, rest, open };
        flushing.set(progress, known);
      }
      // the tensors found within the tolerance at the lowest scale since leave the list (a scale below the lowest, which
      // the simulation never asks, visits every tensor)
      const rest = known.rest;
      let open = 0;
      for (let k = 0; k < known.open; k++) if (!(known.tolerated[rest[k]!]! <= lowestScale)) rest[open++] = rest[k]!;
      known.open = open;
      const every = !(scale >= lowestScale);
      const visits = every ? n : open;
      const tolerance = options.flushTolerance;
      const bound = limits.flushBound / scale;
      for (let k = 0; k < visits; k++) {
        const i = every ? k : rest[k]!;
        // the flushed share falls as the scale grows: a tensor within the tolerance at a smaller scale is within it here
        if (known.tolerated[i]! <= scale) continue;
        const draws = point.drawBounds(i);
        if (known.anchored[i] === 0) {
          // once per tensor and point: its cheap bound at the lowest scale the simulation takes, which then serves every
          // scale (widened for the rounding of evaluations at two thresholds)
          known.anchored[i] = 1;
          draws.energyBelowInto(limits.flushBound / lowestScale, FLUSHED, 0);
          if (FLUSHED[1]! <= tolerance * (1 - 1e-9)) {
            known.tolerated[i] = lowestScale;
            continue;
          }
        }
        // whether the share exceeds the tolerance, integrating only when the bounds do not tell
        draws.energyBelowInto(bound, FLUSHED, 0);
        const low = FLUSHED[0]!;
        const high = FLUSHED[1]!;
        if (!(high <= tolerance) && (low > tolerance || energyBelow(point.profile(i), bound) > tolerance)) return true;
        known.tolerated[i] = Math.min(known.tolerated[i]!, scale);
      }
      return false;
    },
  };
}

/**
 * Per gradient, 1 when its flushed energy share at threshold t (the lowest scale's) is within `tolerance` at every point
 * of the horizon before its end, decided from the two ends without a profile per point. Where the start's law is
 * Gaussian without a bound (ProfileDrawBounds' fast path, src/risk/bounds.ts), the upper bound the model's anchoring
 * takes is at most the law's share at the lowest draw rms·2^{−9s}, and at most its share at the inner draw rms·2^{−4s}
 * taken as bounds.ts does; inside the horizon log2 rms and s move linearly with the progress (profileBetween), so each
 * draw's log2 is at least the smaller of its values at the two ends, and the share falls as the draw grows. The shares
 * at those smallest draws (a billionth of a binade lower, for the rounding of rms, the spread and the draws' products)
 * bound every point's; 1e-5 of room covers the computed share's departures from monotone (the fast erfc's 1.2e-7 over a
 * share of 0.2 or more where it is used, src/risk/_math.ts; rounding alone in the series below that). Then the anchoring's own test
 * passes at every such point.
 */
function flushWithinBeforeEnd(gradients: readonly GradientProfiles[], ends: ShiftEnds, t: number, tolerance: number): Uint8Array {
  const n = gradients.length;
  const out = new Uint8Array(n);
  const inside = 1 - INNER_DRAW_OUTSIDE;
  const tLog2 = Math.log2(t);
  // the ends' numbers as the profiles give them (ShiftEnds: the rms, log2 of it, the spread, the count of nonzero
  // elements), read off typed arrays
  const m = ends.made();
  for (let i = 0; i < n; i++) {
    if (m.closed[i] === 0) continue;
    const s0 = m.spread[2 * i]!;
    const s1 = m.spread[2 * i + 1]!;
    // a positive rms and spread at every point before the end, and nonzero elements: the fast path's conditions
    if (!(m.rms[2 * i]! > 0) || !(m.count[2 * i]! > 0) || !(s0 > 0) || !(s1 >= 0)) continue;
    const l0 = m.rmsLog2[2 * i]!;
    // profileBetween keeps the start's rms where the end's is not positive
    const l1 = m.rms[2 * i + 1]! > 0 ? m.rmsLog2[2 * i + 1]! : l0;
    // first Chernoff's bound on the closed form's share (src/risk/bounds.ts energyBelowWithinLog2Of), at the smaller
    // rms and the wider spread of the two ends (each point's log2 rms and spread lie between the ends', a billionth of
    // a binade and a trillionth of the spread given for their rounding): within the tolerance at t and every threshold
    // below it at every point before the end, a Gaussian law without a bound taking the closed form there (its rms
    // positive, its spread positive before the end)
    if (Number.isFinite(l0) && Number.isFinite(l1) && tLog2 <= energyBelowWithinLog2Of(Math.min(l0, l1) - 1e-9, Math.max(s0, s1) * (1 + 1e-12), tolerance)) {
      out[i] = 1;
      continue;
    }
    const law = elementLaw(gradients[i]!.start);
    const limit = tolerance * (1 - 1e-9);
    // the inner draw's bound first: where it passes, so does the smaller of the two (rounding keeps the order), and the
    // outer draw's share is not needed
    const innerHigh = (law.energyBelow(exp2(Math.min(l0 - 4 * s0, l1 - 4 * s1) - 1e-9), t) * inside + INNER_DRAW_OUTSIDE) * (1 + 1e-9);
    if (innerHigh * (1 + 1e-5) <= limit) {
      out[i] = 1;
      continue;
    }
    const outer = law.energyBelow(exp2(Math.min(l0 - 9 * s0, l1 - 9 * s1) - 1e-9), t);
    const high = Math.min(outer * (1 + 1e-12), innerHigh);
    if (high * (1 + 1e-5) <= limit) out[i] = 1;
  }
  return out;
}

/**
 * What the shifted-tail and moment bounds (src/scale/overflow-enclosure.ts shiftBounds, enclosureWith) take of each
 * gradient's start and end profiles, made on first use for every point of the horizon: at 2i (start) and 2i + 1 (end),
 * the rms and its logarithm, the spread, the count of nonzero elements, whether the bounds apply to the law and count (as anyAboveEnclosure's,
 * src/scale/overflow-enclosure.ts enclosureApplies: a Gaussian law, 16 elements or more), the levels of the count
 * (five each), the bound and its log2 (a billionth of a binade low; +∞ without one), and the moments of the count's
 * grid neighbours (made on first use); per tensor whether both rms are positive (the rms then moves geometrically,
 * profileBetween), whether its start's law is Gaussian with 16 elements or more, and whether it is Gaussian or
 * half-Gaussian without a positive bound (the flushing's closed form, flushWithinBeforeEnd). Read off the profiles once
 * per model, in typed arrays every point and the flushing read (a profile's fields are slow to reach, its objects being
 * of many kinds).
 */
class ShiftEnds {
  private made_:
    | {
        rms: Float64Array;
        rmsLog2: Float64Array;
        spread: Float64Array;
        count: Float64Array;
        ok: Uint8Array;
        levels: Float64Array;
        bound: Float64Array;
        rawBound: Float64Array;
        bothRms: Uint8Array;
        gaussian: Uint8Array;
        closed: Uint8Array;
      }
    | undefined;
  // per end (2i start, 2i + 1 end): the moments of the grid counts about its count (enclosureMoments), made on first use
  private readonly below: (LevelMoments | undefined)[];
  private readonly above: (LevelMoments | undefined)[];
  constructor(
    private readonly gradients: readonly GradientProfiles[],
    // the levels of each end's count at LEVELS·j (as ShiftLevelTable lays them out: j = 2i start, 2i + 1 end), shared with the
    // answer's curves, which have made many of them already
    private readonly levels: ShiftLevelTable,
  ) {
    this.below = new Array<LevelMoments | undefined>(2 * gradients.length);
    this.above = new Array<LevelMoments | undefined>(2 * gradients.length);
  }

  /** The moments of the grid counts below and above end j's count (enclosureMoments), for a law with moment bounds. */
  momentsBelow(j: number): LevelMoments {
    return this.below[j] ?? this.momentsOf(j)[0];
  }
  momentsAbove(j: number): LevelMoments {
    return this.above[j] ?? this.momentsOf(j)[1];
  }
  private momentsOf(j: number): [LevelMoments, LevelMoments] {
    const moments = enclosureMoments(this.made().count[j]!);
    this.below[j] = moments[0];
    this.above[j] = moments[1];
    return moments;
  }

  made(): NonNullable<ShiftEnds["made_"]> {
    if (this.made_ !== undefined) return this.made_;
    const n = this.gradients.length;
    const table = this.levels;
    // log2 of the rms, the spread and the bound (+∞ without one) are the level table's numbers of the profile, laid out
    // alike (2i start, 2i + 1 end) and made with its levels: read there, most of them made by the answer's searches
    const m = {
      rms: new Float64Array(2 * n),
      rmsLog2: table.rmsLog2,
      spread: table.spread,
      count: new Float64Array(2 * n),
      ok: new Uint8Array(2 * n),
      levels: table.levels,
      bound: new Float64Array(2 * n),
      rawBound: table.bound,
      bothRms: new Uint8Array(n),
      gaussian: new Uint8Array(n),
      closed: new Uint8Array(n),
    };
    for (let i = 0; i < n; i++) {
      const g = this.gradients[i]!;
      m.bothRms[i] = g.start.rms > 0 && g.end.rms > 0 ? 1 : 0;
      const shape = g.start.shape;
      m.closed[i] = (shape === "gaussian" || shape === "half-gaussian") && !(g.start.bound !== undefined && g.start.bound > 0) ? 1 : 0;
      // the table's levels and numbers of both profiles, the levels of end j at LEVELS·j
      table.at(i, g.start, g.end);
      for (let side = 0; side < 2; side++) {
        const j = 2 * i + side;
        const law = side === 0 ? g.start : g.end;
        m.rms[j] = law.rms;
        const count = law.elements * (1 - law.zeroFraction);
        m.count[j] = count;
        const enclosed = enclosedLaw(law.shape, count);
        if (side === 0) m.gaussian[i] = enclosed ? 1 : 0;
        if (!enclosed) continue;
        m.ok[j] = 1;
        m.bound[j] = Math.log2(m.rawBound[j]!) - 1e-9;
      }
    }
    this.made_ = m;
    return m;
  }
}

/**
 * The gradients' profiles at one point of the horizon, each made on first use: at a point where the tensor that
 * overflowed most at the last point decides every step alone (its p_i = 1), the others are never made.
 */
class HorizonPoint {
  readonly n: number;
  // the profiles made here, and their extreme-draw bounds, each made on first use; none at the horizon's ends, where
  // the answer's own serve (an array of every tensor per point otherwise)
  private profiles: (MagnitudeProfile | undefined)[] | undefined;
  private draws: (ProfileDrawBounds | undefined)[] | undefined;
  // the draws' scales of the profiles made here, in one array (ProfileDrawBounds)
  private drawScales: Float64Array | undefined;
  /** per tensor 1 when its law is Gaussian with 16 elements or more (it has moment bounds), read off its start */
  readonly gaussian: Uint8Array;

  constructor(
    private readonly gradients: readonly GradientProfiles[],
    private readonly progress: number,
    // what the shifted-tail bounds take of the start and end profiles, shared by every point
    private readonly ends: ShiftEnds,
  ) {
    this.n = gradients.length;
    this.gaussian = ends.made().gaussian;
  }

  drawBounds(i: number): ProfileDrawBounds {
    // profileAt at the ends is riskProfile of the start or end: the answer's own views, and their draw bounds
    const p = this.progress;
    if (p <= 0) return this.gradients[i]!.startBounds;
    if (p >= 1) return this.gradients[i]!.endBounds;
    const draws = (this.draws ??= new Array<ProfileDrawBounds | undefined>(this.n));
    let d = draws[i];
    if (d === undefined) {
      d = new ProfileDrawBounds(this.profile(i), (this.drawScales ??= new Float64Array(DRAWS * this.n)), DRAWS * i);
      draws[i] = d;
    }
    return d;
  }

  // per tensor here: the constants of its shifted-tail bounds (overflow-enclosure.ts shiftBounds), made on first sweep,
  // SHIFT_FIELDS numbers each in one array (the sweep reads a tensor's together): its bound (−∞ where the law has none of
  // these bounds), slope, up, middle and down (shiftBoundsGridded's arguments as log2 t·slope + up, + middle and + down),
  // middleTail and mass, and the numbers shiftBounds takes where those arguments are not numbers (the middle level last)
  // (made for the tensors below `made`, in blocks as the sweeps reach them: a sweep that stops early, its overflow
  // certain, leaves the rest unmade)
  private shifts: Float64Array | undefined;
  private shiftsMade = 0;

  /**
   * The shifted-tail bounds at log2 t of the tensors in `live` (the first `count`) into `lows` and `highs` where the law has them and they are tighter
   * (src/scale/overflow-enclosure.ts shiftBounds: two normal tails each), an integrated tensor (`state` 2) aside. Read off the start and
   * end profiles, without making the profiles here: inside the horizon the rms's logarithm is the interpolation of
   * theirs (within far less than the billionth of a binade each level is moved outward by). In the same pass `live`
   * keeps only the tensors whose upper bound is above 2^−54 (the number kept is returned), and `into` gets the products
   * Π(1 − low) and Π(1 − high) over them in their order, and 1 where one of them is not integrated (0 otherwise).
   * The pass stops once the product of the lows so far, widened by `widen` as OverflowNarrowing.boundBy takes it, makes
   * the lower bound on the overflow probability 1 (the product of the rest, each factor at most 1, only lowers it, so
   * the whole pass would give 1 too, and with it every step's answer at this scale and point): the tensors not reached
   * keep their bounds and stay live after the kept ones, Π(1 − high) is then reported as 0 (an upper bound of 1) and
   * one of them as not integrated.
   */
  sweep(levelLog2: number, lows: Float64Array, highs: Float64Array, state: Uint8Array, live: Int32Array, count: number, into: Float64Array, widen: number): number {
    const c = (this.shifts ??= new Float64Array(SHIFT_FIELDS * this.n));
    into[3] = 0;
    let kept = 0;
    let noneHigh = 1;
    let noneLow = 1;
    let waiting = 0;
    for (let k = 0; k < count; k++) {
      const i = live[k]!;
      if (i >= this.shiftsMade) this.makeShifts(c, i);
      const integrated = state[i] === 2;
      const f = SHIFT_FIELDS * i;
      // an integrated tensor, or one already bounded below anything that moves a product, is left as it is (and one
      // whose law has no such bounds: its bound is −∞ here)
      if (!(integrated || !(highs[i]! > 2 ** -54) || levelLog2 > c[f + SHIFT_BOUND]!)) {
        // the grid arguments as affine functions of log2 t (shiftBoundsGridded), else the tails themselves
        const at = levelLog2 * c[f + SHIFT_SLOPE]!;
        if (!shiftBoundsGridded(at + c[f + SHIFT_UP]!, at + c[f + SHIFT_MIDDLE]!, c[f + SHIFT_MIDDLE_TAIL]!, at + c[f + SHIFT_DOWN]!, c[f + SHIFT_MASS]!, SHIFTED, 0)) {
          shiftBounds(levelLog2 - c[f + SHIFT_RMS_LOG2]!, c[f + SHIFT_SPREAD]!, c[f + SHIFT_HIGH]!, c[f + SHIFT_LOW]!, c[f + SHIFT_MASS]!, c[f + SHIFT_MIDDLE_LEVEL]!, c[f + SHIFT_MIDDLE_TAIL]!, SHIFTED, 0);
        }
        if (SHIFTED[0]! > lows[i]!) lows[i] = SHIFTED[0]!;
        if (SHIFTED[1]! < highs[i]!) highs[i] = SHIFTED[1]!;
      }
      const high = highs[i]!;
      if (!(high > DROPPED)) {
        if (high > 2 ** -54) into[3] = 1;
        continue;
      }
      live[kept++] = i;
      if (!integrated) waiting = 1;
      noneHigh *= 1 - lows[i]!;
      noneLow *= 1 - high;
      // (1 − y rounds to 1 only for y ≤ 2^−54: above 2^−50 the product cannot make overflowLow 1, one comparison)
      if (noneHigh <= 2 ** -50 && overflowLow(noneHigh, widen) >= 1 && k + 1 < count) {
        live.copyWithin(kept, k + 1, count);
        into[0] = noneHigh;
        into[1] = 0;
        into[2] = 1;
        return kept + count - k - 1;
      }
    }
    into[0] = noneHigh;
    into[1] = noneLow;
    into[2] = waiting;
    return kept;
  }

  // the shifted tails' constants of the tensors from `shiftsMade` to past `at` (a block of SHIFT_BLOCK, or the rest)
  private makeShifts(c: Float64Array, at: number): void {
    const p = this.progress;
    const ends = this.ends.made();
    // the law, count and bound of the profile here: the end's at the end, else the start's (profileBetween)
    const side = p >= 1 ? 1 : 0;
    const from = this.shiftsMade;
    const to = Math.min(this.n, Math.max(at + 1, from + SHIFT_BLOCK));
    for (let i = from; i < to; i++) {
      const j = 2 * i + side;
      const f = SHIFT_FIELDS * i;
      c[f + SHIFT_BOUND] = -Infinity;
      if (ends.ok[j] === 0) continue;
      let rmsLog2: number;
      let spread: number;
      let slack = 0;
      if (p <= 0 || p >= 1) {
        rmsLog2 = ends.rmsLog2[j]!;
        spread = ends.spread[j]!;
      } else {
        spread = spreadBetween(ends.spread[2 * i]!, ends.spread[2 * i + 1]!, p);
        const a = ends.rmsLog2[2 * i]!;
        const b = ends.rmsLog2[2 * i + 1]!;
        if (ends.bothRms[i] === 1) {
          rmsLog2 = a * (1 - p) + b * p;
          slack = 1e-9;
        } else rmsLog2 = a;
      }
      if (!(spread > 0) || !Number.isFinite(rmsLog2)) continue;
      const l = LEVELS * j;
      const high = ends.levels[l]! + slack;
      const low = ends.levels[l + 1]! - slack;
      const middle = ends.levels[l + 3]! + slack;
      c[f + SHIFT_RMS_LOG2] = rmsLog2;
      c[f + SHIFT_SPREAD] = spread;
      c[f + SHIFT_HIGH] = high;
      c[f + SHIFT_LOW] = low;
      c[f + SHIFT_MIDDLE_LEVEL] = middle;
      c[f + SHIFT_MASS] = ends.levels[l + 2]!;
      c[f + SHIFT_MIDDLE_TAIL] = ends.levels[l + 4]!;
      c[f + SHIFT_BOUND] = ends.bound[j]!;
      // shiftBoundsTabled's grid arguments ((log2 t − log2 rms − level)/s − TAIL_LOW)·TAIL_STEPS as log2 t·slope + a constant
      const slope = SHIFT_GRID_STEPS / spread;
      c[f + SHIFT_SLOPE] = slope;
      c[f + SHIFT_UP] = SHIFT_GRID_ORIGIN - (rmsLog2 + high) * slope;
      c[f + SHIFT_DOWN] = SHIFT_GRID_ORIGIN - (rmsLog2 + low) * slope;
      c[f + SHIFT_MIDDLE] = SHIFT_GRID_ORIGIN - (rmsLog2 + middle) * slope;
    }
    this.shiftsMade = to;
  }

  // per tensor here: what the moment bounds take of its profile (src/scale/overflow-enclosure.ts enclosureWith), each
  // made on its first use from the ends' numbers without making the profile (a few hundred of the tensors are ever
  // enclosed at a point): the spread, log2 of the rms (computed as profileBetween computes the rms, so the same x as
  // anyAboveEnclosure's), and which end's count, law and bound the profile has (profileAt: the end's at the end, else
  // the start's), as 1 + that end's index where the bounds apply (enclosureApplies without t: a Gaussian law, 16
  // elements or more, a spread, a positive rms), −1 where they do not, 0 not made yet
  private moments_: { spread: Float64Array; rmsLog2: Float64Array; end: Int32Array } | undefined;

  private momentNumbers(): NonNullable<HorizonPoint["moments_"]> {
    const n = this.n;
    const m = { spread: new Float64Array(n), rmsLog2: new Float64Array(n), end: new Int32Array(n) };
    this.moments_ = m;
    return m;
  }

  private momentsOf(i: number, m: NonNullable<HorizonPoint["moments_"]>): void {
    const e = this.ends.made();
    const p = this.progress;
    const j = p >= 1 ? 2 * i + 1 : 2 * i;
    let rms: number;
    let spread: number;
    if (p <= 0 || p >= 1) {
      rms = e.rms[j]!;
      spread = e.spread[j]!;
    } else {
      rms = rmsBetween(e.rms[2 * i]!, e.rms[2 * i + 1]!, p);
      spread = spreadBetween(e.spread[2 * i]!, e.spread[2 * i + 1]!, p);
    }
    if (!(rms > 0 && spread > 0 && e.ok[j] === 1)) {
      m.end[i] = -1;
      return;
    }
    m.end[i] = j + 1;
    m.spread[i] = spread;
    m.rmsLog2[i] = Math.log2(rms);
  }

  /**
   * Tensor i's moment bounds at t (log2 t given) into `into` (anyAboveEnclosure's, bit for bit; `quick`, those with the
   * remainder at its peak, enclosureQuick), or false where they do not apply.
   */
  enclose(i: number, t: number, tLog2: number, into: Float64Array, quick: boolean): boolean {
    const m = this.moments_ ?? this.momentNumbers();
    if (m.end[i] === 0) this.momentsOf(i, m);
    const j = m.end[i]! - 1;
    if (j < 0 || !(t > 0) || t > this.ends.made().rawBound[j]!) return false;
    const below = this.ends.momentsBelow(j);
    const above = this.ends.momentsAbove(j);
    const x = tLog2 - m.rmsLog2[i]!;
    return quick ? enclosureQuick(below, above, m.spread[i]!, x, into, 0) : enclosureWith(below, above, m.spread[i]!, x, into, 0);
  }

  profile(i: number): MagnitudeProfile {
    const g = this.gradients[i]!;
    const progress = this.progress;
    if (progress <= 0) return g.start;
    if (progress >= 1) return g.end;
    const profiles = (this.profiles ??= new Array<MagnitudeProfile | undefined>(this.n));
    let p = profiles[i];
    if (p === undefined) {
      p = profileBetween(g.start, g.end, progress);
      profiles[i] = p;
    }
    return p;
  }
}

/**
 * P(any gradient overflows) = 1 − Π (1 − p_i) over the tensors (independent tensors), as bounds narrowed on
 * request. Each tensor's p_i starts bounded by what a larger scale of the same point of the horizon knows (p_i grows
 * with the scale), or by 1; one tensor is integrated at once: the one the larger scale bounds highest or, with no
 * larger scale, the one largest where the model last integrated (often p_i = 1 here too, which decides an overflow
 * alone). Then, in batches growing by a tenth, the tensors whose bounds leave the most of the product open get
 * bounds at this scale (the moment bounds of src/scale/overflow-enclosure.ts for a Gaussian law, within about 1e-3 of
 * p_i where the spread is wide; else the segment upper bound), and those still leaving the most open after it are
 * integrated; the bounds on the product allow for its rounding. Once every p_i that can move the product is known, the value is the product in the tensors' order,
 * exactly as {@link OverflowNarrowing.value} gives it.
 */
class OverflowNarrowing implements OverflowBounds {
  low = 0;
  high = 1;
  exact = false;
  // each tensor's bounds on p_i (equal once integrated)
  private readonly lows: Float64Array;
  readonly highs: Float64Array;
  // per tensor: 0 a bound from a larger scale (or 1), 3 its moment bounds with the remainder at its peak here, 1 its
  // bounds here, or its value at the larger scale for a law without moment bounds (integrated next), 2 integrated
  private readonly state: Uint8Array;
  /** true once the bounds are set (the tensors a smaller scale may take its bounds from) */
  started = false;
  // the tensors whose p_i can still move the product (upper bound above 2^−54), the widest bounds first to within a
  // quarter binade: by open = log(1 − low) − log(1 − high), what each leaves open of the product (keyed by 1 − e^{−open},
  // the same order; any order narrows to the same bounds, this one to them in fewer steps) (the queue made when first
  // filled: often the sweep's bounds decide, and it never is)
  private queue: BucketQueue | undefined;
  private batch = 1;
  private largest = -1;
  // true from the first narrowing until the next has swept every tensor's shifted-tail bounds
  private sweepPending = false;
  // true from the sweep until the next narrowing fills the queue (often the sweep's bounds decide, and it never is)
  private queuePending = false;
  // log2 of the level
  private readonly levelLog2: number;
  // the products Π(1 − lows[i]) and Π(1 − highs[i]) in binary trees (leaf i at size + i, spare leaves 1, node j the
  // product of nodes 2j and 2j + 1): a changed bound updates its path instead of every product. Made when the queue is
  // first filled; before, each narrowing sets many bounds at once and takes the products in one pass
  // (both trees in one array, node j's low-bound factor product at 2j and its high-bound one at 2j + 1: a changed tensor
  // walks one path for both)
  private size = 0;
  private factors: Float64Array | undefined;
  // the tensors whose upper bound here may be above 2^−54 (the first `liveCount`), set when the bounds are first set
  // and thinned after the sweep: the others leave every product exactly as it is (1 − p rounds to 1), their upper
  // bounds here are the larger scale's (still valid: p_i grows with the scale), and no pass over the tensors visits them
  private readonly live: Int32Array;
  private liveCount = 0;
  // true once a sweep here or at a larger scale left out a tensor whose upper bound lies in (2^−54, DROPPED] (boundBy)
  private dropped = false;

  constructor(
    private readonly point: HorizonPoint,
    private readonly level: number,
    readonly scale = 1,
    private readonly above?: OverflowNarrowing,
    // the model's memory of the tensor with the largest p_i it last integrated (shared by its narrowings)
    private readonly lead: { index: number } = { index: -1 },
  ) {
    const n = point.n;
    this.levelLog2 = Math.log2(level);
    // the bounds, the live list and the states in one buffer (one allocation per scale and point)
    const buffer = new ArrayBuffer(20 * n + n);
    this.lows = new Float64Array(buffer, 0, n);
    this.highs = new Float64Array(buffer, 8 * n, n);
    this.live = new Int32Array(buffer, 16 * n, n);
    this.state = new Uint8Array(buffer, 20 * n, n);
  }

  // the trees from the bounds (in one buffer), when the queue is first filled
  private buildProducts(): void {
    const n = this.point.n;
    let size = 1;
    while (size < n) size *= 2;
    this.size = size;
    const factors = new Float64Array(4 * size).fill(1);
    const lows = this.lows;
    const highs = this.highs;
    const live = this.live;
    // the other leaves stay 1: their factors are exactly 1
    for (let k = 0; k < this.liveCount; k++) {
      const i = live[k]!;
      const leaf = 2 * (size + i);
      factors[leaf] = 1 - lows[i]!;
      factors[leaf + 1] = 1 - highs[i]!;
    }
    for (let j = size - 1; j >= 1; j--) {
      factors[2 * j] = factors[4 * j]! * factors[4 * j + 2]!;
      factors[2 * j + 1] = factors[4 * j + 1]! * factors[4 * j + 3]!;
    }
    this.factors = factors;
  }

  // tensor i's two factors (1 − its low, 1 − its high) and the products on its path up
  private setFactors(i: number, lowFactor: number, highFactor: number): void {
    const factors = this.factors;
    if (factors === undefined) return;
    let j = this.size + i;
    factors[2 * j] = lowFactor;
    factors[2 * j + 1] = highFactor;
    for (j >>= 1; j >= 1; j >>= 1) {
      factors[2 * j] = factors[4 * j]! * factors[4 * j + 2]!;
      factors[2 * j + 1] = factors[4 * j + 1]! * factors[4 * j + 3]!;
    }
  }

  // into the queue, keyed by what its bounds leave open: 1 − (1 − high)/(1 − low) = 1 − e^{−open}, in the order of open
  // itself without two logarithms (it never rises: the bounds only narrow)
  private push(i: number): void {
    const low = this.lows[i]!;
    this.queue!.push(i, (this.highs[i]! - low) / (1 - low));
  }

  /** whether p_i is known exactly */
  known(i: number): boolean {
    return this.state[i] === 2;
  }

  /** The probability itself, every tensor integrated that can move the product. */
  value(): number {
    let none = 1;
    for (let i = 0; i < this.point.n; i++) {
      let value: number;
      if (this.state[i] === 2) value = this.lows[i]!;
      // 1 − p rounds to 1 for p ≤ 2^−54: such tensors leave the product exactly as it is (and their profiles unmade)
      else if (this.started && this.highs[i]! <= 2 ** -54) continue;
      else {
        const p = this.point.profile(i);
        if (probabilityAnyAboveBounds(p, this.level)[1] <= 2 ** -54) continue;
        value = probabilityAnyAbove(p, this.level);
      }
      none *= 1 - value;
    }
    return 1 - none;
  }

  private integrate(i: number): void {
    const p = probabilityAnyAbove(this.point.profile(i), this.level);
    this.lows[i] = p;
    this.highs[i] = p;
    this.state[i] = 2;
    this.setFactors(i, 1 - p, 1 - p);
    if (this.largest < 0 || p > this.lows[this.largest]!) {
      this.largest = i;
      this.lead.index = i;
    }
  }

  narrow(goal?: number): void {
    if (this.exact) return;
    const highs = this.highs;
    // true when this call swept: SWEPT then holds the products over the live tensors
    let swept = false;
    const n = highs.length;
    if (!this.started) {
      this.started = true;
      // what a larger scale knows: its upper bound there, or its value widened for the rounding of the two integrals
      const above = this.above?.started ? this.above : undefined;
      let first = -1;
      const live = this.live;
      let count = 0;
      if (above === undefined) {
        highs.fill(1);
        for (let i = 0; i < n; i++) live[i] = i;
        count = n;
        if (this.lead.index >= 0 && this.lead.index < n) first = this.lead.index;
      } else {
        highs.set(above.highs);
        this.dropped = above.dropped;
        const aboveLive = above.live;
        for (let k = 0; k < above.liveCount; k++) {
          const i = aboveLive[k]!;
          // a tensor integrated there whose law has no moment bounds is integrated here when its turn comes, without a
          // segment bound first: it was among the largest there, where the segment bound (up to twice the value) rarely
          // places it lower
          if (above.known(i)) {
            if (this.point.gaussian[i] === 0) this.state[i] = 1;
            highs[i] = Math.min(1, highs[i]! * (1 + 1e-6));
          }
          if (highs[i]! > 2 ** -54) {
            live[count++] = i;
            if (first < 0 || highs[i]! > highs[first]!) first = i;
          }
        }
      }
      this.liveCount = count;
      if (first >= 0) this.integrate(first);
      // the others wait for the next narrowing, if the one integrated first does not decide with these bounds
      this.sweepPending = true;
    } else if (this.sweepPending) {
      // every tensor's shifted-tail bounds here where tighter, in one pass (a Gaussian-law tensor by two normal
      // tails): enough for most; the rest are then ordered by what they leave open
      // (thinning the live list and taking the products update() would take over it, in the same pass)
      this.sweepPending = false;
      this.liveCount = this.point.sweep(this.levelLog2, this.lows, highs, this.state, this.live, this.liveCount, SWEPT, this.widen());
      if (SWEPT[2] === 1) this.queuePending = true;
      if (SWEPT[3] === 1) this.dropped = true;
      swept = true;
    } else {
      if (this.queuePending) {
        this.queuePending = false;
        this.buildProducts();
        this.queue = new BucketQueue(this.point.n);
        // every tensor not integrated
        const live = this.live;
        for (let k = 0; k < this.liveCount; k++) {
          const i = live[k]!;
          if (this.state[i] !== 2) this.push(i);
        }
      }
      // a batch of work: an upper bound costs about a quarter of an integral, the moment bounds with the remainder at
      // its peak a tenth
      let work = this.batch;
      const queue = this.queue;
      while (queue !== undefined && work > 0 && queue.size > 0) {
        const i = queue.pop();
        const state = this.state[i]!;
        if (state === 0 || state === 3) {
          // bounds from the moments of the largest element's level where the law allows (first with the remainder at
          // its peak, then shell by shell), else the segment bound
          const quick = state === 0;
          const enclosed = this.point.enclose(i, this.level, this.levelLog2, ENCLOSURE, quick);
          this.state[i] = enclosed && quick ? 3 : 1;
          const upper = enclosed ? ENCLOSURE[1]! : probabilityAnyAboveUpper(this.point.profile(i), this.level);
          let moved = false;
          if (upper < highs[i]!) {
            highs[i] = upper;
            moved = true;
          }
          if (enclosed && ENCLOSURE[0]! > this.lows[i]!) {
            this.lows[i] = ENCLOSURE[0]!;
            moved = true;
          }
          if (moved) this.setFactors(i, 1 - this.lows[i]!, 1 - highs[i]!);
          if (highs[i]! > 2 ** -54) this.push(i);
          work -= enclosed && quick ? 0.1 : 0.25;
        } else {
          this.integrate(i);
          work -= 1;
        }
        // the products are the trees' roots here: once the bounds lie on one side of the caller's goal, the rest of
        // the batch would only narrow what is already decided
        if (goal !== undefined) {
          this.update();
          if (this.low > goal || this.high < goal) break;
        }
      }
      this.batch = Math.ceil(this.batch * 1.1);
    }
    if ((this.queue === undefined || this.queue.size === 0) && !this.sweepPending && !this.queuePending) {
      const value = this.value();
      this.low = value;
      this.high = value;
      this.exact = true;
      return;
    }
    if (swept) this.boundBy(SWEPT[0]!, SWEPT[1]!);
    else this.update();
  }

  // Bounds on the computed 1 − Π(1 − p_i): the factors at the bounds of each p_i (a factor is 1 unless p_i is above
  // 2^−54), the products (the trees' roots, or one pass in the tensors' order before the trees: n − 1 products either
  // way) widened for the rounding of up to n + 2 products in any order (each within a relative 2^−53; Higham 2002,
  // §3.1) and for underflow.
  private update(): void {
    let noneHigh: number;
    let noneLow: number;
    if (this.factors !== undefined) {
      noneHigh = this.factors[2]!;
      noneLow = this.factors[3]!;
    } else {
      // no trees yet: the products over the live tensors in their order (the others' factors are exactly 1)
      const lows = this.lows;
      const highs = this.highs;
      const live = this.live;
      noneHigh = 1;
      noneLow = 1;
      for (let k = 0; k < this.liveCount; k++) {
        const i = live[k]!;
        noneHigh *= 1 - lows[i]!;
        noneLow *= 1 - highs[i]!;
      }
    }
    this.boundBy(noneHigh, noneLow);
  }

  // the relative widening of the products for their rounding, as update() describes
  private widen(): number {
    return 4 * (this.point.n + 2) * 2 ** -53;
  }

  // low and high from the products Π(1 − low_i) (noneHigh) and Π(1 − high_i) (noneLow), as update() describes; the
  // tensors a sweep left out at an upper bound of at most DROPPED (their factors each at least 1 − DROPPED, so together
  // at least 1 − n·DROPPED) widen the upper bound by n·DROPPED more
  private boundBy(noneHigh: number, noneLow: number): void {
    const widen = this.widen();
    this.low = overflowLow(noneHigh, widen);
    if (this.dropped) {
      this.high = Math.min(1, 1 - Math.max(0, noneLow * (1 - widen - this.point.n * DROPPED) - 1e-300));
      return;
    }
    // every factor exactly 1: the product is exactly 1
    this.high = noneLow === 1 ? 0 : Math.min(1, 1 - Math.max(0, noneLow * (1 - widen) - 1e-300));
  }
}

/**
 * 2^k as a number: exactly while every digit is (up to 2^53; beyond it a double prints its shortest round-trip
 * digits, e.g. 72057594037927940 for 2^56, which is not 2^56), in three significant digits otherwise.
 */
function powerOfTwoValue(k: number): string {
  return k >= 0 && k <= 53 ? String(2 ** k) : plainNumber(2 ** k);
}

/** Where the simulated dynamic scale spends the second half of the horizon, in powers of two. */
function settledWords(dynamic: DynamicScaleResult): string {
  const low = dynamic.settledLowest;
  const high = dynamic.settledHighest;
  if (low !== high) return `it settles between ${scaleWords(low)} and ${scaleWords(high)}`;
  if (low === dynamic.settings.lowestScale) return `it falls to its lowest allowed scale, ${scaleWords(low)}, and stays there`;
  if (low === dynamic.settings.highestScale) return `it rises to its highest allowed scale, ${scaleWords(low)}, and stays there`;
  return `it settles at ${scaleWords(low)}`;
}

/**
 * The answer with its pick weighed (src/scale/pick.ts): the window's pick and margins moved to `pickLog2`, and the
 * sentences told again with what the weighing found.
 */
export function withWeighedPick(answer: LossScaleAnswer, pickLog2: number, weighing: PickWeighing): LossScaleAnswer {
  const w = answer.window;
  const window: ScaleWindow = { ...w, pickLog2, marginBelowOverflow: w.highestLog2! - pickLog2, marginAboveFlush: pickLog2 - w.lowestLog2! };
  return {
    ...answer,
    window,
    pick: 2 ** pickLog2,
    // 1 in the window is enough only when it is the pick or leaves no more findings than the pick
    needed: !(w.unscaledFits && (pickLog2 === 0 || unscaledAsGood(weighing) === true)),
    weighing,
    sentences: describe(window, answer.format, answer.options, answer.requested, weighing),
  };
}

// a count in words; `sayNone` adds "(none of a value too large)" where the overflow side is the point
function findingWords(f: ScaledFindings, sayNone = false): string {
  const total = findingsTotal(f);
  const s = total === 1 ? "" : "s";
  if (total === 0) return "no finding";
  const severities = f.atRisk === 0 || f.fails === 0 ? [] : [`${f.fails} failing, ${f.atRisk} at risk`];
  const overflow =
    f.overflowSide === 0 ? (sayNone ? "none of a value too large" : "") : f.overflowSide === total ? (total === 1 ? "of a value too large" : "all of a value too large") : `${f.overflowSide} of a value too large`;
  // a finding of the scaled loss kept in the activation format where the plan accumulates wider (src/scale/pick.ts)
  const conditional =
    f.conditional === 0 ? "" : `${f.conditional === total ? (total === 1 ? "" : "all ") : `${f.conditional} `}only if the loss is kept in the activation format`;
  const detail = [...severities, ...(overflow === "" ? [] : [overflow]), ...(conditional === "" ? [] : [conditional])].join("; ");
  const base = f.atRisk === 0 ? `${total} failing finding${s}` : f.fails === 0 ? `${total} finding${s} at risk` : `${total} findings`;
  return detail === "" ? base : `${base} (${detail})`;
}

// what the weighing found, as one sentence after the pick's
function weighingSentence(window: ScaleWindow, weighing: PickWeighing, options: WindowOptions, pow: (k: number) => string): string {
  const on = "on the gradients and the scaled loss (judged against the check's per-tensor thresholds)";
  if (weighing.centreLog2 === window.pickLog2) {
    const after = weighing.atPick.conditional > 0 ? " (a finding that holds only if the loss is kept in the activation format counts after every other)" : "";
    return `${pow(window.pickLog2!)} still leaves ${findingWords(weighing.atPick)} ${on}; no other scale in the window leaves fewer of a value too large, or as few and fewer in all${after}.`;
  }
  const closer = window.marginBelowOverflow! < options.marginBinades ? `; it sits closer to the overflow edge than the ${binades(options.marginBinades)} kept otherwise` : "";
  return `The window's centre rule alone gives ${pow(weighing.centreLog2)}, which would leave ${findingWords(weighing.atCentre)} ${on}; ${pow(window.pickLog2!)} leaves ${findingWords(weighing.atPick, weighing.atCentre.overflowSide > 0)}, the fewest failing among the window's scales, then the fewest of a value too large, then the fewest in all (a failing finding decides the verdict; an overflow costs the step; inside the window no gradient loses more than ${percent(options.flushTolerance)} of its squared norm to flushing)${closer}.`;
}

// which side of the window a given scale lies on, and what goes wrong there
function outsideWords(window: ScaleWindow, scale: number): string {
  const log2 = Math.log2(scale);
  if (window.highestLog2 !== null && log2 > window.highestLog2) {
    return `: ${binades(log2 - window.highestLog2)} above it, where ${window.upperEdgeSetBy ?? "the gradients"} overflow${window.upperEdgeSetBy === null ? "" : "s"} beyond the budget`;
  }
  if (window.lowestLog2 !== null && log2 < window.lowestLog2) {
    return `: ${binades(window.lowestLog2 - log2)} below it, where ${window.lowerEdgeSetBy ?? "the gradients"} flush${window.lowerEdgeSetBy === null ? "" : "es"} beyond the tolerance`;
  }
  return "";
}

function binades(n: number): string {
  return `${n} binade${n === 1 ? "" : "s"}`;
}

function describe(
  window: ScaleWindow,
  format: FormatName,
  options: WindowOptions,
  requested: LossScaleAnswer["requested"],
  weighing?: PickWeighing,
): string[] {
  const out: string[] = [];
  const after: string[] = [];
  const pow = (k: number) => `2^${k} = ${powerOfTwoValue(k)}`;
  if (window.empty) {
    if (window.gapBinades !== null) {
      out.push(
        `No static loss scale keeps ${format} gradients within the budget: ${window.upperEdgeSetBy} overflows above ${pow(window.highestLog2!)} while ${window.lowerEdgeSetBy} needs at least ${pow(window.lowestLog2!)}; they pull ${binades(window.gapBinades)} apart.`,
      );
    } else if (window.highestLog2 === null) {
      out.push(`Every searched scale overflows ${format} gradients beyond the budget; ${window.upperEdgeSetBy} overflows first.`);
    } else {
      out.push(`No searched scale keeps the flushed gradient energy of ${window.lowerEdgeSetBy} under ${options.flushTolerance} in ${format}.`);
    }
  } else if (window.unscaledFits) {
    const told = unscaledWindowSentences(window, format, options, weighing, pow);
    out.push(...told.first);
    after.push(...told.after);
  } else {
    out.push(useSentence(window, pow));
  }
  // the weighing is told when the centre left findings and either stands or gave way to fewer (a centre below 1 that
  // gave way to 1 as its equal is told with the window's first sentence)
  if (!window.empty && weighing !== undefined && findingsTotal(weighing.atCentre) > 0 && (weighing.centreLog2 === window.pickLog2 || fewerFindings(weighing.atPick, weighing.atCentre))) {
    out.push(weighingSentence(window, weighing, options, pow));
  }
  out.push(...after);
  if (requested) {
    // the window's edges use the whole-model budget and a per-gradient energy tolerance, looser than the check's
    // per-tensor thresholds: a scale inside it can still carry tensor findings, which the sentence must not deny
    out.push(
      `${requested.origin === "plan" ? "The spec's loss scale" : "The given loss scale"} ${scaleWords(requested.scale)} is ${requested.inside ? "inside" : "outside"} the window (where the whole model overflows in at most ${plainNumber(options.riskBudget)} of the steps and no gradient loses more than ${percent(options.flushTolerance)} of its squared norm to flushing)${requested.inside ? "; each tensor is still judged against its own thresholds below" : outsideWords(window, requested.scale)}.`,
    );
  }
  out.push("The scale is removed before the optimizer step and before gradient clipping, so their settings need no change (Micikevicius et al. 2018 §3.2).");
  return out;
}

function useSentence(window: ScaleWindow, pow: (k: number) => string): string {
  return `Use a static loss scale of ${pow(window.pickLog2!)}: the window runs from ${pow(window.lowestLog2!)} (set by ${window.lowerEdgeSetBy ?? "no tensor"} flushing) to ${pow(window.highestLog2!)} (set by ${window.upperEdgeSetBy ?? "no tensor"} overflowing); the pick sits ${binades(window.marginAboveFlush!)} above the flush edge and ${binades(window.marginBelowOverflow!)} below the overflow edge.`;
}

/**
 * The sentences of a window that holds 1 (no scaling): those that open the answer, and those told after the weighing's.
 * "need no loss scale" is said only when 1 is the pick; "would also train unscaled" when, judged against the check's
 * per-tensor thresholds, 1 leaves no more findings than another pick: the window's edges bound the whole model's
 * overflow and each gradient's flushed energy only, so 1 can lie inside it and still leave findings.
 */
function unscaledWindowSentences(
  window: ScaleWindow,
  format: FormatName,
  options: WindowOptions,
  weighing: PickWeighing | undefined,
  pow: (k: number) => string,
): { first: string[]; after: string[] } {
  const pick = window.pickLog2!;
  const on = "on the gradients and the scaled loss";
  const everywhere = window.lowestLog2 === options.lowestLog2 && window.highestLog2 === options.highestLog2;
  const span = everywhere
    ? `every scale searched (${pow(options.lowestLog2)} to ${pow(options.highestLog2)}) keeps overflow and flushing within the window's whole-model bounds`
    : `scales from ${pow(window.lowestLog2!)} to ${pow(window.highestLog2!)} all keep overflow and flushing within the window's whole-model bounds`;
  if (pick === 0) {
    const head = `${format} gradients need no loss scale: ${span}, and 1 (no scaling)`;
    if (weighing === undefined || weighing.centreLog2 === 0) return { first: [`${head}, the window's centre, is the pick: it leaves the most room on both sides.`], after: [] };
    if (fewerFindings(weighing.atPick, weighing.atCentre)) return { first: [`${head} is the pick.`], after: [] };
    // the centre lay below 1 and 1 leaves as few findings: a scale below 1 buys only room below the overflow edge
    return {
      first: [
        `${head} is the pick: it leaves as few findings ${on} as the window's centre ${pow(weighing.centreLog2)} (${findingWords(weighing.atCentre)}), and a scale below 1 buys only room below the overflow edge, where 1 keeps ${binades(window.marginBelowOverflow!)}.`,
      ],
      after: [],
    };
  }
  const asGood = unscaledAsGood(weighing);
  const centreKept = weighing === undefined || weighing.centreLog2 === pick;
  if (asGood === undefined) {
    // not judged against the per-tensor thresholds (an answer of the window alone)
    return { first: [`1 (no scaling) lies in the ${format} window: ${span}; ${pow(pick)}, the window's centre, leaves the most room on both sides.`], after: [] };
  }
  const unscaled = weighing!.unscaled!;
  if (asGood) {
    const tail =
      pick > 0
        ? centreKept
          ? `${pow(pick)}, the window's centre, leaves the most room on both sides`
          : `the pick is ${pow(pick)}`
        : `the pick ${pow(pick)} keeps ${binades(window.marginBelowOverflow!)} below the overflow edge, where 1 keeps only ${binades(window.highestLog2!)}`;
    const noMore = findingsTotal(unscaled) > 0 ? `, no more than ${pow(pick)}` : "";
    // the pick is not 1, so the answer is that pick: 1 is told as a choice that also serves, not as "no scale needed"
    return { first: [`${format} gradients would also train unscaled: ${span}, 1 among them, and 1 (no scaling) leaves ${findingWords(unscaled)} ${on}${noMore}; ${tail}, so it is the pick.`], after: [] };
  }
  return {
    first: [useSentence(window, pow)],
    after: [
      `1 (no scaling) lies in the window too, but would leave ${findingWords(unscaled)} ${on} (judged against the check's per-tensor thresholds, stricter than the window's whole-model bounds), where ${pow(pick)} leaves ${findingWords(weighing!.atPick)}.`,
    ],
  };
}

/** Remedies for an empty window, each with its effect computed, the working ones first and cheapest first. */
function rankRemedies(
  windowWithout: WindowsOf,
  // the tensors of `profiles`, in order (ids unique)
  gradients: readonly TensorPrediction[],
  window: ScaleWindow,
  options: WindowOptions,
  plan: PrecisionPlan,
  limits: RangeLimits,
  dynamic: DynamicScaleResult,
  profiles: readonly GradientProfiles[],
): ScaleRemedy[] {
  const remedies: ScaleRemedy[] = [];
  const gradientBytes = getFormat(plan.gradients).bytes;
  // 1. hold the tensors that set the edges in binary32, greedily, one edge setter at a time (at most 6); where one
  // tensor sets both edges the two lists can coincide: a held set is told once
  const told: ReadonlySet<string>[] = [];
  for (const edge of ["lower", "upper"] as const) {
    const held: string[] = [];
    let current = window;
    for (let i = 0; i < 6 && current.empty; i++) {
      const setter = edge === "lower" ? current.lowerEdgeSetBy : current.upperEdgeSetBy;
      if (!setter) break;
      held.push(setter);
      current = windowWithout(new Set(held));
    }
    if (held.length === 0) continue;
    const set = new Set(held);
    if (told.some((t) => t.size === set.size && held.every((id) => t.has(id)))) continue;
    told.push(set);
    // a few held ids: looked up among the gradients, not through a map of every id
    const extra = held.reduce((sum, id) => sum + (gradients.find((t) => t.id === id)?.start.elements ?? 0) * (4 - gradientBytes), 0);
    remedies.push({
      kind: "hold-in-binary32",
      works: !current.empty,
      tensors: held,
      window: current,
      extraBytes: extra,
      sentence: current.empty
        ? `Holding ${held.join(", ")} in binary32 does not open a window.`
        : // a plan sets one format per role: no spec key holds a chosen tensor apart, so the sentence says where it is done
          `Hold ${held.join(", ")} in binary32: the window becomes 2^${current.lowestLog2} to 2^${current.highestLog2}, pick 2^${current.pickLog2} (${formatBytes(extra)} more per step). No spec key states a format for one tensor (a plan sets one per role): this is done in the training code, and check keeps judging the plan as written.`,
    });
  }
  // 2. a dynamic scale, with its simulated skip rate
  const skipRate = dynamic.skippedSteps / dynamic.steps;
  remedies.push({
    kind: "dynamic-scale",
    works: skipRate < 0.01 && dynamic.stepsFlushingTooMuch < 0.01 * dynamic.steps,
    sentence: `A dynamic loss scale skips ${dynamic.skippedSteps} of ${dynamic.steps} simulated steps (${percent(skipRate)}) and spends ${dynamic.stepsFlushingTooMuch} steps flushing more than the tolerance; ${settledWords(dynamic)}.`,
  });
  // 3. bfloat16 gradients: the same tensors against bfloat16's range
  if (plan.gradients !== "bfloat16") {
    const bf = gradientLimits({ ...plan, gradients: "bfloat16" }, "bfloat16");
    const bfCurves = boundedLossScaleCurves(gradients, bf, profiles);
    // the same profiles against bfloat16's flush bound, a power of two apart from the gradient format's: the flushed
    // shares the first search learnt serve this one, so many binades apart (src/scale/window.ts FlushLike)
    const shift = flushShift(limits, bf, options);
    const w = shift === null ? lossScaleWindow(bfCurves, options) : lossScaleWindows(bfCurves, options, { windows: windowWithout, shift })();
    remedies.push({
      kind: "bfloat16-gradients",
      works: !w.empty,
      window: w,
      sentence: w.empty
        ? "bfloat16 gradients do not open a window either."
        : w.unscaledFits
          ? `Store gradients in bfloat16: no loss scale needed (scales from 2^${w.lowestLog2} to 2^${w.highestLog2} all fit), at ${getFormat("bfloat16").precision} significant bits instead of ${getFormat(plan.gradients).precision}.`
          : `Store gradients in bfloat16: the window becomes 2^${w.lowestLog2} to 2^${w.highestLog2}.`,
    });
  }
  const order = { "hold-in-binary32": 0, "dynamic-scale": 1, "bfloat16-gradients": 2 } as const;
  return remedies.sort((a, b) => Number(b.works) - Number(a.works) || (a.extraBytes ?? 0) - (b.extraBytes ?? 0) || order[a.kind] - order[b.kind]);
}

// k' − k where the flush threshold of `to` at k equals `from`'s at k' as a double, for every k of the search (both
// flush bounds a power of two apart, every product in the range of normal doubles); null otherwise
function flushShift(from: RangeLimits, to: RangeLimits, options: WindowOptions): number | null {
  const a = from.flushBound;
  const b = to.flushBound;
  if (!(a > 0 && b > 0 && Number.isFinite(a) && Number.isFinite(b))) return null;
  const shift = Math.round(Math.log2(a / b));
  if (b * 2 ** shift !== a) return null;
  // the thresholds b·2^−k, and the powers 2^−(k + shift) the other format's curves take, stay normal doubles: each
  // product is then exact, and both are one double
  const { lowestLog2: lo, highestLog2: hi } = options;
  const normal = b * 2 ** -hi >= 2 ** -1000 && b * 2 ** -lo <= 2 ** 1000 && Math.abs(lo + shift) <= 1000 && Math.abs(hi + shift) <= 1000;
  return normal ? shift : null;
}

function formatBytes(bytes: number): string {
  if (bytes >= 2 ** 30) return `${(bytes / 2 ** 30).toFixed(1)} GiB`;
  if (bytes >= 2 ** 20) return `${(bytes / 2 ** 20).toFixed(1)} MiB`;
  if (bytes >= 2 ** 10) return `${(bytes / 2 ** 10).toFixed(1)} KiB`;
  return `${bytes} B`;
}
