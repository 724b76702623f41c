/**
 * Scalar rounding of binary64 values into a format, classification, bit codecs and the grid around a value.
 * Rounding is direct from binary64 (never through binary32, whose double rounding differs near midpoints).
 */
import { pow2, type Format, type OverflowMode } from "./model.js";

/**
 * How a value is rounded onto the format's grid.
 * @example roundTo(FORMATS.binary16, 1.0009, { mode: "toward-zero" }) // => 1
 */
export type RoundingMode = "nearest-even" | "toward-zero" | "stochastic";

/**
 * The rounding modes, in the order the CLI lists them.
 * @example ROUNDING_MODES[0] // => "nearest-even"
 */
export const ROUNDING_MODES = ["nearest-even", "toward-zero", "stochastic"] as const satisfies readonly RoundingMode[];

/**
 * Options shared by every rounding function.
 * @example roundTo(FORMATS.bfloat16, 1e-39, { flushSubnormals: true }) // => 0
 */
export interface RoundOptions {
  /** default "nearest-even" (IEEE 754-2019 roundTiesToEven) */
  mode?: RoundingMode;
  /** what happens past the largest finite value; default: the format's `defaultOverflow` (saturate for e4m3, else infinity-or-nan) */
  overflow?: OverflowMode;
  /** results below the smallest normal become zero of the same sign (after rounding), as some hardware does for bfloat16 */
  flushSubnormals?: boolean;
  /** uniform source on [0, 1) for stochastic rounding; required in that mode (pass a seeded one for reproducible runs) */
  random?: () => number;
}

/**
 * The class of a rounded result. "saturated" means a value beyond the range was clamped to ±maxFinite;
 * "zero" covers both exact zeros and nonzero values that flushed (see `isFlushed`).
 * @example classify(FORMATS.binary16, 1e-6) // => "subnormal"
 */
export type ValueClass = "zero" | "subnormal" | "normal" | "infinite" | "nan" | "saturated";

/**
 * The value classes, in increasing order of trouble.
 * @example VALUE_CLASSES.indexOf("nan") // => 5
 */
export const VALUE_CLASSES = ["zero", "subnormal", "normal", "saturated", "infinite", "nan"] as const satisfies readonly ValueClass[];

// --------------------------------------------------------------------------------------------------------------
// binary64 bit access (little-endian words: [low, high])

const scratch = new Float64Array(1);
const scratchWords = new Uint32Array(scratch.buffer);

/**
 * floor(log2 a) for a finite a > 0, exact (read from the exponent field; binary64 subnormals via the leading zeros).
 * @example binadeOf(0.75) // => -1
 */
export function binadeOf(a: number): number {
  scratch[0] = a;
  const high = scratchWords[1] as number;
  const field = (high >>> 20) & 0x7ff;
  if (field !== 0) return field - 1023;
  const highFraction = high & 0xfffff;
  if (highFraction !== 0) return -1023 - (Math.clz32(highFraction) - 12);
  return -1043 - Math.clz32(scratchWords[0] as number);
}

/** true for −0 and negative numbers (and NaNs with the sign bit set) */
function signBit(x: number): boolean {
  scratch[0] = x;
  return (scratchWords[1] as number) >>> 31 === 1;
}

// --------------------------------------------------------------------------------------------------------------
// per-format constants for the kernels

/**
 * Tables the rounding kernels read; built once per format record.
 * @example formatTables(FORMATS.binary16).magic64.length // => 2048
 */
export interface FormatTables {
  /**
   * Indexed by a binary64 exponent field: the constant M = 1.5·2^52·q, where q is the format's grid spacing in
   * that binade. For |x| < 2^51·q, (|x| + M) − M rounds |x| to a multiple of q with ties to even, exactly,
   * because the sum lies in a binade whose binary64 spacing is q (and M/q is even). 0 where no rounding is
   * needed (binary64, Inf/NaN, or binades above emax, which overflow anyway).
   */
  readonly magic64: Float64Array;
  /** the same, indexed by a binary32 exponent field (for Float32Array data) */
  readonly magic32: Float64Array;
  /** grid spacing by binary64 exponent field (top binade's spacing above emax) */
  readonly spacing64: Float64Array;
}

const tableCache = new WeakMap<Format, FormatTables>();

/**
 * A JavaScript caller may pass a format's name where its record belongs (`roundTo("binary16", x)`); say so instead of
 * failing deep inside with "Invalid value used as weak map key". Checked when a format's tables are first built.
 */
