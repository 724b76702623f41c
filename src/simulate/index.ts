/**
 * Public exports of src/simulate: the float64 simulator with planned storage rounding, and its comparison with
 * the magnitude engine's predictions.
 */
import { buildGraph, type Graph } from "../graph/index.js";
import type { Prediction } from "../magnitude/types.js";
import type { NetworkSpec } from "../spec/types.js";
import { compareWithPrediction, type Comparison, type Tolerance } from "./compare.js";
import { runSimulation } from "./engine.js";
import type { SimulateOptions, SimulationResult } from "./types.js";

export * from "./types.js";
export { runSimulation, learningRate, resolvePlan, DEFAULT_MEMORY_LIMIT, DEFAULT_MICRO_BATCHES } from "./engine.js";
export { compareWithPrediction, zeroAfterStorage, predictedFlushedFraction, predictedOverflowFraction, STANDING_TOLERANCE } from "./compare.js";
export type { Comparison, ComparisonRow, Tolerance } from "./compare.js";
export { shrinkSpec, shrinkFactors, estimateMemory, suggestShrink, NO_SHRINK } from "./shrink.js";
export { measureTensor, medianStats } from "./stats.js";
export { gemm, matmul, matmulTransposeA, matmulTransposeB, type RoundFunction } from "../numeric/matmul.js";

/** A prediction function with the magnitude engine's signature (headroom's `predict`). */
export type PredictFunction = (graph: Graph, spec: NetworkSpec, options: { lossScale: number }) => Prediction;

/** Options of simulate(): the simulation's, plus what to compare it with. */
export interface SimulateAndCompareOptions extends SimulateOptions {
  /** the magnitude engine, to put predictions beside the measurements: pass headroom's `predict` */
  predict?: PredictFunction;
  tolerance?: Tolerance;
}

/** A simulation, and its comparison with the prediction when a predict function was given. */
export interface SimulationReport {
  result: SimulationResult;
  comparison?: Comparison;
}

/**
 * Run the described network forward and backward on random data with every stored tensor rounded to its
 * planned format, measure every tensor, and (given `predict`) put the analytic prediction beside each
 * measurement. When the spec was shrunk, predictions are made for the shrunk network and the full-size
 * prediction is attached for reference. Throws RangeError for bad options and SimulationTooLarge (a RangeError)
 * when the run would not fit the memory limit.
 * @example simulate(spec, { draws: 3, predict }).comparison?.disagreements
 */
export function simulate(spec: NetworkSpec, options: SimulateAndCompareOptions = {}): SimulationReport {
  const result = runSimulation(spec, options);
  if (options.predict === undefined) return { result };
  const simulated = buildGraph(result.simulatedSpec);
  if (!simulated.ok) return { result };
  const prediction = options.predict(simulated.graph, result.simulatedSpec, { lossScale: result.lossScale });
  let fullSize: Prediction | undefined;
  if (result.shrink.shrunk) {
    const full = buildGraph(spec);
    if (full.ok) fullSize = options.predict(full.graph, spec, { lossScale: result.lossScale });
  }
  const compareOptions: { tolerance?: Tolerance; fullSize?: Prediction } = {};
  if (options.tolerance !== undefined) compareOptions.tolerance = options.tolerance;
  if (fullSize !== undefined) compareOptions.fullSize = fullSize;
  return { result, comparison: compareWithPrediction(result, prediction, compareOptions) };
}
