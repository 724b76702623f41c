/** Public exports of src/measure: tensor-file readers, streaming statistics, cast judgements. */
export * from "./types.js";
export * from "./classes.js";
export { MAX_HEADER_BYTES, parseSafetensorsHeader, parseSafetensorsPrefix } from "./safetensors.js";
export { NPY_MAGIC, parseNpyHeader, parseNpyPrefix } from "./npy.js";
export { openTensorFile, streamTensors, CHUNK_ELEMENTS, type OpenTensorFile, type TensorSink, type ProgressCallback } from "./read.js";
export { bucketPlan, TensorAccumulator, type BucketPlan, type CastCounts, type TensorTally } from "./accumulate.js";
export { ChannelAccumulator, type ChannelAxis } from "./channels.js";
export * from "./scan.js";
export { expandPaths, isPattern } from "./paths.js";
export { castTarget, DEFAULT_SCAN_TARGETS, type CastTargetOptions } from "./cast.js";
export {
  applyMeasurements,
  calibrateGraph,
  measuredProfile,
  readWeightFiles,
  recordedProfile,
  weightMismatchProblems,
  weightTensorId,
  type MatchedSizes,
  type MatchRule,
  type MeasurementReport,
  type RejectedMatch,
  type UnusedStatistic,
  type WeightCalibration,
  type WeightFileData,
  type WeightMatch,
} from "./calibrate.js";
export {
  parseCsv,
  parseRecordedStatistics,
  STATISTIC_ROLES,
  type RecordedStatistic,
  type StatisticsIssue,
  type StatisticsResult,
} from "./statistics.js";
export { loadMeasurements, MAX_STATISTICS_BYTES, type Measurements } from "./measurements.js";
