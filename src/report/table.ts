/**
 * Aligned plain-text tables for the terminal: a header, a rule, and one line per row.
 * Widths are measured on the visible text (colour escapes stripped), so styled cells line up.
 */
import { stripVTControlCharacters } from "node:util";

/** One table cell: text or a number; `null`/`undefined` render as an empty cell. */
export type Cell = string | number | null | undefined;

/** How a column is laid out. */
export interface TableColumn {
  /** the header text */
  title: string;
  /**
   * "left" or "right"; "auto" (the default) right-aligns a column whose non-empty cells are all
   * numbers or number-like text such as `-3.2`, `3.2e-5`, `12%` or `2^16`, and left-aligns the rest.
   */
  align?: "left" | "right" | "auto";
  /** cut longer visible text to this many characters, with `…` where it was cut */
  maxWidth?: number;
  /**
   * where to cut: "end" (the default) keeps the start; "middle" keeps both ends, for dotted ids whose last part
   * tells them apart (`repeat-1.0.residual-1.gated-feed-forward-1` and `…-2` would both end `gated-feed-forwar…`)
   */
  cut?: "end" | "middle";
}

/** Options of {@link renderTable}. */
export interface TableOptions {
  /** spaces between columns (default 2) */
  gap?: number;
  /** text put before every line (default none) */
  indent?: string;
  /** draw a rule of `─` under the header (default true) */
  rule?: boolean;
  /** leave the header out (default false) */
  noHeader?: boolean;
  /** style the header text, e.g. bold; gets and returns one cell's text */
  styleHeader?: (text: string) => string;
}

const NUMBER_LIKE = /^[-+]?(?:\d[\d,]*(?:\.\d+)?|\.\d+)(?:e[-+]?\d+)?(?:\s?%|\s?[kMGT]i?B|\s?B)?$|^[-+]?inf(?:inity)?$|^2\^-?\d+$/i;

/** Whether a cell counts as a number for "auto" alignment. */
export function isNumberLike(cell: Cell): boolean {
  if (typeof cell === "number") return true;
  if (typeof cell !== "string") return false;
  return NUMBER_LIKE.test(stripVTControlCharacters(cell).trim());
}

/** The visible width of a cell's text: colour and other terminal escapes do not count. */
export function visibleWidth(text: string): number {
  return [...stripVTControlCharacters(text)].length;
}

function cellText(cell: Cell): string {
  if (cell === null || cell === undefined) return "";
  return typeof cell === "number" ? String(cell) : cell;
}

function truncate(text: string, maxWidth: number | undefined, cut: "end" | "middle" = "end"): string {
  if (maxWidth === undefined || visibleWidth(text) <= maxWidth) return text;
  // cut on the plain text: a cut through an escape sequence would leave the terminal styled
  const plain = [...stripVTControlCharacters(text)];
  if (maxWidth <= 1) return "…".slice(0, maxWidth);
  if (cut === "end") return plain.slice(0, maxWidth - 1).join("") + "…";
  // two fifths of the room for the start, the rest for the end, where the distinguishing part of an id sits
  const head = Math.floor(((maxWidth - 1) * 2) / 5);
  const tail = maxWidth - 1 - head;
  return plain.slice(0, head).join("") + "…" + plain.slice(plain.length - tail).join("");
}

function pad(text: string, width: number, align: "left" | "right"): string {
  const fill = " ".repeat(Math.max(0, width - visibleWidth(text)));
  return align === "right" ? fill + text : text + fill;
}

/**
 * Render rows as an aligned plain-text table. Every line ends with "\n" and has no trailing spaces.
 * Rows shorter than `columns` are padded with empty cells; extra cells are a RangeError.
 *
 * @example renderTable([{ title: "tensor" }, { title: "risk" }], [["fc1.out", "3.2e-5"]])
 * // => "tensor   risk\n───────  ──────\nfc1.out  3.2e-5\n"
 */
export function renderTable(
  columns: readonly TableColumn[],
  rows: readonly (readonly Cell[])[],
  options: TableOptions = {},
): string {
  const gap = " ".repeat(options.gap ?? 2);
  const indent = options.indent ?? "";
  const texts = rows.map((row, index) => {
    if (row.length > columns.length) {
      throw new RangeError(`row ${index} has ${row.length} cells; the table has ${columns.length} columns`);
    }
    return columns.map((column, c) => truncate(cellText(row[c]), column.maxWidth, column.cut));
  });
  const aligns = columns.map((column, c): "left" | "right" => {
    const align = column.align ?? "auto";
    if (align !== "auto") return align;
    const cells = rows.map((row) => row[c]).filter((cell) => cellText(cell) !== "");
    return cells.length > 0 && cells.every(isNumberLike) ? "right" : "left";
  });
  const headers = columns.map((column) => truncate(column.title, column.maxWidth));
  const widths = columns.map((_, c) =>
    Math.max(options.noHeader ? 0 : visibleWidth(headers[c] ?? ""), ...texts.map((row) => visibleWidth(row[c] ?? ""))),
  );
  const line = (cells: readonly string[]): string =>
    (indent + cells.map((cell, c) => pad(cell, widths[c] ?? 0, aligns[c] ?? "left")).join(gap)).trimEnd() + "\n";
  let out = "";
  if (!options.noHeader) {
    const style = options.styleHeader ?? ((text: string) => text);
    out += line(headers.map((header) => style(header)));
    if (options.rule ?? true) out += line(widths.map((width) => "─".repeat(width)));
  }
  for (const row of texts) out += line(row);
  return out;
}
