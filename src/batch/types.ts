import type { FlushedSums, UnscaledReason } from "../check.js";

/**
 * The plain data of a batch run: one row per spec (or per variant of a spec), summarised from a
 * check in the worker so only small rows cross between threads.
 */

/** The judgement of a spec, a format or a tensor. Ordered: fits < at risk < fails. */
export type SummaryVerdict = "fits" | "at-risk" | "fails";

/** How the number of a risk reads: a per-step probability, a share, binades, a relative error, or a count of elements. */
export type RiskMeasure = "probability" | "share" | "binades" | "relative-error" | "count";

/**
 * The loss-scale part of a summary, in the names and shapes of the check's JSON (`lossScale.window`, `lossScales[]`).
 */
export type LossScaleSummary =
  /** a window of powers of two, with the pick inside it (exponents of 2), as the check's window names them */
  | { status: "window"; pickLog2: number; lowestLog2: number; highestLog2: number }
  /** no static scale serves the whole horizon; `sentence` says why in plain words (the check answer's first sentence) */
  | { status: "empty"; sentence: string }
  /**
   * no loss scale is needed: gradients are held in a format with binary32's range (bfloat16, binary32), or in an 8-bit
   * format with scale factors; `reason` says which, as the check's `lossScales[].reason` does (absent from rows that do
   * not give it)
   */
  | { status: "not-needed"; reason?: UnscaledReason; flushedSums?: FlushedSums }
  /** the check did not evaluate a loss scale */
  | { status: "not-evaluated" };

/** One gradient format's loss-scale answer in a row: the format, then the fields of its summary. */
export type FormatLossScale = { format: string } & Exclude<LossScaleSummary, { status: "not-evaluated" }>;

/**
 * The loss scale the check judged the gradients and the loss at (the check's `lossScale`: that of the first format
 * judged), and where it lies against the window searched for the same gradients (check's "2^24 (from the plan), 15
 * binades above the window").
 */
export interface JudgedLossScale {
  /** the scale, S */
  value: number;
  /** plan: the spec's plan; option: the caller's; recommended: the window's pick; none: 1 (no scale needed, or none fits) */
  origin: "plan" | "option" | "recommended" | "none";
  /** inside, above or below the window searched for the same gradients; null when none was searched or it is empty */
  position: "inside" | "above" | "below" | null;
  /** binades from log2 S to the window's nearer edge: 0 inside, null when `position` is null */
  binadesOutside: number | null;
}

/** The worst thing found in a spec: one tensor (or operation) in one format. */
export interface WorstSummary {
  /** a tensor id such as `fc1/activation-gradient`, or the layer of an operation */
  subject: string;
  format: string;
  verdict: SummaryVerdict;
  /** the finding's kind, e.g. "overflow", "gradient-energy-flushed" */
  kind: string;
  /** a short phrase for the kind, e.g. "overflow", "flushed energy" */
  label: string;
  value: number;
  measure: RiskMeasure;
  /**
   * what `value` counts: `subject`, the subject alone; `network`, every weight of the network (Adam's zero second
   * moments with epsilon rounded to 0, counted over all weight gradients, `subject` being the layer holding the most)
   */
  scope: ValueScope;
}

/** What a finding's number counts: its subject alone, or the whole network (see `WorstSummary.scope`). */
export type ValueScope = "subject" | "network";

/** What a batch row says about one evaluated spec. */
export interface SpecSummary {
  /** the spec's name */
  name: string;
  verdict: SummaryVerdict;
  /** the verdict of each format the plan uses, in the plan's order */
  formats: { format: string; verdict: SummaryVerdict }[];
  /** the loss-scale answer of the check (the first gradient format that needs a scale, else "not needed") */
  lossScale: LossScaleSummary;
  /**
   * every gradient format's answer, in the order of the check's `lossScales` (one for a plan as written; several with
   * `--format A,B`); empty when the check gave none. Absent from rows of judges that give only `lossScale`
   */
  lossScales?: FormatLossScale[];
  /**
   * the scale the check judged at, with its origin and place against the window (a spec's own 2^24, 15 binades above
   * the window, beside a pick of 2^0). Absent from rows of judges that do not give it
   */
  judgedLossScale?: JudgedLossScale;
  /** null when nothing was found */
  worst: WorstSummary | null;
}

/** Where in a file an input error is. */
export interface ErrorPosition {
  file: string;
  /** 1-based; absent when the error concerns the whole file */
  line?: number;
  column?: number;
}

/** Why a row has no result. */
export interface RowError {
  /** input: the file, the spec or a --vary key; internal: a failure inside headroom */
  kind: "input" | "internal";
  /** one line, starting with the position when there is one */
  message: string;
  position?: ErrorPosition;
  /**
   * every problem, in the file's order, one or more (the `message` gives the first and a count of the others): each
   * `message` a whole line starting with its position, as `check` prints it. An error that is not a spec's problems (a
   * file that cannot be read, a pattern that matches nothing, a failure inside headroom) is its one entry, so a
   * script reads one shape on every error row
   */
  issues: { message: string; position: ErrorPosition }[];
  /** the row is a path argument that named no spec file (no such file, an empty folder, a pattern matching nothing) */
  argument?: true;
}

/** A row error that is one problem: `issues` holds it alone. */
export function oneProblem(kind: RowError["kind"], message: string, position: ErrorPosition): RowError {
  return { kind, message, position, issues: [{ message, position }] };
}

/** One row of a batch: a spec file, or one variant of it. */
export type BatchRow =
  | { index: number; file: string; variant: string | null; status: "ok"; summary: SpecSummary; warnings?: string[] }
  | { index: number; file: string; variant: string | null; status: "error"; error: RowError };

/**
 * The exit code of a batch, the strictest that applies: 3 when headroom itself failed on a row,
 * 2 when some input could not be evaluated, 1 when some spec is at risk or fails, 0 when all fit.
 */
export function batchExitCode(rows: readonly BatchRow[]): 0 | 1 | 2 | 3 {
  let code: 0 | 1 | 2 | 3 = 0;
  for (const row of rows) {
    const rowCode = row.status === "error" ? (row.error.kind === "internal" ? 3 : 2) : row.summary.verdict === "fits" ? 0 : 1;
    if (rowCode > code) code = rowCode;
  }
  return code;
}
