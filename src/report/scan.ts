/**
 * Renderers of a tensor-file scan: a terminal table, CSV (one row per tensor and target format) and JSON.
 * They only render: a ScanResult in, a string out.
 */
import type { CastResult, ScanResult, TensorMeasure } from "../measure/index.js";
import { renderCsv } from "./csv.js";
import { formatCount, formatValue } from "./number.js";
import { PLAIN, type Style } from "./style.js";
import { renderTable } from "./table.js";

/** Options of the scan renderers. */
export interface ScanRenderOptions {
  /** the table lists every tensor, not only those with findings (JSON and CSV always hold every tensor) */
  all?: boolean;
  style?: Style;
}

/** Whether a tensor has something to report: a cast that is not safe, or infinities and NaNs already in the file. */
export function hasFindings(tensor: TensorMeasure): boolean {
  return tensor.nans > 0 || tensor.infinities > 0 || tensor.casts.some((c) => c.verdict !== "safe");
}

function shapeText(shape: readonly number[]): string {
  return `[${shape.join(", ")}]`;
}

function powerText(k: number): string {
  return `2^${k}`;
}

/** The fitting scales of one cast in words: "2^-3 … 2^5", or "none" with what the top scale leaves behind. */
export function scalesText(cast: CastResult): string {
  const s = cast.scales;
  if (!s) return "";
  if (s.fits) return `${powerText(s.lowest)} … ${powerText(s.highest)}`;
  // with subnormals flushed (--flush-subnormals) a value flushes below the smallest normal, not the smallest subnormal
  const n = cast.flushSubnormals ? s.belowNormalAtHighest : s.belowSubnormalAtHighest;
  const bound = cast.flushSubnormals ? "smallest normal (subnormals flushed)" : "smallest subnormal";
  return `none; at ${powerText(s.highest)}, ${formatCount(n)} value${n === 1 ? " falls" : "s fall"} below the ${bound}`;
}

/** The verdict of one cast with its leading count, e.g. "breaks: 12 overflow". */
export function verdictText(cast: CastResult, style: Style = PLAIN): string {
  const parts: string[] = [];
  if (cast.overflowed > 0) parts.push(`${formatCount(cast.overflowed)} overflow`);
  if (cast.nonFiniteInFile > 0) parts.push(`${formatCount(cast.nonFiniteInFile)} inf/nan in the file`);
  if (cast.saturated > 0) parts.push(`${formatCount(cast.saturated)} clipped`);
  if (cast.flushed > 0) parts.push(`${formatCount(cast.flushed)} flushed`);
  const role = cast.verdict === "safe" ? "fits" : cast.verdict === "lossy" ? "risk" : "fails";
  const word = style.role(role, cast.verdict);
  return parts.length > 0 ? `${word}: ${parts.join(", ")}` : word;
}

/** The outlier channel of a vector or matrix in words, e.g. "column 311: 38× median rms". */
export function outlierText(tensor: TensorMeasure): string {
  if (!tensor.channels) return "";
  let best: { text: string; ratio: number } | undefined;
  for (const axis of tensor.channels) {
    if (axis.rmsRatio === null || axis.channels < 2) continue;
    const text = `${axis.axis} ${axis.loudest}: ${formatValue(axis.rmsRatio, 2)}× median`;
    if (!best || axis.rmsRatio > best.ratio) best = { text, ratio: axis.rmsRatio };
  }
  return best?.text ?? "";
}