export function checkFormatRecord(format: unknown): asserts format is Format {
  if (typeof format !== "object" || format === null || typeof (format as Partial<Format>).precision !== "number") {
    const hint = typeof format === "string" ? ` (the record of a name is FORMATS[${JSON.stringify(format)}], or getFormat(name))` : "";
    throw new TypeError(`expected a format record such as FORMATS.binary16, got ${typeof format === "string" ? JSON.stringify(format) : String(format)}${hint}`);
  }
}

/**
 * The kernel tables of a format (built on first use, then cached).
 * @example formatTables(FORMATS.bfloat16).magic64[1023] // => 1.5 * 2 ** 45 (spacing 2^-7 at 1)
 */
export function formatTables(format: Format): FormatTables {
  let tables = tableCache.get(format);
  if (tables === undefined) {
    checkFormatRecord(format);
    tables = buildTables(format);
    tableCache.set(format, tables);
  }
  return tables;
}

function spacingFor(format: Format, e: number): number {
  const clamped = Math.min(Math.max(e, format.emin), format.emax);
  return pow2(clamped - format.precision + 1);
}

function magicFor(format: Format, e: number): number {
  if (format.precision >= 53 || e > format.emax) return 0;
  return 1.5 * pow2(52) * spacingFor(format, e);
}

function buildTables(format: Format): FormatTables {
  const magic64 = new Float64Array(2048);
  const spacing64 = new Float64Array(2048);
  for (let field = 0; field < 2047; field++) {
    const e = field === 0 ? -1023 : field - 1023;
    magic64[field] = magicFor(format, e);
    spacing64[field] = spacingFor(format, e);
  }
  spacing64[2047] = spacingFor(format, format.emax);
  const magic32 = new Float64Array(256);
  for (let field = 0; field < 255; field++) magic32[field] = magicFor(format, field === 0 ? -127 : field - 127);
  return { magic64, magic32, spacing64 };
}

// --------------------------------------------------------------------------------------------------------------
// the scalar kernel

const CLASS_ZERO = 0;
const CLASS_SUBNORMAL = 1;
const CLASS_NORMAL = 2;
const CLASS_INFINITE = 3;
const CLASS_NAN = 4;
const CLASS_SATURATED = 5;
const CLASS_NAMES: readonly ValueClass[] = ["zero", "subnormal", "normal", "infinite", "nan", "saturated"];

/** The outcome of one rounding, kept in module state so the scalar API allocates nothing. */
let lastClass = CLASS_ZERO;
let lastFlushed = false;

/** Round |x| (a ≥ 0, possibly Inf) to the grid, unbounded above; the overflow check comes after. */
function roundMagnitude(format: Format, a: number, mode: RoundingMode, random: (() => number) | undefined): number {
  if (mode === "nearest-even") {
    scratch[0] = a;
    const field = ((scratchWords[1] as number) >>> 20) & 0x7ff;
    const magic = formatTables(format).magic64[field] as number;
    return a + magic - magic;
  }
  if (a === Infinity || format.precision >= 53) return a;
  const q = spacingFor(format, binadeOf(a === 0 ? 1 : a));
  // a / q is exact: q is a power of two no larger than a's own binary64 spacing allows to lose bits
  const scaled = a / q;
  const floor = Math.floor(scaled);
  if (mode === "toward-zero") return floor * q;
  if (random === undefined) throw new TypeError("stochastic rounding needs options.random, a uniform source on [0, 1)");
  // round up with probability equal to the distance from the lower grid point (Connolly, Higham & Mary 2021, mode 1)
  const fraction = scaled - floor;
  return (fraction > 0 && random() < fraction ? floor + 1 : floor) * q;
}

