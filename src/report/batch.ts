/**
 * Renderers of batch rows: a terminal table, JSON Lines, RFC 4180 CSV and Markdown for CI comments.
 * Strings in, strings out; the order of rows is the order given.
 */
import { FORMAT_NAMES } from "../formats/names.js";
import type { BatchRow, JudgedLossScale, LossScaleSummary, SpecSummary, SummaryVerdict, WorstSummary } from "../batch/types.js";
import { renderCsv, type CsvField } from "./csv.js";
import { controlEscape, escapeMarkdown, markdownList, markdownTable, type MarkdownCell } from "./markdown.js";
import { lossScaleCells } from "./loss-scale.js";
import { formatBinades, formatCompactCount, formatPercent, formatPowerOfTwo, formatProbability, formatValue } from "./number.js";
import { PLAIN, type Style } from "./style.js";
import { renderTable, type Cell, type TableColumn } from "./table.js";

/** The closing reminder every human-facing output carries (RULES: predictions are estimates). */
export const ESTIMATE_NOTE = "Predictions are estimates, not guarantees; confirm with a short training run.";

/** Counts of a batch, for the closing line and for scripts. */
export interface BatchCounts {
  /** rows of spec files (a spec once per variant) */
  total: number;
  fits: number;
  atRisk: number;
  fails: number;
  inputErrors: number;
  internalErrors: number;
  /** path arguments that named no spec file: not specs, counted apart (their rows are input errors for the exit code) */
  unmatched: number;
}

/** Count rows by outcome. */
export function countRows(rows: readonly BatchRow[]): BatchCounts {
  const counts: BatchCounts = { total: 0, fits: 0, atRisk: 0, fails: 0, inputErrors: 0, internalErrors: 0, unmatched: 0 };
  for (const row of rows) {
    if (row.status === "error" && row.error.argument === true) {
      counts.unmatched += 1;
      continue;
    }
    counts.total += 1;
    if (row.status === "error") {
      if (row.error.kind === "input") counts.inputErrors += 1;
      else counts.internalErrors += 1;
    } else if (row.summary.verdict === "fits") counts.fits += 1;
    else if (row.summary.verdict === "at-risk") counts.atRisk += 1;
    else counts.fails += 1;
  }
  return counts;
}

/** A verdict in words. */
export function verdictWords(verdict: SummaryVerdict): string {
  return verdict === "at-risk" ? "at risk" : verdict;
}

/** A worst finding's number, in the units of its measure. */
export function formatRiskValue(worst: Pick<WorstSummary, "value" | "measure">): string {
  switch (worst.measure) {
    case "probability":
      return formatProbability(worst.value);
    case "share":
      return formatPercent(worst.value);
    case "binades":
      return `${formatBinades(worst.value)} binades`;
    case "relative-error":
      return formatValue(worst.value, 2);
    case "count":
      // an expected count per step (Adam's zero second moments, "about 1.66" in the sentence) keeps its fraction below
      // 100: rounded to a whole number, 1.66 read as 2 elements beside the sentence's 1.66
      return `${worst.value < 100 && !Number.isInteger(worst.value) ? formatValue(worst.value) : formatCompactCount(worst.value)} elements`;
  }
}

/**
 * A worst finding's risk cell, its label and number, saying when the number counts the whole network rather than the
 * subject named beside it: "zero second moments 12M elements across the network (most in this layer)".
 */
export function worstRiskText(worst: Pick<WorstSummary, "label" | "value" | "measure" | "scope">): string {
  return `${worst.label} ${formatRiskValue(worst)}${worst.scope === "network" ? " across the network (most in this layer)" : ""}`;
}

/**
 * What a share in a row's risk cell is a share of, by finding kind (the catalogue's descriptions, src/risk/catalogue.ts;
 * the optimizer's lost updates, src/scale/optimizer.ts).
 */
const SHARE_OF: Readonly<Record<string, string>> = {
  "gradient-energy-flushed": "of the squared norm",
  "flushed-values": "of the nonzero elements",
  "probability-mass-flushed": "of the probability mass",
  "subnormal-values": "of the squared norm",
  "gradient-sum-flush": "of the squared norm",
  "second-moment-flushed": "of the elements",
  "lost-updates": "of the update's squared norm",
};

/**
 * A worst finding's risk cell in the batch table with what its number is: a probability per step ("overflow probability 1
 * per step"), a share of what ("flushed energy 68.3% of the squared norm"), a relative error ("accumulation error 0.022
 * relative to the sum", √n·u), binades of headroom, or an expected count of elements per step (Adam's zero second
 * moments, the catalogue's "expected per step").
 */
