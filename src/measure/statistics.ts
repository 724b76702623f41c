/**
 * Recorded statistics: per-tensor magnitudes from a short real run, in headroom's own layout, that replace predicted
 * profiles. Two spellings of one layout (README, "Recorded statistics"):
 *
 * CSV (RFC 4180, a header row, one row per tensor):
 *   tensor,role,rms,max,zero_fraction,elements,q50,q99
 *   fc1,activation,0.82,6.1,0.5,524288,0.41,2.6
 * JSON:
 *   { "tensors": [ { "tensor": "fc1", "role": "activation", "rms": 0.82, "max": 6.1, "zeroFraction": 0.5,
 *                    "elements": 524288, "quantiles": { "0.5": 0.41, "0.99": 2.6 } } ] }
 *
 * `tensor` is a tensor id as headroom prints it (`fc1/activation`, `blocks.0.attention/weight:query`) or a layer
 * name, with `role` picking the layer's tensor. Required: tensor, role, rms (over all elements, zeros included).
 * Optional: max (largest magnitude), zero_fraction (share of exact zeros), elements, and quantiles of the nonzero
 * magnitudes (CSV columns q50, q90, q99, q999, …: "q" then the digits after "0.").
 */
import type { TensorRole } from "../magnitude/types.js";

/** The tensor roles (DESIGN.md vocabulary), as the magnitude contract lists them. */
export const STATISTIC_ROLES = [
  "activation",
  "pre-activation",
  "activation-gradient",
  "weight",
  "weight-gradient",
  "optimizer-state",
  "update",
  "loss",
] as const satisfies readonly TensorRole[];

// every role of the contract must be accepted: a compile error here means STATISTIC_ROLES lacks one
const everyRole: Record<Exclude<TensorRole, (typeof STATISTIC_ROLES)[number]>, never> = {};
void everyRole;

/** One recorded tensor. */
export interface RecordedStatistic {
  tensor: string;
  role: TensorRole;
  /** root mean square over all elements, zeros included */
  rms: number;
  max?: number;
  zeroFraction?: number;
  elements?: number;
  /** quantiles of the nonzero magnitudes, ascending in q */
  quantiles: { q: number; magnitude: number }[];
  /** where it was read: the CSV line, or the JSON path */
  at: string;
}

/** A problem in a statistics file, with the line (CSV) or the path (JSON) that has it. */
export interface StatisticsIssue {
  file: string;
  line?: number;
  column?: number;
  path?: string;
  message: string;
}

/** The statistics of a file, or its problems (every problem is reported; no statistic is used then). */
export type StatisticsResult = { ok: true; statistics: RecordedStatistic[] } | { ok: false; issues: StatisticsIssue[] };

const CSV_COLUMNS = ["tensor", "role", "rms", "max", "zero_fraction", "elements"] as const;

/** Parse a recorded-statistics file: JSON when it starts with "{" or "[", CSV otherwise. */
export function parseRecordedStatistics(text: string, file: string): StatisticsResult {
  const body = text.replace(/^\uFEFF/, "");
  const first = body.trimStart()[0];
  return first === "{" || first === "[" ? parseJson(body, file) : parseCsvStatistics(body, file);
}

