/**
 * Measured against predicted: pairs each simulated tensor with the magnitude engine's prediction of the same id
 * and states the difference in binades (log2 of measured over predicted rms) and in the fraction flushed when
 * stored in the planned format.
 */
import { getFormat, type Format } from "../formats/index.js";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../magnitude/types.js";
import { erf, normalCdf } from "../ops/activation/moments.js";
import { hasFiniteMagnitudes } from "./stats.js";
import { mixtureShareBelow } from "../numeric/derivative-mixture.js";
import { fieldMixture } from "../numeric/gated-mixture.js";
import type { MeasuredTensor, SimulationResult } from "./types.js";
import type { PrecisionPlan } from "../spec/types.js";

/**
 * Share of a tensor's elements that are zero once stored: exact zeros plus flushed values. The flushed share is
 * compared through it, because a value that an earlier storage already flushed arrives as an exact zero, and
 * because structural zeros the model does not expect (a unit off for the whole batch) show up there too.
 */
export function zeroAfterStorage(stats: { zeroFraction: number; counts: { flushed: number } }): number {
  return stats.zeroFraction + stats.counts.flushed;
}

/** A row's distance in binades for ordering disagreements; a row with no finite measurement comes first. */
function distance(r: ComparisonRow): number {
  return Number.isNaN(r.differenceBinades) ? Infinity : Math.abs(r.differenceBinades);
}

/** How far apart prediction and measurement may be before a row counts as a disagreement. */
export interface Tolerance {
  /** |log2(measured rms / predicted rms)| */
  binades: number;
  /** |measured − predicted| share of elements zero after storage (exact zeros plus flushed values) */
  flushed: number;
  /**
   * shares of the nonzero elements flushed at which check's verdict on a tensor changes: a row also disagrees when the
   * measured and predicted shares lie on different sides of one of them and differ by more than a factor of 2 (the
   * verdict would differ, however small the share of all elements)
   */
  flushedLevels?: readonly number[];
}

/**
 * The standing tolerance: half a binade (a factor of about 1.41) and 0.05 of the elements flushed, and check's
 * flushed-share thresholds (1% at risk, 10% fails: DEFAULT_THRESHOLDS in src/risk/catalogue.ts, which simulate does not
 * import; test/simulate/compare-levels.test.ts holds them equal).
 */
export const STANDING_TOLERANCE: Tolerance = { binades: 0.5, flushed: 0.05, flushedLevels: [0.01, 0.1] };

/** Whether a measured and a predicted share of nonzero elements flushed fall on two sides of a verdict level, a factor of 2 apart. */
export function crossesFlushedLevel(measured: number, predicted: number, levels: readonly number[] = []): boolean {
  if (!(measured >= 0) || !(predicted >= 0)) return false;
  const [low, high] = measured < predicted ? [measured, predicted] : [predicted, measured];
  // a factor of 2 (our own margin, common practice for such a rule): shares closer than that may straddle a level
  // by the noise of one measured batch alone
  if (!(high > 2 * low)) return false;
  return levels.some((level) => low <= level && high > level);
}

/** One tensor, measured and predicted side by side. */
export interface ComparisonRow {
  id: string;
  layer: string;
  role: MeasuredTensor["role"];
  format: string;
  measured: MeasuredTensor;
  /** predicted rms of the nonzero elements (at the median draw), for the simulated network */
  predictedRms: number;
  /** the predicted draw-to-draw spread of the scale (standard deviation of log2 rms) */
  predictedLog2Spread: number;
  /** the prediction's profile at initialisation */
  predictedProfile: MagnitudeProfile;
  /** log2(measured rms / predicted rms): positive when the measurement is larger; NaN when no finite value was measured */
  differenceBinades: number;
  predictedZeroFraction: number;
  /** predicted share of elements flushed to zero in the format (NaN for 8-bit formats stored with scale factors) */
  predictedFlushed: number;
  /** measured share of the nonzero elements flushed (exact zeros before storage set apart), as check's verdict levels read it */
  measuredNonzeroFlushed: number;
  /** predicted share of the nonzero elements flushed (NaN where `predictedFlushed` is) */
  predictedNonzeroFlushed: number;
  /** predicted share of elements above the overflow threshold */
  predictedOverflow: number;
  /** the prediction for the full-size network, when the run was shrunk */
  fullSizeRms?: number;
  /** log2(full-size prediction / prediction for the shrunk network) */
  sizeEffectBinades?: number;
  /**
   * a weight gradient summed over fewer micro-batches than the spec's: the prediction for all of them (its rms of the
   * nonzero elements and share of exact zeros), which the row's predicted values take to the micro-batches run
   */
  allMicroBatches?: { rms: number; zeroFraction: number; run: number; wanted: number };
  /** why the row is not compared (it then never disagrees): no finite element was measured, after an overflow upstream */
  notCompared?: string;
  /** whether the row is outside the tolerance */
  disagrees: boolean;
}