export function worstRiskCell(worst: Pick<WorstSummary, "kind" | "label" | "value" | "measure" | "scope">): string {
  const value = formatRiskValue(worst);
  const network = worst.scope === "network" ? " across the network (most in this layer)" : "";
  switch (worst.measure) {
    case "probability":
      return `${worst.label} probability ${value} per step${network}`;
    case "share": {
      const of = SHARE_OF[worst.kind];
      return `${worst.label} ${value}${of === undefined ? "" : ` ${of}`}${network}`;
    }
    case "relative-error":
      return `${worst.label} ${value} relative to the sum${network}`;
    case "count":
      return `${worst.label} ${value} per step${network}`;
    case "binades":
      return `${worst.label} ${value}${network}`;
  }
}

/** A loss scale as the cells write it: a power of two as 2^k, any other value as itself. */
function scaleText(value: number): string {
  const k = Math.log2(value);
  return Number.isInteger(k) ? formatPowerOfTwo(k) : formatValue(value);
}

// how a judged scale's origin reads in its cell: check's header says "from the plan", "from the command line"
const ORIGIN_WORDS = { plan: "plan", option: "given" } as const;

/**
 * The cell of a scale the plan or the caller gave: the scale, its origin and where it lies against the window searched
 * for the same gradients, as check's header says it ("2^24 (plan, 15 binades above)"); a whole number of binades reads
 * whole, the edges being whole exponents.
 */
function givenScaleCell(judged: JudgedLossScale & { origin: "plan" | "option" }): string {
  const origin = ORIGIN_WORDS[judged.origin];
  if (judged.position === null || judged.binadesOutside === null) return `${scaleText(judged.value)} (${origin})`;
  if (judged.position === "inside") return `${scaleText(judged.value)} (${origin}, inside)`;
  const n = judged.binadesOutside;
  const binades = `${Number.isInteger(n) ? String(n) : formatBinades(n)} binade${n === 1 ? "" : "s"}`;
  return `${scaleText(judged.value)} (${origin}, ${binades} ${judged.position})`;
}

/** A judged scale the plan or the caller gave, narrowed for {@link givenScaleCell}. */
function givenScale(summary: SpecSummary): (JudgedLossScale & { origin: "plan" | "option" }) | undefined {
  const judged = summary.judgedLossScale;
  return judged !== undefined && (judged.origin === "plan" || judged.origin === "option") ? { ...judged, origin: judged.origin } : undefined;
}

/**
 * A row's loss-scale and window cells: the one answer's, or, when the check answered for several gradient formats
 * (`check --format A,B`), each format's joined by "; " and led by its name ("e5m2 2^13; bfloat16 not needed"). A scale
 * the plan (or the caller) gives is the one judged, whatever the window: the loss-scale cell then says it, its origin
 * and where it lies, and the window cell adds what headroom would pick ("2^-14..2^9, pick 2^0"), so a spec failing at
 * its own scale does not read as failing at the pick.
 */
function rowLossScaleCells(summary: SpecSummary): { pick: string; window: string } {
  const scales = summary.lossScales ?? [];
  const given = givenScale(summary);
  const withPick = (cells: { pick: string; window: string }, lossScale: LossScaleSummary) =>
    given !== undefined && lossScale.status === "window" ? `${cells.window}, pick ${cells.pick}` : cells.window;
  if (scales.length <= 1) {
    const cells = lossScaleCells(summary.lossScale);
    if (given !== undefined) return { pick: givenScaleCell(given), window: withPick(cells, summary.lossScale) };
    // the pick is what was judged: said so, beside the rows that judged a scale of their own
    return summary.judgedLossScale?.origin === "recommended" && summary.lossScale.status === "window" ? { ...cells, pick: `${cells.pick} (pick)` } : cells;
  }
  const cells = scales.map((s) => ({ format: s.format, ...lossScaleCells(s), window: withPick(lossScaleCells(s), s) }));
  // the place of a given scale is against the first format's window; beside several windows the cell says the scale alone
  return {
    pick: given === undefined ? cells.map((c) => `${c.format} ${c.pick}`).join("; ") : givenScaleCell({ ...given, position: null, binadesOutside: null }),
    window: cells.map((c) => `${c.format} ${c.window}`).join("; "),
  };
}

/**
 * The CSV cell of every gradient format's answer: entries joined by "; ", each `format:status`, with
 * `:pick:low:high` (exponents of two) for a window, e.g. "e5m2:window:13:11:17; bfloat16:not-needed".
 */