function parseJson(text: string, file: string): StatisticsResult {
  let document: unknown;
  try {
    document = JSON.parse(text);
  } catch (error) {
    return { ok: false, issues: [{ file, message: `not JSON: ${error instanceof Error ? error.message : String(error)}` }] };
  }
  const list = Array.isArray(document) ? document : (document as { tensors?: unknown } | null)?.tensors;
  if (!Array.isArray(list)) return { ok: false, issues: [{ file, path: "tensors", message: 'expected an object with a "tensors" list, or a list' }] };
  const issues: StatisticsIssue[] = [];
  const statistics: RecordedStatistic[] = [];
  list.forEach((entry, index) => {
    const at = Array.isArray(document) ? `[${index}]` : `tensors[${index}]`;
    const problem = (key: string, message: string) => issues.push({ file, path: key ? `${at}.${key}` : at, message });
    if (typeof entry !== "object" || entry === null || Array.isArray(entry)) return problem("", "expected an object");
    const record = entry as Record<string, unknown>;
    for (const key of Object.keys(record)) {
      if (!["tensor", "role", "rms", "max", "zeroFraction", "zero_fraction", "elements", "quantiles"].includes(key)) {
        problem(key, "unknown key; accepted: tensor, role, rms, max, zeroFraction, elements, quantiles");
      }
    }
    const cells: Record<string, unknown> = {
      tensor: record["tensor"],
      role: record["role"],
      rms: record["rms"],
      max: record["max"],
      zero_fraction: record["zeroFraction"] ?? record["zero_fraction"],
      elements: record["elements"],
    };
    const quantiles: { q: number; magnitude: number }[] = [];
    const rawQuantiles = record["quantiles"];
    if (rawQuantiles !== undefined) {
      if (typeof rawQuantiles !== "object" || rawQuantiles === null || Array.isArray(rawQuantiles)) problem("quantiles", 'expected an object such as { "0.5": 0.41, "0.99": 2.6 }');
      else {
        for (const [key, value] of Object.entries(rawQuantiles)) {
          const q = Number(key);
          if (!(q > 0 && q < 1)) problem(`quantiles.${key}`, "a quantile key must be a share strictly between 0 and 1");
          else if (typeof value !== "number" || !(value >= 0) || !Number.isFinite(value)) problem(`quantiles.${key}`, "expected a finite magnitude ≥ 0");
          else quantiles.push({ q, magnitude: value });
        }
      }
    }
    const statistic = checkFields(cells, quantiles, at, (key, message) => problem(key === "zero_fraction" ? "zeroFraction" : key, message));
    if (statistic) statistics.push(statistic);
  });
  return issues.length > 0 ? { ok: false, issues } : { ok: true, statistics };
}

function parseCsvStatistics(text: string, file: string): StatisticsResult {
  const parsed = parseCsv(text);
  if (!parsed.ok) return { ok: false, issues: [{ file, line: parsed.line, column: parsed.column, message: parsed.message }] };
  const rows = parsed.rows.filter((row) => !(row.cells.length === 1 && row.cells[0]!.trim() === ""));
  const header = rows[0];
  if (!header) return { ok: false, issues: [{ file, line: 1, column: 1, message: "empty file; expected a header row: tensor,role,rms,..." }] };
  const issues: StatisticsIssue[] = [];
  const columns = header.cells.map((c) => c.trim());
  const quantileColumns = new Map<number, number>();
  columns.forEach((name, index) => {
    const quantile = /^q(\d+)$/.exec(name);
    if (quantile) quantileColumns.set(index, Number(`0.${quantile[1]}`));
    else if (!(CSV_COLUMNS as readonly string[]).includes(name)) {
      issues.push({ file, line: header.line, column: index + 1, message: `unknown column ${JSON.stringify(name)}; accepted: ${CSV_COLUMNS.join(", ")}, q50, q99, ...` });
    }
  });
  for (const required of ["tensor", "role", "rms"]) {
    if (!columns.includes(required)) issues.push({ file, line: header.line, column: 1, message: `missing column "${required}"` });
  }
  if (issues.length > 0) return { ok: false, issues };
  const statistics: RecordedStatistic[] = [];
  for (const row of rows.slice(1)) {
    if (row.cells.length !== columns.length) {
      issues.push({ file, line: row.line, column: 1, message: `${row.cells.length} cells; the header has ${columns.length}` });
      continue;
    }
    const cells: Record<string, unknown> = {};
    const quantiles: { q: number; magnitude: number }[] = [];
    row.cells.forEach((cell, index) => {
      const name = columns[index]!;
      const text = cell.trim();
      if (text === "") return;
      const q = quantileColumns.get(index);
      if (q !== undefined) {
        const value = Number(text);
        if (!(value >= 0) || !Number.isFinite(value)) issues.push({ file, line: row.line, column: index + 1, message: `${name}: expected a finite magnitude ≥ 0, got ${JSON.stringify(text)}` });
        else quantiles.push({ q, magnitude: value });
        return;
      }
      cells[name] = name === "tensor" || name === "role" ? text : Number.isNaN(Number(text)) ? text : Number(text);
    });
    const statistic = checkFields(cells, quantiles, `line ${row.line}`, (key, message) =>
      issues.push({ file, line: row.line, column: Math.max(1, columns.indexOf(key) + 1), message: `${key}: ${message}` }),
    );
    if (statistic) statistics.push(statistic);
  }
  return issues.length > 0 ? { ok: false, issues } : { ok: true, statistics };
}

