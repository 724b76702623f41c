/** Public exports of src/report: renderers of check results and batch rows (strings in, strings out). */
export { renderHtmlReport, escapeHtml } from "./html.js";
export type { ReportModel, ReportFormatRange, ReportTensorBand, ReportLedger, ReportLedgerStep, ReportFinding, ReportLossScale } from "./report-model.js";
export { reportModel, type ReportModelOptions } from "./report-from-check.js";
export { renderCheckMarkdown, type CheckMarkdownOptions } from "./markdown-check.js";
export { summarizeCheck, findingsWorstFirst, lossScaleOf, FINDING_WORDS } from "./summary.js";
export {
  renderBatchText,
  renderBatchJsonl,
  renderBatchCsv,
  renderBatchMarkdown,
  BATCH_CSV_HEADER,
  countRows,
  type BatchCounts,
  type BatchTextOptions,
} from "./batch.js";
export { colorEnabled, createStyle, type Style } from "./style.js";
