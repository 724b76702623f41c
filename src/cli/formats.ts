import { FORMAT_NAMES, FORMATS, type Format } from "../formats/index.js";
import { renderTable, type TableColumn } from "../report/table.js";
import { parseFormatList } from "./lists.js";

/** One format's limits as plain JSON: every number exact; Infinity is written as null. */
export interface FormatJson {
  name: string;
  bits: number;
  bytes: number;
  exponentBits: number;
  fractionBits: number;
  bias: number;
  precision: number;
  emin: number;
  emax: number;
  maxFinite: number;
  overflowThreshold: number | null;
  overflowsAtThreshold: boolean;
  minNormal: number;
  maxSubnormal: number;
  minSubnormal: number;
  flushBound: number;
  epsilon: number;
  unitRoundoff: number;
  dynamicRangeBinades: number;
  normalRangeBinades: number;
  hasInfinity: boolean;
  specials: string;
  computeOnly: boolean;
  defaultOverflow: string;
  subnormalsOftenFlushed: boolean;
  source: string;
}

/** A format record as JSON-safe data. */
export function formatJson(f: Format): FormatJson {
  return {
    name: f.name,
    bits: f.bits,
    bytes: f.bytes,
    exponentBits: f.exponentBits,
    fractionBits: f.fractionBits,
    bias: f.bias,
    precision: f.precision,
    emin: f.emin,
    emax: f.emax,
    maxFinite: f.maxFinite,
    overflowThreshold: Number.isFinite(f.overflowThreshold) ? f.overflowThreshold : null,
    overflowsAtThreshold: f.overflowsAtThreshold,
    minNormal: f.minNormal,
    maxSubnormal: f.maxSubnormal,
    minSubnormal: f.minSubnormal,
    flushBound: f.flushBound,
    epsilon: f.epsilon,
    unitRoundoff: f.unitRoundoff,
    dynamicRangeBinades: f.dynamicRangeBinades,
    normalRangeBinades: f.normalRangeBinades,
    hasInfinity: f.hasInfinity,
    specials: f.specials,
    computeOnly: f.computeOnly,
    defaultOverflow: f.defaultOverflow,
    subnormalsOftenFlushed: f.subnormalsOftenFlushed,
    source: f.source,
  };
}

/** `digits` significant digits, exponent form outside [1e-4, 1e6); exact integers in range stay whole. */
function short(value: number, digits = 5): string {
  if (!Number.isFinite(value)) return value > 0 ? "none" : "-";
  const abs = Math.abs(value);
  if (abs >= 1e-4 && abs < 1e6) return Number.isInteger(value) ? String(value) : String(Number(value.toPrecision(digits)));
  const [mantissa = "", exponent = ""] = value.toExponential(digits - 1).split("e");
  return `${mantissa.replace(/\.?0+$/, "")}e${exponent.replace("+", "")}`;
}

/**
 * The largest finite value and the overflow threshold, with enough digits to tell them apart (binary32 needs 9,
 * binary64 17). binary64's threshold is no binary64 number (it lies halfway between the largest finite value and
 * 2^1024), so it is written from its exact value.
 */
function limitPair(f: Format): [string, string] {
  const threshold = (digits: number): string => (Number.isFinite(f.overflowThreshold) ? short(f.overflowThreshold, digits) : exactThreshold(f, digits));
  let digits = 5;
  while (digits < 17 && short(f.maxFinite, digits) === threshold(digits)) digits++;
  const sign = f.overflowsAtThreshold ? "≥ " : "> ";
  return [short(f.maxFinite, digits), sign + threshold(digits)];
}

/**
 * The round-to-nearest-even overflow threshold of an IEEE format, (2 − 2^-p)·2^emax = 2^(emax+1) − 2^(emax−p) (IEEE
 * 754-2019 §4.3.1 and §7.4: a value at or past it rounds to infinity), to `digits` significant digits, computed in
 * integers (emax ≥ p, as for binary64) and written as {@link short} writes large numbers.
 */