function lossScalesCsvCell(summary: SpecSummary): string {
  return (summary.lossScales ?? [])
    .map((s) => (s.status === "window" ? `${s.format}:window:${s.pickLog2}:${s.lowestLog2}:${s.highestLog2}` : `${s.format}:${s.status}`))
    .join("; ");
}

/** The formats used by any row, in headroom's canonical order. */
function formatsUsed(rows: readonly BatchRow[]): string[] {
  const used = new Set<string>();
  for (const row of rows) if (row.status === "ok") for (const f of row.summary.formats) used.add(f.format);
  const known = FORMAT_NAMES.filter((name) => used.has(name));
  const other = [...used].filter((name) => !(FORMAT_NAMES as readonly string[]).includes(name)).sort();
  return [...known, ...other];
}

function formatVerdict(summary: SpecSummary, format: string): SummaryVerdict | undefined {
  return summary.formats.find((f) => f.format === format)?.verdict;
}

function paintVerdict(style: Style, verdict: SummaryVerdict | "error", text = verdict === "error" ? "error" : verdictWords(verdict)): string {
  const role = verdict === "fits" ? "fits" : verdict === "at-risk" ? "risk" : verdict === "fails" ? "fails" : "error";
  return style.role(role, text);
}

/**
 * One line counting the outcomes, e.g. "200 specs: 150 fit, 30 at risk, 15 fail, 5 could not be evaluated; 1 argument
 * named no spec file" (a pattern that matched nothing is not a spec).
 */
export function batchCountLine(rows: readonly BatchRow[]): string {
  const c = countRows(rows);
  const parts = [`${c.fits} fit`, `${c.atRisk} at risk`, `${c.fails} fail`];
  const errors = c.inputErrors + c.internalErrors;
  if (errors > 0) parts.push(`${errors} could not be evaluated`);
  const unmatched = c.unmatched > 0 ? `; ${c.unmatched} ${c.unmatched === 1 ? "argument" : "arguments"} named no spec file` : "";
  return `${c.total} ${c.total === 1 ? "spec" : "specs"}: ${parts.join(", ")}${unmatched}`;
}

/** Every warning of the rows, one line each, with the variant it came from. */
function warningLines(rows: readonly BatchRow[]): string[] {
  const lines: string[] = [];
  for (const row of rows) {
    if (row.status !== "ok" || row.warnings === undefined) continue;
    const variant = row.variant ? ` [${row.variant}]` : "";
    for (const warning of row.warnings) lines.push(visible(`${warning}${variant}`));
  }
  return lines;
}

// C0 and C1 control characters and DEL (Unicode's Cc category), line breaks and tabs included
const CONTROL = /[\u0000-\u001f\u007f-\u009f]/g;

/**
 * Text for a terminal line: a file name may hold line breaks or ESC, which would break the table or start a terminal
 * command (ECMA-48 §5.3); each is shown as its JSON escape instead (`\n`, `\u001b`).
 */
function visible(text: string): string {
  return text.replace(CONTROL, controlEscape);
}

/**
 * The lines of an error row under the table: one per problem of its spec (every one, each with its file:line:column),
 * or its one message; each with the variant it came from.
 */
function errorLines(row: Extract<BatchRow, { status: "error" }>): string[] {
  const variant = row.variant ? ` [${row.variant}]` : "";
  const kind = row.error.kind === "internal" ? "internal error: " : "";
  const messages = row.error.issues !== undefined && row.error.issues.length > 1 ? row.error.issues.map((issue) => issue.message) : [row.error.message];
  // messages name their file (with the line and column) already; say it once
  return messages.map((message) => visible(message.startsWith(row.file) ? `${kind}${message}${variant}` : `${row.file}${variant}: ${kind}${message}`));
}

/** Options of the text renderer. */
export interface BatchTextOptions {
  style?: Style;
}

/**
 * The summary table: one row per spec (or variant) with its verdict, the verdict per format, the
 * loss-scale pick and window, and the worst tensor with its risk; then the errors with their positions.
 */