function roundCore(format: Format, x: number, options: RoundOptions | undefined): number {
  lastFlushed = false;
  if (x !== x) {
    lastClass = CLASS_NAN;
    return NaN;
  }
  const mode = options?.mode ?? "nearest-even";
  const overflow = options?.overflow ?? format.defaultOverflow;
  const negative = signBit(x);
  const a = negative ? -x : x;
  let r: number;
  if (a === Infinity) {
    // OCP 8-bit specification: an infinite input saturates in saturating mode; E4M3 has no infinity, so NaN otherwise
    if (overflow === "saturate") {
      r = format.maxFinite;
      lastClass = CLASS_SATURATED;
    } else if (format.hasInfinity) {
      r = Infinity;
      lastClass = CLASS_INFINITE;
    } else {
      lastClass = CLASS_NAN;
      return NaN;
    }
  } else {
    r = roundMagnitude(format, a, mode, options?.random);
    if (r > format.maxFinite) {
      // IEEE 754-2019 §7.4: toward zero carries overflow to the largest finite value; RNE and stochastic
      // follow the overflow mode (OCP 8-bit specification: saturating or infinity/NaN)
      if (mode === "toward-zero" || overflow === "saturate") {
        r = format.maxFinite;
        lastClass = CLASS_SATURATED;
      } else if (format.hasInfinity) {
        r = Infinity;
        lastClass = CLASS_INFINITE;
      } else {
        lastClass = CLASS_NAN;
        return NaN;
      }
    } else if (r === 0) {
      lastClass = CLASS_ZERO;
      lastFlushed = a !== 0;
    } else if (r < format.minNormal) {
      if (options?.flushSubnormals === true) {
        r = 0;
        lastClass = CLASS_ZERO;
        lastFlushed = true;
      } else {
        lastClass = CLASS_SUBNORMAL;
      }
    } else {
      lastClass = CLASS_NORMAL;
    }
  }
  return negative ? -r : r;
}

// --------------------------------------------------------------------------------------------------------------
// public scalar API

/**
 * Round a binary64 value into a format, directly (one rounding), and return the result as a binary64 number.
 * Default: round to nearest, ties to even (IEEE 754-2019 §4.3.1), overflow per the format's `defaultOverflow`.
 * NaN stays NaN; signed zeros keep their sign. Never throws, except for stochastic mode without `random`.
 * @example roundTo(FORMATS.binary16, 1.337) // => 1.3369140625
 */
export function roundTo(format: Format, x: number, options?: RoundOptions): number {
  return roundCore(format, x, options);
}

/**
 * The class of x after rounding into the format.
 * @example classify(FORMATS.e4m3, 465, { overflow: "saturate" }) // => "saturated"
 */
export function classify(format: Format, x: number, options?: RoundOptions): ValueClass {
  roundCore(format, x, options);
  return CLASS_NAMES[lastClass] as ValueClass;
}

/**
 * A rounded value with its class and whether a nonzero input became zero.
 * @example roundDetailed(FORMATS.binary16, 65520).class // => "infinite"
 */
export interface RoundResult {
  value: number;
  class: ValueClass;
  /** true when a nonzero finite input rounded (or was flushed) to zero */
  flushed: boolean;
}

/**
 * Round and classify in one call.
 * @example roundDetailed(FORMATS.binary16, 1e-8) // => { value: 0, class: "zero", flushed: true }
 */
export function roundDetailed(format: Format, x: number, options?: RoundOptions): RoundResult {
  const value = roundCore(format, x, options);
  return { value, class: CLASS_NAMES[lastClass] as ValueClass, flushed: lastFlushed };
}

/**
 * Whether a nonzero finite x becomes zero in the format (it underflows past half the smallest subnormal, or
 * lands among the subnormals with flushSubnormals set).
 * @example isFlushed(FORMATS.binary16, 1e-8) // => true
 */
export function isFlushed(format: Format, x: number, options?: RoundOptions): boolean {
  roundCore(format, x, options);
  return lastFlushed;
}

/**
 * |round(x) − x| / |x|: the relative error of storing x in the format. 0 for x = 0; Infinity when x overflows
 * to infinity; NaN for NaN input or when the result is NaN.
 * @example relativeError(FORMATS.bfloat16, 1 / 3) // => 0.00390625 (about 2^-8)
 */
export function relativeError(format: Format, x: number, options?: RoundOptions): number {
  const r = roundCore(format, x, options);
  if (x === 0) return r === 0 ? 0 : Infinity;
  if (!Number.isFinite(x)) return x === r ? 0 : NaN;
  return Math.abs(r - x) / Math.abs(x);
}

/**
 * |round(x) − x|: the absolute error of storing x in the format (Infinity when x overflows to infinity).
 * @example absoluteError(FORMATS.binary16, 0.1) // => 0.0000244140625 (about 2.44e-5)
 */
export function absoluteError(format: Format, x: number, options?: RoundOptions): number {
  const r = roundCore(format, x, options);
  if (r === x) return 0;
  return Math.abs(r - x);
}

/**
 * The unit in the last place at x: the grid spacing of the binade [2^e, 2^(e+1)) holding |x|, that is
 * 2^(max(e, emin) − p + 1) (Goldberg 1991, "ulp"; SCIENCE.md §1.1). ulp(0) is the smallest subnormal; beyond the
 * largest binade it is the top binade's spacing; Infinity for ±Infinity, NaN for NaN.
 * @example ulp(FORMATS.binary16, 1) // => 0.0009765625
 */