function exactThreshold(f: Format, digits: number): string {
  const value = (1n << BigInt(f.emax + 1)) - (1n << BigInt(f.emax - f.precision));
  const text = value.toString();
  // round half up at the digit after the last kept one (the exact value has no trailing digits to settle a tie)
  let kept = BigInt(text.slice(0, digits));
  if (Number(text[digits] ?? "0") >= 5) kept += 1n;
  let exponent = text.length - 1;
  let mantissa = kept.toString();
  if (mantissa.length > digits) {
    mantissa = mantissa.slice(0, digits);
    exponent += 1;
  }
  const fraction = mantissa.slice(1).replace(/0+$/, "");
  return `${mantissa[0]}${fraction === "" ? "" : `.${fraction}`}e${exponent}`;
}

/** A power of two with its value: 2^-14 = 6.104e-5. */
function power(value: number): string {
  const [mantissa = "", exponent = ""] = value.toExponential(3).split("e");
  const decimal = value >= 1e-4 && value < 1e6 ? String(Number(value.toPrecision(4))) : `${mantissa.replace(/\.?0+$/, "")}e${exponent.replace("+", "")}`;
  return `2^${Math.log2(value)} = ${decimal}`;
}

const LAYOUT_COLUMNS: TableColumn[] = [
  { title: "format" },
  { title: "sign/exp/frac", align: "right" },
  { title: "bias", align: "right" },
  { title: "p", align: "right" },
  { title: "emin", align: "right" },
  { title: "emax", align: "right" },
  { title: "bytes", align: "right" },
  { title: "infinity" },
  { title: "on overflow" },
  { title: "use" },
];

const LIMIT_COLUMNS: TableColumn[] = [
  { title: "format" },
  { title: "largest finite", align: "right" },
  { title: "overflows at", align: "right" },
  { title: "smallest normal", align: "right" },
  { title: "smallest subnormal", align: "right" },
  { title: "epsilon", align: "right" },
  { title: "unit roundoff", align: "right" },
  { title: "binades", align: "right" },
];

/** Render the formats tables (layout, then limits), with notes that explain the columns. */
export function renderFormatsTable(formats: readonly Format[]): string {
  const layout = formats.map((f) => [
    f.name,
    `1/${f.exponentBits}/${f.fractionBits}`,
    f.bias,
    f.precision,
    f.emin,
    f.emax,
    f.bytes,
    f.hasInfinity ? "yes" : "no",
    f.defaultOverflow === "saturate" ? "saturates" : f.hasInfinity ? "infinity" : "NaN",
    f.computeOnly ? "compute only" : "storage",
  ]);
  const limits = formats.map((f) => [
    f.name,
    ...limitPair(f),
    power(f.minNormal),
    power(f.minSubnormal),
    `2^${Math.log2(f.epsilon)}`,
    `2^${Math.log2(f.unitRoundoff)}`,
    f.dynamicRangeBinades.toFixed(1),
  ]);
  const notes = [
    "overflows at: magnitudes past this round to infinity (or NaN, or saturate) under round-to-nearest-even;",
    "  ≥ means the tie itself overflows. p: significand bits with the hidden bit.",
    "epsilon = 2^(1-p), the gap above 1; unit roundoff = 2^-p, the largest relative rounding error of a normal value.",
    "binades: log2(largest finite / smallest subnormal), the dynamic range in powers of two.",
    "on overflow: the default; e4m3 (no infinity) saturates to ±448, or gives NaN with --overflow infinity-or-nan.",
  ];
  if (formats.some((f) => f.computeOnly)) {
    notes.push("tf32 is a compute precision applied to binary32 inputs of matrix products (held in 4 bytes, as binary32);");
    notes.push("  a plan that names it is judged on values rounded to tf32.");
  }
  if (formats.some((f) => f.subnormalsOftenFlushed)) {
    notes.push("bfloat16 subnormals are often flushed to zero by hardware; then its range ends at the smallest normal.");
  }
  return renderTable(LAYOUT_COLUMNS, layout) + "\n" + renderTable(LIMIT_COLUMNS, limits) + "\n" + notes.join("\n") + "\n";
}

/** `headroom formats`: a table of the number formats and their limits (or JSON). */
export async function runFormats(names: string[], options: { json?: boolean }): Promise<void> {
  const formats = names.length === 0 ? FORMAT_NAMES.map((name) => FORMATS[name]) : parseFormatList("formats", names);
  if (options.json) process.stdout.write(JSON.stringify(formats.map(formatJson), null, 2) + "\n");
  else process.stdout.write(renderFormatsTable(formats));
}
