/**
 * What the HTML report shows, as plain data. A check result is turned into this model by
 * `reportModel` (report-from-check.ts); the HTML renderer reads nothing else, so it can be tested
 * with any model, including names no spec validator would let through.
 */
import type { LossScaleSummary, RiskMeasure, SummaryVerdict } from "../batch/types.js";

/** The range of one planned format, as exponents of two. */
export interface ReportFormatRange {
  format: string;
  /** log2 of the largest finite value */
  maxLog2: number;
  /** the largest finite value itself (below 2^ceil(maxLog2): binary16's is 65504, not 2^16) */
  largest: number;
  /** log2 of the smallest normal value */
  minNormalLog2: number;
  /** log2 of the smallest nonzero value kept: the smallest subnormal, or the smallest normal when subnormals flush */
  smallestLog2: number;
  /** the plan entries stored in this format, e.g. ["activations", "gradients"] */
  roles: string[];
}

/** One tensor's predicted magnitudes as a band on a log2 axis. */
export interface ReportTensorBand {
  id: string;
  layer: string;
  /** position of the layer in the forward order */
  layerIndex: number;
  /** the tensor role in words, e.g. "activation gradient" */
  role: string;
  /** the pass the tensor belongs to in the chart */
  pass: "forward" | "backward";
  /** the format it is stored in under the plan */
  format: string;
  /** log2 of a low quantile of the nonzero magnitudes (where footroom is measured) */
  lowLog2: number;
  /** log2 of the rms */
  rmsLog2: number;
  /** log2 of the predicted max (the level the largest element passes once in a while) */
  highLog2: number;
  verdict: SummaryVerdict;
  /** the worst finding about it, one sentence; empty when it fits */
  note: string;
  /**
   * the per-tensor scale factor's exponent an 8-bit conversion with scale factors applies (at the start of training),
   * present when it is not 0: the band is drawn after it, as the format receives the tensor
   */
  scaleLog2?: number;
}

/** One factor of the ledger. */
export interface ReportLedgerStep {
  layer: string;
  rule: string;
  log2Factor: number;
  source: string;
}

/** The ledger of one tensor: the per-layer factors whose product is its scale. */
export interface ReportLedger {
  /** the tensor the ledger explains */
  subject: string;
  /** log2 of the tensor's rms at the start of training, which the factors add up to (with the seed) */
  rmsLog2: number;
  /** log2 of its rms at the end of the horizon (where a finding "at the end of the horizon" is judged) */
  endRmsLog2: number;
  /** log2 of the loss scale the check multiplies the tensor by before judging it (0: none, or a forward tensor) */
  scaleLog2: number;
  steps: ReportLedgerStep[];
}

/** One finding, for the table of findings. */
export interface ReportFinding {
  subject: string;
  format: string;
  verdict: Exclude<SummaryVerdict, "fits">;
  /** short words for the kind, e.g. "overflow" */
  label: string;
  value: number;
  measure: RiskMeasure;
  sentence: string;
}

/**
 * The loss-scale section: the summary (worded by the shared rule of report/loss-scale.ts; a "not needed" summary
 * carries its reason) plus the answer's sentences, when the check has them.
 */
export interface ReportLossScale {
  summary: LossScaleSummary;
  /** one sentence per bound of the window, e.g. why scales above it overflow */
  notes: string[];
  /** the gradient format the section is about; present when the report shows it by name (several, or not the plan's) */
  format?: string;
}

/** Everything the HTML report shows. */
export interface ReportModel {
  /** the spec's name */
  title: string;
  description: string;
  /** the spec file, as given */
  source: string;
  /** the evaluated precision plan's name */
  plan: string;
  /** its conversion settings that move numbers, in words (8-bit scale factors and overflow, flushed subnormals); absent: none */
  planSettings?: string;
  verdict: SummaryVerdict;
  /** the top reasons for the verdict, one sentence each */
  reasons: string[];
  /** the verdict of each format judged; `planned` false for one judged in place of the plan's (--format; absent: planned) */
  formats: { format: string; verdict: SummaryVerdict; roles: string[]; planned?: boolean }[];
  ranges: ReportFormatRange[];
  tensors: ReportTensorBand[];
  lossScale: ReportLossScale;
  /** further loss-scale sections, one per further gradient format of the formats judged */
  moreLossScales?: ReportLossScale[];
  /** the ledger of the worst tensor; null when there is none to show */
  ledger: ReportLedger | null;
  findings: ReportFinding[];
  /** the assumptions the prediction made, one sentence each */
  assumptions: string[];
  /** rows of the spec's recorded statistics the check could not use, one sentence each (absent: all used, or none) */
  unusedStatistics?: string[];
  /** the spec's warnings, one `file:line:column: key.path: message` line each (absent: none) */
  warnings?: string[];
  /** the tool's version, printed in the footer */
  version: string;
}
