import type { BatchRow } from "../batch/types.js";
import { renderBatchCsv, renderBatchJsonl, renderBatchMarkdown, renderBatchText } from "../report/batch.js";
import { colorEnabled, createStyle } from "../report/style.js";
import type { BatchFlags } from "./batch.js";

/** The rows of `headroom batch` in the format its flags ask for (loaded by src/cli/batch.ts once the pool runs). */
export function renderBatch(rows: readonly BatchRow[], flags: BatchFlags): string {
  const colour = flags.color ?? colorEnabled(process.stdout, process.env);
  return flags.jsonl
    ? renderBatchJsonl(rows)
    : flags.csv
      ? renderBatchCsv(rows)
      : flags.md
        ? renderBatchMarkdown(rows)
        : renderBatchText(rows, { style: createStyle(colour) });
}