export function renderBatchText(rows: readonly BatchRow[], options: BatchTextOptions = {}): string {
  const style = options.style ?? PLAIN;
  const formats = formatsUsed(rows);
  const withVariants = rows.some((row) => row.variant !== null);
  const columns: TableColumn[] = [
    { title: "#", align: "right" },
    { title: "spec" },
    ...(withVariants ? [{ title: "variant" }] : []),
    { title: "verdict" },
    ...formats.map((format): TableColumn => ({ title: format })),
    // left always, as in the Markdown table: "auto" right-aligned "2^5" when every row had a window and left-aligned it
    // beside a "not needed", so the column moved from one run to the next
    { title: "loss scale", align: "left" },
    { title: "window", align: "left" },
    { title: "worst tensor" },
    // left, beside the tensor it is about: right-aligned, a short value sat at the far end of the longest one's field
    { title: "risk", align: "left" },
  ];
  const cells = rows.map((row): Cell[] => {
    const lead: Cell[] = [row.index + 1, visible(row.file), ...(withVariants ? [visible(row.variant ?? "")] : [])];
    if (row.status === "error") {
      return [...lead, paintVerdict(style, "error"), ...formats.map(() => ""), "", "", "", ""];
    }
    const s = row.summary;
    const scale = rowLossScaleCells(s);
    return [
      ...lead,
      paintVerdict(style, s.verdict),
      ...formats.map((format) => {
        const verdict = formatVerdict(s, format);
        return verdict ? paintVerdict(style, verdict) : style.role("muted", "-");
      }),
      s.lossScale.status === "not-evaluated" ? style.role("muted", scale.pick) : scale.pick,
      s.lossScale.status === "not-evaluated" ? "" : scale.window,
      s.worst ? `${s.worst.subject} (${s.worst.format})` : "",
      s.worst ? worstRiskCell(s.worst) : "",
    ];
  });
  let out = renderTable(columns, cells, { styleHeader: (text) => style.role("strong", text) });
  const errors = rows.filter((row): row is Extract<BatchRow, { status: "error" }> => row.status === "error");
  if (errors.length > 0) {
    out += `\n${style.role("strong", "could not be evaluated")}\n`;
    for (const row of errors) for (const line of errorLines(row)) out += `  ${line}\n`;
  }
  const warned = warningLines(rows);
  if (warned.length > 0) {
    out += `\n${style.role("strong", "warnings (judged as written)")}\n`;
    for (const line of warned) out += `  ${line}\n`;
  }
  out += `\n${batchCountLine(rows)}. ${ESTIMATE_NOTE}\n`;
  return out;
}

/**
 * The layout version of a JSON Lines row (README.md, "Checking many specs"): 2 since a row's names and shapes are the
 * check's (`formats` an array, the window's `lowestLog2`/`highestLog2`, `reason` an object) and error rows have a verdict.
 */
export const BATCH_ROW_VERSION = 2;

/**
 * JSON Lines: one object per row, in order, keys in a fixed order. Numbers are plain JSON numbers
 * (exponents of two for the loss scale); a script can parse each line on its own. Names and shapes are the check's
 * JSON's (`formats[]` of `{ format, verdict }`, the window's `lowestLog2`/`highestLog2`), and every row, an error's
 * too, has a `verdict` (`error` there, as the table and the CSV say).
 */
export function renderBatchJsonl(rows: readonly BatchRow[]): string {
  return rows
    .map((row) => {
      const base = { version: BATCH_ROW_VERSION, index: row.index, file: row.file, variant: row.variant, status: row.status };
      if (row.status === "error") return JSON.stringify({ ...base, verdict: "error", error: row.error });
      const s = row.summary;
      return JSON.stringify({
        ...base,
        name: s.name,
        verdict: s.verdict,
        formats: s.formats.map((f) => ({ format: f.format, verdict: f.verdict })),
        lossScale: s.lossScale,
        lossScales: s.lossScales ?? [],
        // on rows whose judge gives it (every check's row)
        ...(s.judgedLossScale !== undefined ? { judgedLossScale: s.judgedLossScale } : {}),
        worst: s.worst,
        // only on rows that have them, so the lines of other rows keep their bytes
        ...(row.warnings !== undefined ? { warnings: row.warnings } : {}),
      });
    })
    .map((line) => line + "\n")
    .join("");
}

/**
 * The CSV columns: fixed, so scripts can rely on them whatever the specs use. `loss_scale_log2` to
 * `loss_scale_status` give the check's loss-scale answer (the row's `lossScale`); `loss_scales`, after the columns
 * before it so they keep their places, gives every gradient format's (see {@link lossScalesCsvCell}). `error` gives an
 * error row's first problem (and a count of the others); `error_issues`, last for the same reason, every problem of
 * the spec, one `file:line:column: key.path: message` line each, LF between them inside the quoted field (RFC 4180 §2
 * rule 6); the error's message alone when it is not a spec's problems. `judged_loss_scale` to
 * `judged_loss_scale_binades_outside`, after every column before them for the same reason, give the scale the check
 * judged at (the row's `judgedLossScale`): its value, origin, place against the window and binades from its edge.
 */