/** Validate one entry's fields (shared by both spellings). */
function checkFields(
  cells: Record<string, unknown>,
  quantiles: { q: number; magnitude: number }[],
  at: string,
  problem: (key: string, message: string) => void,
): RecordedStatistic | undefined {
  let ok = true;
  const fail = (key: string, message: string) => {
    ok = false;
    problem(key, message);
  };
  const tensor = cells["tensor"];
  if (typeof tensor !== "string" || tensor === "") fail("tensor", "expected a tensor id or a layer name");
  const role = cells["role"];
  if (typeof role !== "string" || !(STATISTIC_ROLES as readonly string[]).includes(role)) {
    fail("role", `expected one of ${STATISTIC_ROLES.join(", ")}, got ${JSON.stringify(role)}`);
  }
  const number = (key: string, check: (v: number) => boolean, expected: string): number | undefined => {
    const value = cells[key];
    if (value === undefined || value === null) return undefined;
    if (typeof value !== "number" || !check(value)) {
      fail(key, `expected ${expected}, got ${JSON.stringify(value)}`);
      return undefined;
    }
    return value;
  };
  const finiteNonNegative = (v: number) => Number.isFinite(v) && v >= 0;
  const rms = number("rms", finiteNonNegative, "a finite number ≥ 0");
  if (cells["rms"] === undefined) fail("rms", "missing; the rms over all elements is required");
  const max = number("max", finiteNonNegative, "a finite number ≥ 0");
  const zeroFraction = number("zero_fraction", (v) => v >= 0 && v <= 1, "a share between 0 and 1");
  const elements = number("elements", (v) => Number.isSafeInteger(v) && v > 0, "a positive whole number");
  if (!ok || rms === undefined) return undefined;
  const statistic: RecordedStatistic = { tensor: tensor as string, role: role as TensorRole, rms, quantiles: quantiles.sort((a, b) => a.q - b.q), at };
  if (max !== undefined) statistic.max = max;
  if (zeroFraction !== undefined) statistic.zeroFraction = zeroFraction;
  if (elements !== undefined) statistic.elements = elements;
  return statistic;
}

/** RFC 4180 records with their first line numbers; quoted fields may hold commas, quotes ("") and line breaks. */
export function parseCsv(text: string): { ok: true; rows: { line: number; cells: string[] }[] } | { ok: false; line: number; column: number; message: string } {
  const rows: { line: number; cells: string[] }[] = [];
  let line = 1;
  let column = 1;
  let cells: string[] = [];
  let cell = "";
  let rowLine = 1;
  let i = 0;
  let quoted = false;
  let quoteLine = 0;
  let quoteColumn = 0;
  const endRow = () => {
    cells.push(cell);
    rows.push({ line: rowLine, cells });
    cells = [];
    cell = "";
  };
  while (i < text.length) {
    const c = text[i]!;
    if (quoted) {
      if (c === '"') {
        if (text[i + 1] === '"') {
          cell += '"';
          i += 2;
          column += 2;
          continue;
        }
        quoted = false;
        i++;
        column++;
        const next = text[i];
        if (next !== undefined && next !== "," && next !== "\n" && next !== "\r") {
          return { ok: false, line, column, message: 'a closing quote must end the field (write "" for a quote inside)' };
        }
        continue;
      }
      if (c === "\n") {
        line++;
        column = 1;
      } else column++;
      cell += c;
      i++;
      continue;
    }
    if (c === '"' && cell === "") {
      quoted = true;
      quoteLine = line;
      quoteColumn = column;
      i++;
      column++;
      continue;
    }
    if (c === ",") {
      cells.push(cell);
      cell = "";
      i++;
      column++;
      continue;
    }
    if (c === "\r" || c === "\n") {
      endRow();
      i += c === "\r" && text[i + 1] === "\n" ? 2 : 1;
      line++;
      column = 1;
      rowLine = line;
      continue;
    }
    cell += c;
    i++;
    column++;
  }
  if (quoted) return { ok: false, line: quoteLine, column: quoteColumn, message: "a quoted field is never closed" };
  if (cell !== "" || cells.length > 0) endRow();
  return { ok: true, rows };
}