/** The terminal table: a summary, the measured tensors, then each cast's counts and fitting scales. */
export function renderScanTable(result: ScanResult, options: ScanRenderOptions = {}): string {
  const style = options.style ?? PLAIN;
  const measured = result.files.flatMap((f) => f.tensors);
  const shown = options.all ? measured : measured.filter(hasFindings);
  const skipped = result.files.reduce((n, f) => n + f.skipped.length, 0);
  const withErrors = result.files.filter((f) => f.issues.length > 0).length;
  const targets = result.targets
    .map((t) => `${t.format} (${t.overflow === "saturate" ? "saturating" : "overflow to infinity"}${t.flushSubnormals ? ", subnormals flushed" : ""})`)
    .join(", ");
  let out = "";
  out += `scanned ${formatCount(result.files.length)} file${result.files.length === 1 ? "" : "s"}: ${formatCount(measured.length)} tensor${measured.length === 1 ? "" : "s"} measured`;
  if (skipped > 0) out += `, ${formatCount(skipped)} skipped (not floating point)`;
  if (withErrors > 0) out += `, ${style.role("error", `${withErrors} with errors`)}`;
  out += "\n";
  if (targets) out += `targets: ${targets}\n`;
  out += "Counts are exact for these files; how a network behaves with the cast values is for a short run to confirm.\n";
  if (shown.length === 0) {
    if (measured.length > 0) out += `\nevery tensor is ${style.role("fits", "safe")} to cast into every target (--all lists them)\n`;
    return out;
  }
  const multipleFiles = result.files.length > 1;
  const name = (t: TensorMeasure) => (multipleFiles ? `${baseName(t.file)}: ${t.name}` : t.name);
  out += `\n${style.role("heading", options.all ? "tensors" : "tensors with findings")}\n`;
  out += renderTable(
    [
      { title: "tensor", maxWidth: 60, cut: "middle" },
      { title: "dtype" },
      { title: "shape" },
      { title: "zeros", align: "right" },
      { title: "inf/nan", align: "right" },
      { title: "min nonzero", align: "right" },
      { title: "max |x|", align: "right" },
      { title: "rms", align: "right" },
      { title: "max/rms", align: "right" },
      { title: "outlier channel" },
    ],
    shown.map((t) => [
      name(t),
      t.dtype,
      shapeText(t.shape),
      formatCount(t.zeros),
      t.infinities + t.nans > 0 ? style.role("fails", `${formatCount(t.infinities)}/${formatCount(t.nans)}`) : "0/0",
      t.minNonzero === null ? "" : formatValue(t.minNonzero),
      t.maxAbs === null ? "" : formatValue(t.maxAbs),
      formatValue(t.rms),
      t.maxOverRms === null ? "" : formatValue(t.maxOverRms),
      outlierText(t),
    ]),
    { styleHeader: (text) => style.role("strong", text) },
  );
  if (result.targets.length > 0) {
    out += `\n${style.role("heading", "casts")}  (scales: multiply by 2^k before the cast; the range keeps every value from flushing or overflowing)\n`;
    out += renderTable(
      [
        { title: "tensor", maxWidth: 60, cut: "middle" },
        { title: "format" },
        { title: "verdict" },
        { title: "flushed", align: "right" },
        { title: "subnormal", align: "right" },
        { title: "overflowed", align: "right" },
        { title: "clipped", align: "right" },
        { title: "inf/nan in file", align: "right" },
        { title: "scales that fit" },
      ],
      shown.flatMap((t) =>
        t.casts.map((c) => [
          name(t),
          c.format,
          verdictText(c, style).split(":")[0]!,
          formatCount(c.flushed),
          formatCount(c.subnormal),
          formatCount(c.overflowed),
          formatCount(c.saturated),
          formatCount(c.nonFiniteInFile),
          scalesText(c),
        ]),
      ),
      { styleHeader: (text) => style.role("strong", text) },
    );
  }
  const hidden = measured.length - shown.length;
  if (hidden > 0) out += `\n${formatCount(hidden)} more tensor${hidden === 1 ? " is" : "s are"} safe in every target (--all lists them)\n`;
  return out;
}

function baseName(path: string): string {
  const parts = path.split(/[\\/]/);
  return parts[parts.length - 1] ?? path;
}

/** Column names of the scan CSV: one row per tensor and target format (a tensor without targets gets one row). */
export const SCAN_CSV_COLUMNS = [
  "file",
  "tensor",
  "dtype",
  "shape",
  "elements",
  "zeros",
  "infinities",
  "nans",
  "min_nonzero",
  "max_abs",
  "rms",
  "max_over_rms",
  "format",
  "overflow_mode",
  "verdict",
  "flushed",
  "subnormal",
  "overflowed",
  "saturated",
  "non_finite_in_file",
  "lowest_scale_log2",
  "lowest_normal_scale_log2",
  "highest_scale_log2",
] as const;

/**
 * The scan as CSV (RFC 4180): one row per tensor and target format, every tensor (a script filters by `verdict`).
 * Numbers are written in full (shortest round-trip form).
 */
export function renderScanCsv(result: ScanResult): string {
  const rows: (string | number | null)[][] = [];
  for (const file of result.files) {
    for (const t of file.tensors) {
      const base = [file.file, t.name, t.dtype, t.shape.join("x"), t.elements, t.zeros, t.infinities, t.nans, t.minNonzero, t.maxAbs, t.rms, t.maxOverRms];
      if (t.casts.length === 0) rows.push([...base, null, null, null, null, null, null, null, null, null, null, null]);
      for (const c of t.casts) {
        rows.push([
          ...base,
          c.format,
          c.overflow,
          c.verdict,
          c.flushed,
          c.subnormal,
          c.overflowed,
          c.saturated,
          c.nonFiniteInFile,
          c.scales?.lowest ?? null,
          c.scales?.lowestNormal ?? null,
          c.scales?.highest ?? null,
        ]);
      }
    }
  }
  return renderCsv([...SCAN_CSV_COLUMNS], rows);
}

/** The scan as JSON: the whole result, every tensor, issues included. */
export function renderScanJson(result: ScanResult): string {
  return JSON.stringify({ ...result, note: "exact counts for these files; confirm training behaviour with a short run" }, null, 2) + "\n";
}