export const BATCH_CSV_HEADER = [
  "index",
  "file",
  "variant",
  "name",
  "verdict",
  ...FORMAT_NAMES,
  "loss_scale_log2",
  "window_low_log2",
  "window_high_log2",
  "loss_scale_status",
  "worst_tensor",
  "worst_format",
  "worst_kind",
  "worst_value",
  "worst_measure",
  "error",
  "error_line",
  "error_column",
  "loss_scales",
  "error_issues",
  "worst_scope",
  "judged_loss_scale",
  "judged_loss_scale_origin",
  "judged_loss_scale_position",
  "judged_loss_scale_binades_outside",
] as const;

/** RFC 4180 CSV: a header, then one record per row, CRLF line ends; one column per known format. */
export function renderBatchCsv(rows: readonly BatchRow[]): string {
  const records = rows.map((row): CsvField[] => {
    const lead: CsvField[] = [row.index, row.file, row.variant ?? ""];
    if (row.status === "error") {
      return [
        ...lead,
        "",
        "error",
        ...FORMAT_NAMES.map(() => ""),
        "",
        "",
        "",
        "",
        "",
        "",
        "",
        "",
        "",
        row.error.message,
        row.error.position?.line ?? "",
        row.error.position?.column ?? "",
        "",
        (row.error.issues?.map((issue) => issue.message) ?? [row.error.message]).join("\n"),
        "",
        "",
        "",
        "",
        "",
      ];
    }
    const s = row.summary;
    const ls = s.lossScale;
    return [
      ...lead,
      s.name,
      s.verdict,
      ...FORMAT_NAMES.map((format) => formatVerdict(s, format) ?? ""),
      ls.status === "window" ? ls.pickLog2 : "",
      ls.status === "window" ? ls.lowestLog2 : "",
      ls.status === "window" ? ls.highestLog2 : "",
      ls.status,
      s.worst?.subject ?? "",
      s.worst?.format ?? "",
      s.worst?.kind ?? "",
      s.worst?.value ?? "",
      s.worst?.measure ?? "",
      "",
      "",
      "",
      lossScalesCsvCell(s),
      "",
      s.worst?.scope ?? "",
      s.judgedLossScale?.value ?? "",
      s.judgedLossScale?.origin ?? "",
      s.judgedLossScale?.position ?? "",
      s.judgedLossScale?.binadesOutside ?? "",
    ];
  });
  return renderCsv(BATCH_CSV_HEADER, records);
}

const VERDICT_MARK: Record<SummaryVerdict | "error", string> = {
  fits: "fits",
  "at-risk": "**at risk**",
  fails: "**fails**",
  error: "**error**",
};

/** Markdown for a CI comment: a count line, the table, and the errors with their positions. */
export function renderBatchMarkdown(rows: readonly BatchRow[]): string {
  const formats = formatsUsed(rows);
  const withVariants = rows.some((row) => row.variant !== null);
  const cells = rows.map((row): MarkdownCell[] => {
    const lead: MarkdownCell[] = [row.file, ...(withVariants ? [row.variant ?? ""] : [])];
    if (row.status === "error") return [...lead, { markdown: VERDICT_MARK.error }, ...formats.map(() => ""), "", "", "", ""];
    const s = row.summary;
    const scale = rowLossScaleCells(s);
    return [
      ...lead,
      { markdown: VERDICT_MARK[s.verdict] },
      ...formats.map((format) => {
        const verdict = formatVerdict(s, format);
        return verdict ? verdictWords(verdict) : "-";
      }),
      s.lossScale.status === "not-evaluated" ? { markdown: "_not evaluated_" } : scale.pick,
      s.lossScale.status === "not-evaluated" ? "" : scale.window,
      s.worst ? `${s.worst.subject} (${s.worst.format})` : "",
      s.worst ? worstRiskCell(s.worst) : "",
    ];
  });
  let out = `**headroom batch**: ${escapeMarkdown(batchCountLine(rows))}\n\n`;
  out += markdownTable(
    [
      { title: "spec" },
      ...(withVariants ? [{ title: "variant" }] : []),
      { title: "verdict" },
      ...formats.map((format) => ({ title: format })),
      { title: "loss scale" },
      { title: "window" },
      { title: "worst tensor" },
      { title: "risk" },
    ],
    cells,
  );
  const errors = rows.filter((row): row is Extract<BatchRow, { status: "error" }> => row.status === "error");
  out += markdownList("Could not be evaluated", errors.flatMap(errorLines));
  out += markdownList("Warnings (judged as written)", warningLines(rows));
  out += `\n_${escapeMarkdown(ESTIMATE_NOTE)}_\n`;
  return out;
}