/** The comparison of one simulation with one prediction. */
export interface Comparison {
  tolerance: Tolerance;
  rows: ComparisonRow[];
  /** the rows outside the tolerance, largest rms difference first */
  disagreements: ComparisonRow[];
  /** the rows with nothing to compare (`notCompared` says why), in the order measured */
  notCompared: ComparisonRow[];
  /** measured tensors the prediction does not list */
  measuredOnly: string[];
  /** predicted tensors the simulation does not measure */
  predictedOnly: string[];
}

/** The plan the run stored its tensors in. */
export function simulatedPlan(result: SimulationResult): PrecisionPlan | undefined {
  return result.simulatedSpec.plans.concat(result.simulatedSpec.precision).find((p) => p.name === result.planName);
}

/**
 * Smallest magnitude that survives storage: half the smallest subnormal, or the smallest normal when subnormals flush
 * (the plan says so, or the format is bfloat16, which check and the simulation take as flushing: common practice).
 */
export function flushThreshold(format: Format, flushSubnormals: boolean): number {
  return flushSubnormals || format.subnormalsOftenFlushed ? format.minNormal : format.flushBound;
}

/**
 * P(|x| ≤ t) for one nonzero element of a profile, by its element shape: gaussian and half-gaussian
 * erf(t/(rms·√2)); uniform on [−rms·√3, rms·√3]; constant magnitude rms; log-normal Φ((log2 t − m)/s) with
 * m = log2(rms) − s²·ln 2 so that E[x²] = rms²; "bounded" taken as Gaussian below its bound (an approximation).
 */
export function fractionBelow(profile: MagnitudeProfile, t: number): number {
  const rms = profile.rms;
  if (!(rms > 0)) return 1;
  if (!(t > 0)) return 0;
  switch (profile.shape) {
    case "gaussian":
    case "half-gaussian":
    case "bounded":
      return erf(t / (rms * Math.SQRT2));
    case "uniform":
      return Math.min(t / (rms * Math.sqrt(3)), 1);
    case "constant":
      return rms <= t ? 1 : 0;
    case "log-normal": {
      const s = profile.elementLog2Spread ?? 0;
      if (!(s > 0)) return rms <= t ? 1 : 0;
      const m = Math.log2(rms) - s * s * Math.LN2;
      return normalCdf((Math.log2(t) - m) / s);
    }
    case "gaussian-mixture": {
      const mixture = profile.mixture;
      if (mixture === undefined) return erf(t / (rms * Math.SQRT2));
      return mixtureShareBelow(fieldMixture(mixture), t / rms);
    }
  }
}

/** Predicted share of all elements flushed to zero when stored in the format (exact zeros do not count). */
export function predictedFlushedFraction(profile: MagnitudeProfile, format: Format, flushSubnormals = false): number {
  return (1 - profile.zeroFraction) * fractionBelow(profile, flushThreshold(format, flushSubnormals));
}

/** Predicted share of all elements at or above the overflow threshold of the format. */
export function predictedOverflowFraction(profile: MagnitudeProfile, format: Format): number {
  if (!Number.isFinite(format.overflowThreshold)) return 0;
  if (profile.bound !== undefined && profile.bound < format.overflowThreshold) return 0;
  return (1 - profile.zeroFraction) * (1 - fractionBelow(profile, format.overflowThreshold));
}

/** A share of all elements as a share of the nonzero ones (exact zeros before storage set apart). */
function nonzeroShare(share: number, zeroFraction: number): number {
  return zeroFraction < 1 ? share / (1 - zeroFraction) : 0;
}

/** Why a tensor with no finite element measured is not compared: its values are an overflow's, not the network's. */
export const NONE_FINITE = "no finite element in the run (after an overflow upstream, which is the finding)";

/**
 * The prediction for a weight gradient summed over all `wanted` micro-batches, taken to the `run` ones a simulation
 * executes (it scales their sum to the full sum's size: src/simulate/engine.ts missingScale). An element is zero after
 * the sum only when every micro-batch left it zero, the micro-batches taken as independent as the prediction takes
 * them (src/magnitude/predict.ts weightGradient: z_all = z_one^wanted), so z_run = z_all^(run/wanted); an embedding's
 * untouched rows, e^(−lookups/rows) per micro-batch, follow it exactly. The run's scaling keeps the sum's squared
 * norm, (1 − z)·rms² over the nonzero elements, so their rms is rms_all·√((1 − z_all)/(1 − z_run)).
 */