export function ulp(format: Format, x: number): number {
  if (x !== x) return NaN;
  const a = Math.abs(x);
  if (a === Infinity) return Infinity;
  if (a === 0) return format.minSubnormal;
  return spacingFor(format, binadeOf(a));
}

/** The smallest grid value ≥ a, or > a when strict; a ≥ 0 finite. May exceed maxFinite. */
function gridAbove(format: Format, a: number, strict: boolean): number {
  if (a === 0) return strict ? format.minSubnormal : 0;
  const q = spacingFor(format, binadeOf(a));
  const scaled = a / q;
  const floor = Math.floor(scaled);
  if (!strict && floor === scaled) return a;
  return (floor + 1) * q;
}

/** The largest grid value < a (strict); a > 0 finite. */
function gridBelow(format: Format, a: number): number {
  const e = binadeOf(a);
  const q = spacingFor(format, e);
  // below a power of two the spacing halves (unless we are at the bottom of the normal range)
  if (a === pow2(e) && e > format.emin && e <= format.emax + 1) return a - q / 2;
  const scaled = a / q;
  const ceil = Math.ceil(scaled);
  return (ceil - 1) * q;
}

/**
 * The smallest value of the format strictly greater than x (IEEE 754-2019 §5.3.1 nextUp, over any binary64 x).
 * Above maxFinite: +Infinity for formats with infinities, NaN for e4m3 (it has no value there).
 * nextUp(−minSubnormal) is −0.
 * @example nextUp(FORMATS.binary16, 1) // => 1.0009765625
 */
export function nextUp(format: Format, x: number): number {
  if (x !== x) return NaN;
  if (x === Infinity) return Infinity;
  if (x === -Infinity) return -format.maxFinite;
  if (x < 0) {
    const down = nextDownMagnitude(format, -x);
    return down === 0 ? -0 : -down;
  }
  if (x >= format.maxFinite) return format.hasInfinity ? Infinity : NaN;
  return gridAbove(format, x, true);
}

/** the largest format magnitude strictly below a (a > 0), capped at maxFinite */
function nextDownMagnitude(format: Format, a: number): number {
  if (a > format.maxFinite) return format.maxFinite;
  return gridBelow(format, a);
}

/**
 * The largest value of the format strictly less than x (IEEE 754-2019 §5.3.1 nextDown, over any binary64 x).
 * @example nextDown(FORMATS.binary16, 1) // => 0.99951171875
 */
export function nextDown(format: Format, x: number): number {
  if (x !== x) return NaN;
  if (x === -Infinity) return -Infinity;
  const up = nextUp(format, -x);
  return up === 0 ? (Object.is(up, -0) ? 0 : -0) : -up;
}

/**
 * The nearest format values at or around x: the largest ≤ x and the smallest ≥ x (each may be ±Infinity
 * past the range). Useful to show what a value sits between.
 * @example bracket(FORMATS.binary16, 0.1) // => [0.0999755859375, 0.10003662109375]
 */
export function bracket(format: Format, x: number): [number, number] {
  if (x !== x) return [NaN, NaN];
  if (x < 0) {
    const [low, high] = bracket(format, -x);
    return [-high, -low];
  }
  if (x > format.maxFinite) return [format.maxFinite, format.hasInfinity ? Infinity : NaN];
  const up = gridAbove(format, x, false);
  return [up === x ? x : nextDown(format, up), up];
}

// --------------------------------------------------------------------------------------------------------------
// bit codecs

function checkCodeRange(format: Format, code: number): void {
  if (!Number.isInteger(code) || code < 0 || code >= 2 ** format.bits) {
    throw new RangeError(`bit pattern ${String(code)} is not a ${format.bits}-bit ${format.name} code; expected an integer from 0 to ${2 ** format.bits - 1}`);
  }
}

/**
 * The canonical NaN code: positive, quiet (top fraction bit set) for IEEE formats; S.1111.111 for e4m3.
 * @example nanCode(FORMATS.binary16) // => 0x7e00
 */
export function nanCode(format: Format): number {
  const fieldTop = 2 ** format.exponentBits - 1;
  const fraction = format.hasInfinity ? 2 ** (format.fractionBits - 1) : 2 ** format.fractionBits - 1;
  return fieldTop * 2 ** format.fractionBits + fraction;
}

