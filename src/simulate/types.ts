/**
 * Options and results of the float64 simulator: plain JSON-able data, keyed by the same tensor ids as the
 * magnitude engine's predictions (src/magnitude/types.ts, TensorPrediction.id).
 */
import type { FormatName } from "../formats/names.js";
import type { GraphIssue } from "../graph/index.js";
import type { PlanSlot, TensorRole } from "../magnitude/types.js";
import type { NetworkSpec, PrecisionPlan } from "../spec/types.js";

/** Factors by which sizes are divided before simulating (1 = unchanged). */
export interface ShrinkFactors {
  /** dense widths, conv channels, embedding width, attention heads, gated hidden width, input features */
  width: number;
  /** samples per step */
  batch: number;
  /** sequence positions of the input */
  positions: number;
  /** classes of a cross-entropy loss (the width of the layer that produces the class scores) */
  classes: number;
  /** height and width of an image input */
  image: number;
}

/** Options of simulate(). */
export interface SimulateOptions {
  /** seed of the first draw; draw i uses seed + i (default 1) */
  seed?: number;
  /** independent draws (initialisation and data), whose median is reported (default 1) */
  draws?: number;
  /** optimizer steps to run after the first measurement (default 0) */
  steps?: number;
  /** size reductions; any factor left out is 1 */
  shrink?: Partial<ShrinkFactors>;
  /** the plan to store tensors in: a name from the spec's plans, or the spec's `precision` when absent */
  plan?: string;
  /** static loss scale (default: the plan's, else what `defaultLossScale` answers, else 1) */
  lossScale?: number;
  /**
   * the loss scale to run at when neither `lossScale` nor the plan gives one, asked of the network as simulated (shrunk
   * when asked): the CLI passes one built on `check`, so the simulation runs at the scale the check judges that
   * network's gradients at. Without it, 1. Kept an option so that this module stays free of check and scale.
   */
  defaultLossScale?: DefaultLossScale;
  /** round stored tensors to the plan's formats (default true); false gives a pure binary64 reference run */
  round?: boolean;
  /** largest memory the simulation may need, in bytes (default 4 GiB); larger runs are refused with a suggestion */
  memoryLimit?: number;
  /** micro-batches run per step at most (accumulation steps × workers); the rest is rescaled (default 8) */
  microBatches?: number;
}

/**
 * Where a simulation's loss scale came from (the origins of check's applied loss scale): `option` the caller's
 * `lossScale`, `plan` the plan's, `recommended` a scale `defaultLossScale` recommended, `none` 1 (no scale given,
 * recommended or needed).
 */
export type SimulationLossScaleOrigin = "option" | "plan" | "recommended" | "none";

/** What a {@link DefaultLossScale} answers: the scale, and why in a clause (e.g. "recommended by check"). */
export interface DefaultLossScaleAnswer {
  value: number;
  origin: "recommended" | "none";
  reason: string;
}

/**
 * Asked for the loss scale when neither the options nor the plan give one: `simulated` is the network as it will run
 * (shrunk when `shrunk`), `plan` the plan it stores tensors in.
 */
export type DefaultLossScale = (simulated: NetworkSpec, context: { plan: PrecisionPlan; shrunk: boolean }) => DefaultLossScaleAnswer;

/** What storing a tensor in its planned format did, as fractions of its elements. */
export interface FormatCounts {
  format: FormatName;
  /** nonzero values that became zero */
  flushed: number;
  /** values whose stored result is subnormal */
  subnormal: number;
  /**
   * the rounding noise of the values stored as subnormals, Σ(stored − x)² over them divided by Σx² over the finite
   * values, in the tensor's own units (storage scales removed): what check's subnormal rule predicts (src/risk/subnormal-noise.ts)
   */
  subnormalNoise: number;
  /** finite values that became infinite or NaN */
  overflowed: number;
  /** finite values clamped to the largest finite value (with per-block scales: only in blocks whose scale E8M0 clamped) */
  saturated: number;
  /**
   * with per-block scale factors only: values the block conversion clipped to the largest finite value in a block whose
   * scale was not clamped (its maximum put past the largest value by the floor rule, by at most 2^(emax+1)/max; OCP MX
   * v1.0 §6, from memory). Part of the conversion, as rounding is: neither an overflow nor a saturation
   */
  clipped?: number;
  /** values that were already infinite or NaN before storing */
  nonFinite: number;
}

/** Measured statistics of one tensor in one draw (before it was rounded for storage). */
export interface TensorStats {
  /** elements counted (masked attention logits are not part of the tensor) */
  elements: number;
  /** share of elements exactly zero before storage */
  zeroFraction: number;
  /**
   * share of elements infinite or NaN before storage (in the binary64 run, after an overflow upstream): left out of
   * rms, max and quantiles, which are 0 when no finite nonzero element is left (outputs then say "none finite")
   */
  nonFiniteFraction: number;
  /** root mean square of the finite nonzero elements */
  rms: number;
  /** largest finite magnitude */
  max: number;
  /** quantiles of the finite nonzero magnitudes: 1%, 10%, 50%, 90%, 99% */
  quantiles: [number, number, number, number, number];
  counts: FormatCounts;
  /**
   * the loss only, when the plan accumulates in another format than its activations': the counts of the loss times the
   * loss scale held in the accumulate format, where check's loss-value rule judges it too (and can say "fails")
   */
  accumulateCounts?: FormatCounts;
}

