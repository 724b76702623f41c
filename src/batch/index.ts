/** Public exports of src/batch: inputs, variations and the worker pool behind `headroom batch`. */
export { globToRegExp, hasGlob } from "./glob.js";
export { expandInputs, isJsonSpec, pathsFromText, specFilesIn } from "./paths.js";
export type { BatchInput, ExpandOptions, PathHost } from "./paths.js";
export { parseKeyPath, parseVaryOption, schemaHasPath, variantsOf, varyText, VaryError, yamlScalarText } from "./vary.js";
export type { Variant, VariedText, VaryAxis, VaryValue } from "./vary.js";
export { defaultWorkers, runPool } from "./pool.js";
export type { PoolOptions, TaskOutcome } from "./pool.js";
export { evaluateTask, issuesError } from "./evaluate.js";
export type { EvaluateHooks, SpecTask, TaskResult } from "./evaluate.js";
export { planBatch, runBatch, DEFAULT_WORKER_URL } from "./run.js";
export type { RunBatchOptions } from "./run.js";
export { batchExitCode } from "./types.js";
export type { BatchRow, ErrorPosition, FormatLossScale, JudgedLossScale, LossScaleSummary, RiskMeasure, RowError, SpecSummary, SummaryVerdict, ValueScope, WorstSummary } from "./types.js";
export { batchCheck, nodePathHost } from "./files.js";
export type { BatchCheckOptions } from "./files.js";