/**
 * The bit pattern of x rounded into the format, as an unsigned integer (sign, exponent, fraction from the top).
 * NaN results give the canonical NaN (see nanCode). For binary64, whose patterns exceed 2^53, use encodeBigInt.
 * @example encode(FORMATS.binary16, 65504) // => 0x7bff
 */
export function encode(format: Format, x: number, options?: RoundOptions): number {
  if (format.bits > 32) throw new RangeError(`${format.name} bit patterns do not fit a number; use encodeBigInt`);
  return encodeRounded(format, roundCore(format, x, options));
}

/**
 * Encode a value already on the format's grid (or ±Inf/NaN).
 * @example encodeRounded(FORMATS.e4m3, 448) // => 0x7e
 */
export function encodeRounded(format: Format, r: number): number {
  if (r !== r) return nanCode(format);
  const signValue = signBit(r) ? 2 ** (format.bits - 1) : 0;
  const a = Math.abs(r);
  const fractionScale = 2 ** format.fractionBits;
  if (a === Infinity) return signValue + (2 ** format.exponentBits - 1) * fractionScale;
  if (a < format.minNormal) return signValue + a / format.minSubnormal;
  const e = binadeOf(a);
  const fraction = a / pow2(e - format.fractionBits) - fractionScale;
  return signValue + (e + format.bias) * fractionScale + fraction;
}

/**
 * The bit pattern of x rounded into the format, as a bigint (works for every format, binary64 included).
 * @example encodeBigInt(FORMATS.binary64, 1) // => 0x3ff0000000000000n
 */
export function encodeBigInt(format: Format, x: number, options?: RoundOptions): bigint {
  const r = roundCore(format, x, options);
  if (format.bits <= 32) return BigInt(encodeRounded(format, r));
  const view = new DataView(new ArrayBuffer(8));
  view.setFloat64(0, r !== r ? NaN : r);
  const bits = view.getBigUint64(0);
  // a binary64-like format wider than 32 bits: only binary64 itself is supported
  if (format.exponentBits !== 11 || format.fractionBits !== 52) throw new RangeError(`cannot encode ${format.name}`);
  return r !== r ? 0x7ff8000000000000n : bits;
}

/**
 * The value of a bit pattern (number for formats up to 32 bits; bigint or number for binary64).
 * Throws a RangeError for a pattern outside the format's width.
 * @example decode(FORMATS.e4m3, 0x7e) // => 448
 */
export function decode(format: Format, code: number | bigint): number {
  if (typeof code === "bigint") {
    if (code < 0n || code >= 1n << BigInt(format.bits)) {
      throw new RangeError(`bit pattern ${code} is not a ${format.bits}-bit ${format.name} code`);
    }
    if (format.bits > 32) {
      if (format.exponentBits !== 11 || format.fractionBits !== 52) throw new RangeError(`cannot decode ${format.name}`);
      const view = new DataView(new ArrayBuffer(8));
      view.setBigUint64(0, code);
      return view.getFloat64(0);
    }
    return decode(format, Number(code));
  }
  if (format.bits > 32) {
    if (!Number.isSafeInteger(code) || code < 0) throw new RangeError(`bit pattern ${String(code)} is not a ${format.name} code`);
    return decode(format, BigInt(code));
  }
  checkCodeRange(format, code);
  const fractionScale = 2 ** format.fractionBits;
  const signScale = 2 ** (format.bits - 1);
  const negative = code >= signScale;
  const magnitude = negative ? code - signScale : code;
  const field = Math.floor(magnitude / fractionScale);
  const fraction = magnitude - field * fractionScale;
  const fieldTop = 2 ** format.exponentBits - 1;
  let a: number;
  if (field === fieldTop && format.specials === "ieee") {
    if (fraction !== 0) return NaN;
    a = Infinity;
  } else if (field === fieldTop && fraction === fractionScale - 1) {
    return NaN;
  } else if (field === 0) {
    a = fraction * format.minSubnormal;
  } else {
    a = (fractionScale + fraction) * pow2(field - format.bias - format.fractionBits);
  }
  return negative ? -a : a;
}

/**
 * The bit pattern as a hex string of the format's width (tf32's 19 bits show as 5 digits).
 * @example formatCode(FORMATS.binary16, 0x7bff) // => "0x7bff"
 */
export function formatCode(format: Format, code: number | bigint): string {
  const digits = Math.ceil(format.bits / 4);
  return "0x" + code.toString(16).padStart(digits, "0");
}
