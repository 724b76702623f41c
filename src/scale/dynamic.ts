/**
 * Dynamic loss scaling, simulated over a training horizon.
 *
 * The scheme is common practice (Micikevicius et al. 2018 describe only the static scale and leave a dynamic one
 * to future work): start high; on a step whose scaled gradients overflow, skip the update and cut the scale;
 * after a run of clean steps, raise it. SCIENCE.md §3.2 derives its equilibrium: the scale settles one raise
 * factor below the overflow edge and about one step per run of clean steps is skipped.
 */

import { createRandom } from "../numeric/index.js";

/** The knobs of a dynamic loss scale (our own names). */
export interface DynamicScaleSettings {
  /** the scale at the first step */
  startingScale: number;
  /** consecutive steps without overflow before the scale is raised */
  cleanStepsBeforeRaise: number;
  /** the scale is multiplied by this after a run of clean steps */
  raiseFactor: number;
  /** the scale is divided by this after a step that overflows */
  cutFactor: number;
  /** the scale never goes below this */
  lowestScale: number;
  /** the scale never goes above this */
  highestScale: number;
}

/** Defaults: common practice (SCIENCE.md §3.2: factor 2, runs of about 1000–2000 clean steps, start 2^15–2^24). */
export const DEFAULT_DYNAMIC_SCALE: DynamicScaleSettings = {
  startingScale: 2 ** 16,
  cleanStepsBeforeRaise: 2000,
  raiseFactor: 2,
  cutFactor: 2,
  lowestScale: 1,
  highestScale: 2 ** 24,
};

/**
 * What the simulation needs to know of the network at a given scale and point of the horizon.
 * `progress` runs from 0 (first step) to 1 (last step).
 */
export interface DynamicScaleModel {
  /** probability that at least one scaled gradient overflows in one step */
  overflowProbability(scale: number, progress: number): number;
  /** whether the share of gradient energy flushed to zero exceeds the tolerance at this scale */
  flushesTooMuch(scale: number, progress: number): boolean;
  /**
   * Optional: bounds on overflowProbability(scale, progress) that can be narrowed until exact. The simulation then
   * narrows them only as far as each step's random draw needs (a draw far from the probability is decided by
   * bounds): the same steps overflow as with the exact value, for a fraction of the work.
   */
  overflowBounds?(scale: number, progress: number): OverflowBounds;
}

/** Bounds on an overflow probability, narrowed on request (see {@link DynamicScaleModel.overflowBounds}). */
export interface OverflowBounds {
  /** the probability lies in [low, high] */
  readonly low: number;
  readonly high: number;
  /** true once low and high are both the probability itself, exactly as overflowProbability gives it */
  readonly exact: boolean;
  /**
   * narrow the bounds (some work each call; exact after finitely many calls); given the `goal` the caller compares the
   * probability with, a call may stop early once the bounds lie wholly above or below it
   */
  narrow(goal?: number): void;
}

/** One point of the scale's trajectory (a change of scale, plus the first and last step). */
export interface ScalePoint {
  step: number;
  scale: number;
}

export interface DynamicScaleResult {
  settings: DynamicScaleSettings;
  steps: number;
  seed: number;
  /** steps whose update was skipped because the scaled gradients overflowed */
  skippedSteps: number;
  /** the first skipped step, or -1 */
  firstSkippedStep: number;
  /** steps taken while the flushed gradient energy was above tolerance */
  stepsFlushingTooMuch: number;
  /** the scale's trajectory, thinned to at most `maxPoints` points for charts */
  trajectory: ScalePoint[];
  finalScale: number;
  /** smallest and largest scale over the second half of the horizon (the settled band) */
  settledLowest: number;
  settledHighest: number;
  /** skipped steps in the second half, per step of the second half */
  settledSkipRate: number;
}

export interface DynamicScaleOptions {
  steps: number;
  seed: number;
  settings?: Partial<DynamicScaleSettings>;
  /** a uniform random source on [0, 1); seeded by the caller (default: a generator seeded with `seed`) */
  random?: () => number;
  /** the trajectory is thinned to this many points (default 400) */
  maxPoints?: number;
  /** the model is evaluated on this many points of the horizon and held constant between them (default 64) */
  horizonPoints?: number;
}

/**
 * Run dynamic loss scaling step by step with seeded random overflow events.
 * @example simulateDynamicScale(model, { steps: 10000, seed: 1 }).skippedSteps // => e.g. 6
 */