/** One measured tensor: its place in the step and its statistics, per draw and as the median over draws. */
export interface MeasuredTensor {
  id: string;
  layer: string;
  role: TensorRole;
  slot: PlanSlot;
  shape: number[];
  /**
   * the loss only: its format counts are of the loss times this factor (the loss scale), the value check's loss-value
   * rule judges stored in the activation format (and in the accumulate format: `accumulateCounts`); its magnitudes
   * (rms, max, quantiles) are of the loss itself
   */
  countsScaledBy?: number;
  /** field-wise median over draws */
  median: TensorStats;
  /** one entry per draw, in seed order */
  draws: TensorStats[];
  /** after the optimizer steps (median over draws), when steps were run */
  after?: TensorStats;
}

/** One optimizer step of one draw. */
export interface StepRecord {
  step: number;
  loss: number;
  learningRate: number;
  /** true when a gradient was infinite or NaN after removing the loss scale, so the update was skipped */
  skipped: boolean;
  /** per weight: share of its elements whose nonzero update left the stored weight unchanged (swamping) */
  swamped: Record<string, number>;
  /** per weight: rms(update) / rms(weight) before the update; weights that started at zero (biases) are left out */
  updateRatio: Record<string, number>;
  /**
   * per weight: share of its update's elements that are infinite or NaN (Adam dividing by a second moment and an ε
   * both stored as 0, or an update past binary64's range), which turn the weight non-finite
   */
  nonFiniteUpdates: Record<string, number>;
  /**
   * Adam only, per weight: share of the second moments nonzero before storage that the optimizer states' format
   * flushed to zero (at step 1 the second moment is (1 − β2)·g², the value check's second-moment rule judges)
   */
  secondMomentsFlushed: Record<string, number>;
}

/** What was shrunk, and how the comparison treats it. */
export interface ShrinkReport {
  factors: ShrinkFactors;
  /** plain sentences, one per change */
  changes: string[];
  /** plain sentences, one per size that fell so far (to 1) that the shrunk network behaves unlike the full-size one */
  warnings: string[];
  /** true when any factor is above 1 */
  shrunk: boolean;
}

/** The simulator's result for one spec. */
export interface SimulationResult {
  specName: string;
  planName: string;
  formats: Record<PlanSlot, FormatName> & { accumulate: FormatName; masterWeights: FormatName | "none" };
  lossScale: number;
  /** where `lossScale` came from */
  lossScaleOrigin: SimulationLossScaleOrigin;
  /** why, in a clause, when `defaultLossScale` chose it */
  lossScaleReason?: string;
  seeds: number[];
  steps: number;
  /** micro-batches run per step, and how many the spec's accumulation steps × workers call for */
  microBatches: { run: number; wanted: number };
  rounded: boolean;
  shrink: ShrinkReport;
  /** the spec that was run (shrunk when asked) */
  simulatedSpec: NetworkSpec;
  memory: { estimateBytes: number; limitBytes: number };
  tensors: MeasuredTensor[];
  /** per draw, per step (empty when no steps were run) */
  history: StepRecord[][];
  /** Adam's ε as given and as the optimizer states' format holds it, the value the update divides by (Adam only) */
  epsilon?: { value: number; stored: number };
  /** the loss of the first step, per draw */
  initialLoss: number[];
  /** what the engine assumed, in plain sentences */
  assumptions: string[];
}

/** A spec too large to simulate within the memory limit: the message names the memory and a shrink that fits. */
export class SimulationTooLarge extends RangeError {
  readonly neededBytes: number;
  readonly limitBytes: number;
  /** a uniform shrink factor that would fit, or undefined when none up to 1024 does */
  readonly suggestedShrink: number | undefined;
  constructor(message: string, neededBytes: number, limitBytes: number, suggestedShrink: number | undefined) {
    super(message);
    this.name = "SimulationTooLarge";
    this.neededBytes = neededBytes;
    this.limitBytes = limitBytes;
    this.suggestedShrink = suggestedShrink;
  }
}

/**
 * A spec whose network does not build (as given, or after shrinking): `issues` carry each problem's spec path, so a
 * caller can position them in the file the way check does.
 */
export class SimulationSpecError extends RangeError {
  readonly issues: readonly GraphIssue[];
  /** the problems appeared only once the spec was shrunk */
  readonly shrunk: boolean;
  constructor(issues: readonly GraphIssue[], shrunk: boolean) {
    super(`the spec does not build a network${shrunk ? " after shrinking" : ""}: ${issues.map((i) => i.message).join("; ")}`);
    this.name = "SimulationSpecError";
    this.issues = issues;
    this.shrunk = shrunk;
  }
}