export function forMicroBatchesRun(profile: MagnitudeProfile, run: number, wanted: number): MagnitudeProfile {
  const z = profile.zeroFraction;
  if (!(run < wanted) || !(z > 0 && z < 1)) return profile;
  const zeroFraction = z ** (run / wanted);
  return { ...profile, zeroFraction, rms: profile.rms * Math.sqrt((1 - z) / (1 - zeroFraction)) };
}

/**
 * Pair a simulation's tensors with a prediction for the simulated network (and, optionally, one for the
 * full-size network) and find where they disagree.
 */
export function compareWithPrediction(
  result: SimulationResult,
  prediction: Prediction,
  options: { tolerance?: Tolerance; fullSize?: Prediction } = {},
): Comparison {
  const tolerance = options.tolerance ?? STANDING_TOLERANCE;
  const predicted = new Map<string, TensorPrediction>(prediction.tensors.map((t) => [t.id, t]));
  const full = new Map<string, TensorPrediction>((options.fullSize?.tensors ?? []).map((t) => [t.id, t]));
  const plan = simulatedPlan(result);
  const flushSubnormals = plan?.flushSubnormals ?? false;
  const scaled8 = plan !== undefined && plan.scaling !== "none";
  const rows: ComparisonRow[] = [];
  const measuredOnly: string[] = [];
  for (const measured of result.tensors) {
    const p = predicted.get(measured.id);
    if (p === undefined) {
      measuredOnly.push(measured.id);
      continue;
    }
    const format = getFormat(measured.median.counts.format);
    const m = measured.median;
    // a weight gradient is measured on the sum of the micro-batches run: predicted for those
    const { run, wanted } = result.microBatches;
    const start = measured.role === "weight-gradient" ? forMicroBatchesRun(p.start, run, wanted) : p.start;
    // no finite magnitude measured (all overflowed upstream): nothing to set against the prediction, NaN
    const finite = hasFiniteMagnitudes(m);
    const differenceBinades = !finite ? NaN : m.rms > 0 && start.rms > 0 ? Math.log2(m.rms / start.rms) : m.rms === start.rms ? 0 : m.rms > 0 ? Infinity : -Infinity;
    // 8-bit formats with scale factors: the prediction carries no scale, so flushed fractions are not compared
    const predictedFlushed = scaled8 && format.bits === 8 ? NaN : predictedFlushedFraction(start, format, flushSubnormals);
    const measuredNonzeroFlushed = nonzeroShare(m.counts.flushed, m.zeroFraction);
    const predictedNonzeroFlushed = nonzeroShare(predictedFlushed, start.zeroFraction);
    const row: ComparisonRow = {
      id: measured.id,
      layer: measured.layer,
      role: measured.role,
      format: format.name,
      measured,
      predictedRms: start.rms,
      predictedLog2Spread: start.log2Spread,
      predictedProfile: start,
      differenceBinades,
      predictedZeroFraction: start.zeroFraction,
      predictedFlushed,
      measuredNonzeroFlushed,
      predictedNonzeroFlushed,
      predictedOverflow: predictedOverflowFraction(start, format),
      disagrees:
        finite &&
        (!(Math.abs(differenceBinades) <= tolerance.binades) ||
          (!Number.isNaN(predictedFlushed) && !(Math.abs(zeroAfterStorage(m) - (start.zeroFraction + predictedFlushed)) <= tolerance.flushed)) ||
          (!Number.isNaN(predictedFlushed) && crossesFlushedLevel(measuredNonzeroFlushed, predictedNonzeroFlushed, tolerance.flushedLevels))),
    };
    if (!finite) row.notCompared = NONE_FINITE;
    if (start !== p.start) row.allMicroBatches = { rms: p.start.rms, zeroFraction: p.start.zeroFraction, run, wanted };
    const f = full.get(measured.id);
    if (f !== undefined && result.shrink.shrunk) {
      row.fullSizeRms = f.start.rms;
      if (f.start.rms > 0 && p.start.rms > 0) row.sizeEffectBinades = Math.log2(f.start.rms / p.start.rms);
    }
    rows.push(row);
  }
  const measuredIds = new Set(result.tensors.map((t) => t.id));
  const predictedOnly = prediction.tensors.filter((t) => !measuredIds.has(t.id)).map((t) => t.id);
  const disagreements = rows.filter((r) => r.disagrees).sort((a, b) => distance(b) - distance(a));
  const notCompared = rows.filter((r) => r.notCompared !== undefined);
  return { tolerance, rows, disagreements, notCompared, measuredOnly, predictedOnly };
}