export function simulateDynamicScale(model: DynamicScaleModel, options: DynamicScaleOptions): DynamicScaleResult {
  const settings = { ...DEFAULT_DYNAMIC_SCALE, ...options.settings };
  validateSettings(settings);
  const steps = options.steps;
  if (!Number.isInteger(steps) || steps < 1) throw new RangeError(`steps must be a positive integer. Value: ${steps}`);
  const random = options.random ?? (() => { const source = createRandom(options.seed); return () => source.next(); })();
  const horizonPoints = Math.max(1, Math.min(options.horizonPoints ?? 64, steps));
  const maxPoints = Math.max(2, options.maxPoints ?? 400);

  // The model is costly (it integrates over tensors); scales repeat, so evaluate each (scale, horizon point) once,
  // and each part only when a step needs it (whether it flushes too much only matters on a step that does not overflow)
  const cache: Map<number, Evaluation>[] = Array.from({ length: horizonPoints }, () => new Map());
  const evaluate = (scale: number, step: number): Evaluation => {
    const point = Math.min(horizonPoints - 1, Math.floor((step / steps) * horizonPoints));
    const atPoint = cache[point]!;
    let hit = atPoint.get(scale);
    if (!hit) {
      hit = new Evaluation(model, scale, horizonPoints === 1 ? 0 : point / (horizonPoints - 1));
      atPoint.set(scale, hit);
    }
    return hit;
  };

  let scale = clamp(settings.startingScale, settings.lowestScale, settings.highestScale);
  let clean = 0;
  let skipped = 0;
  let firstSkipped = -1;
  let flushing = 0;
  const half = Math.floor(steps / 2);
  let settledLowest = Infinity;
  let settledHighest = 0;
  let settledSkips = 0;
  const changes: ScalePoint[] = [{ step: 0, scale }];

  for (let step = 0; step < steps; step++) {
    const state = evaluate(scale, step);
    if (step >= half) {
      if (scale < settledLowest) settledLowest = scale;
      if (scale > settledHighest) settledHighest = scale;
    }
    const overflowed = state.overflows(random);
    let next = scale;
    if (overflowed) {
      skipped++;
      if (firstSkipped < 0) firstSkipped = step;
      if (step >= half) settledSkips++;
      clean = 0;
      next = Math.max(settings.lowestScale, scale / settings.cutFactor);
    } else {
      if (state.flushes()) flushing++;
      clean++;
      if (clean >= settings.cleanStepsBeforeRaise) {
        clean = 0;
        next = Math.min(settings.highestScale, scale * settings.raiseFactor);
      }
    }
    if (next !== scale) {
      scale = next;
      changes.push({ step: step + 1, scale });
    }
  }
  if (changes[changes.length - 1]!.step !== steps) changes.push({ step: steps, scale });

  return {
    settings,
    steps,
    seed: options.seed,
    skippedSteps: skipped,
    firstSkippedStep: firstSkipped,
    stepsFlushingTooMuch: flushing,
    trajectory: thin(changes, maxPoints),
    finalScale: scale,
    settledLowest,
    settledHighest,
    settledSkipRate: settledSkips / (steps - half),
  };
}

// One (scale, horizon point) of the model, its parts computed on first use.
class Evaluation {
  private overflow: number | undefined;
  private bounds: OverflowBounds | undefined;
  private flushing: boolean | undefined;
  constructor(
    private readonly model: DynamicScaleModel,
    private readonly scale: number,
    private readonly progress: number,
  ) {
    if (model.overflowBounds) this.bounds = model.overflowBounds(scale, progress);
    else this.overflow = model.overflowProbability(scale, progress);
  }

  // Whether this step overflows: certainly at probability 1, never at 0, else when a uniform draw falls below the
  // probability (one draw exactly when the probability lies strictly between 0 and 1). With bounds, each question
  // is answered as soon as the bounds decide it, and by the exact value otherwise: the same answers, the same draws.
  // (Each question is its own loop, not a closure per question: this runs once per step.)
  overflows(random: () => number): boolean {
    const b = this.bounds;
    if (b === undefined) {
      const p = this.overflow as number;
      return p >= 1 || (p > 0 && random() < p);
    }
    // p ≥ 1?
    for (;;) {
      if (b.exact) {
        if (b.low >= 1) return true;
        break;
      }
      if (b.low >= 1) return true;
      if (b.high < 1) break;
      b.narrow(1);
    }
    // p > 0?
    for (;;) {
      if (b.exact) {
        if (!(b.low > 0)) return false;
        break;
      }
      if (b.low > 0) break;
      if (b.high <= 0) return false;
      b.narrow(0);
    }
    const r = random();
    for (;;) {
      if (b.exact) return r < b.low;
      if (r < b.low) return true;
      if (r >= b.high) return false;
      b.narrow(r);
    }
  }

  flushes(): boolean {
    if (this.flushing === undefined) this.flushing = this.model.flushesTooMuch(this.scale, this.progress);
    return this.flushing;
  }
}

function validateSettings(s: DynamicScaleSettings): void {
  const positive = (name: keyof DynamicScaleSettings) => {
    if (!(Number.isFinite(s[name]) && s[name] > 0)) throw new RangeError(`${name} must be a positive number. Value: ${s[name]}`);
  };
  positive("startingScale");
  positive("lowestScale");
  positive("highestScale");
  if (!(s.raiseFactor > 1)) throw new RangeError(`raiseFactor must be above 1. Value: ${s.raiseFactor}`);
  if (!(s.cutFactor > 1)) throw new RangeError(`cutFactor must be above 1. Value: ${s.cutFactor}`);
  if (!(Number.isInteger(s.cleanStepsBeforeRaise) && s.cleanStepsBeforeRaise >= 1)) {
    throw new RangeError(`cleanStepsBeforeRaise must be a positive integer. Value: ${s.cleanStepsBeforeRaise}`);
  }
  if (s.lowestScale > s.highestScale) throw new RangeError(`lowestScale must not exceed highestScale`);
}

function clamp(x: number, lo: number, hi: number): number {
  return Math.min(hi, Math.max(lo, x));
}

/** Keep the first and last points and an even selection between them. */
function thin(points: ScalePoint[], maxPoints: number): ScalePoint[] {
  if (points.length <= maxPoints) return points;
  const out: ScalePoint[] = [];
  const stride = (points.length - 1) / (maxPoints - 1);
  for (let i = 0; i < maxPoints; i++) out.push(points[Math.round(i * stride)]!);
  return out;
}
