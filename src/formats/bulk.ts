/**
 * Bulk kernels over typed arrays: rounding in place, one-pass class and binade counts, and codecs of raw
 * 16-bit and 8-bit patterns. Hot loops for file scanning and simulation: no allocation per element, exponent
 * fields read through a Uint32Array view of the data, lookup tables for the 8- and 16-bit codes.
 */
import type { Format } from "./model.js";
import { binadeOf, checkFormatRecord, decode, encodeRounded, formatTables, nanCode, roundDetailed, roundTo, type FormatTables, type RoundOptions } from "./round.js";

/**
 * Typed arrays of values the kernels accept.
 * @example const data: FloatArray = new Float32Array(1024);
 */
export type FloatArray = Float64Array | Float32Array;

/**
 * Typed arrays of raw bit patterns: Uint16Array for 16-bit formats, Uint8Array for 8-bit ones.
 * @example const codes: CodeArray = new Uint16Array(1024); // binary16 or bfloat16 patterns
 */
export type CodeArray = Uint16Array | Uint8Array;

// the views below read the high word of a binary64 at index 2i + 1, which holds on little-endian machines only
const LITTLE_ENDIAN = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1;

/**
 * Index of binade e (floor(log2|x|) = e) in a binade histogram: e + BINADE_OFFSET.
 * @example binadeHistogram(Float64Array.of(0.75)).counts[-1 + BINADE_OFFSET] // => 1
 */
export const BINADE_OFFSET = 1074;
/**
 * Length of a binade histogram: every binary64 binade, from 2^-1074 to 2^1023.
 * @example new Float64Array(BINADE_COUNT) // one bin per binary64 binade
 */
export const BINADE_COUNT = 2098;

function overflowValue(format: Format, options: RoundOptions | undefined): number {
  const overflow = options?.overflow ?? format.defaultOverflow;
  if (overflow === "saturate") return format.maxFinite;
  return format.hasInfinity ? Infinity : NaN;
}

/**
 * Round every element of `data` into the format, in place (one rounding each, directly from the stored value).
 * Same results as roundTo element by element. Returns `data`.
 * @example roundArrayInPlace(FORMATS.bfloat16, Float64Array.of(1 / 3))[0] // => 0.333984375
 */
export function roundArrayInPlace<T extends FloatArray>(format: Format, data: T, options?: RoundOptions): T {
  // the entry points' one check of the format: formatTables checks an argument when it builds its tables (a name given
  // for the record is a TypeError naming it), and only records have tables; the kernels take the tables from here
  return roundInto(format, formatTables(format), data, data, options);
}

/**
 * Round `source` into the format, writing the results into `target` (a new array of the same kind when omitted);
 * `source` is not modified. `target` may be `source` itself, or a Float64Array for Float32Array data.
 * @example roundArray(FORMATS.binary16, Float64Array.of(65519, 65520)) // => Float64Array [65504, Infinity]
 */
export function roundArray<T extends FloatArray, U extends FloatArray = T>(format: Format, source: T, options?: RoundOptions, target?: U): U {
  const tables = formatTables(format);
  const out = (target ?? (source instanceof Float64Array ? new Float64Array(source.length) : new Float32Array(source.length))) as U;
  if (out.length < source.length) throw new RangeError(`target holds ${out.length} values; ${source.length} given`);
  return roundInto(format, tables, source, out, options);
}

function roundInto<U extends FloatArray>(format: Format, tables: FormatTables, source: FloatArray, target: U, options: RoundOptions | undefined): U {
  const mode = options?.mode ?? "nearest-even";
  if (mode !== "nearest-even" || !LITTLE_ENDIAN) {
    for (let i = 0; i < source.length; i++) target[i] = roundTo(format, source[i] as number, options);
    return target;
  }
  const flush = options?.flushSubnormals === true;
  const overflowTo = overflowValue(format, options);
  if (source instanceof Float64Array) roundFloat64Nearest(format, tables, source, target, overflowTo, flush);
  else roundFloat32Nearest(format, tables, source, target, overflowTo, flush);
  return target;
}

// Two kernels per source type, so that each loop sees one target type (keeps V8's element access monomorphic).
function roundFloat64Nearest(format: Format, tables: FormatTables, source: Float64Array, target: FloatArray, overflowTo: number, flush: boolean): void {
  if (target instanceof Float64Array) roundFloat64To64(format, tables, source, target, overflowTo, flush);
  else roundFloat64To32(format, tables, source, target, overflowTo, flush);
}

function roundFloat64To64(format: Format, tables: FormatTables, source: Float64Array, target: Float64Array, overflowTo: number, flush: boolean): void {
  const words = new Uint32Array(source.buffer, source.byteOffset, source.length * 2);
  const magic = tables.magic64;
  const max = format.maxFinite;
  // results below this become a signed zero: the smallest normal when flushing, else only exact zeros
  const zeroBelow = flush ? format.minNormal : Number.MIN_VALUE;
  const n = source.length;
  for (let i = 0; i < n; i++) {
    const x = source[i] as number;
    const m = magic[((words[2 * i + 1] as number) >>> 20) & 0x7ff] as number;
    // (x + M) − M rounds x to the format's grid with ties to even (see FormatTables.magic64); it is symmetric
    // in the sign of x, so no data-dependent sign branch is needed (a random sign would defeat branch prediction)
    let r = x + m - m;
    if (Math.abs(r) > max) r = x > 0 ? overflowTo : -overflowTo;
    // x · 0 is a zero with x's sign: the addition above turns −0 and tiny negatives into +0
    else if (Math.abs(r) < zeroBelow) r = x * 0;
    target[i] = r;
  }
}

function roundFloat64To32(format: Format, tables: FormatTables, source: Float64Array, target: Float32Array, overflowTo: number, flush: boolean): void {
  const words = new Uint32Array(source.buffer, source.byteOffset, source.length * 2);
  const magic = tables.magic64;
  const max = format.maxFinite;
  // results below this become a signed zero: the smallest normal when flushing, else only exact zeros
  const zeroBelow = flush ? format.minNormal : Number.MIN_VALUE;
  const n = source.length;
  for (let i = 0; i < n; i++) {
    const x = source[i] as number;
    const m = magic[((words[2 * i + 1] as number) >>> 20) & 0x7ff] as number;
    let r = x + m - m;
    if (Math.abs(r) > max) r = x > 0 ? overflowTo : -overflowTo;
    else if (Math.abs(r) < zeroBelow) r = x * 0;
    target[i] = r;
  }
}

function roundFloat32Nearest(format: Format, tables: FormatTables, source: Float32Array, target: FloatArray, overflowTo: number, flush: boolean): void {
  const words = new Uint32Array(source.buffer, source.byteOffset, source.length);
  const magic = tables.magic32;
  const max = format.maxFinite;
  // results below this become a signed zero: the smallest normal when flushing, else only exact zeros
  const zeroBelow = flush ? format.minNormal : Number.MIN_VALUE;
  const n = source.length;
  for (let i = 0; i < n; i++) {
    const x = source[i] as number;
    const m = magic[((words[i] as number) >>> 23) & 0xff] as number;
    let r = x + m - m;
    if (Math.abs(r) > max) r = x > 0 ? overflowTo : -overflowTo;
    else if (Math.abs(r) < zeroBelow) r = x * 0;
    target[i] = r;
  }
}

// --------------------------------------------------------------------------------------------------------------
// counting

/** counts[index] += 1 (a small function V8 inlines; keeps the loops readable under noUncheckedIndexedAccess) */
function addOne(counts: Float64Array, index: number): void {
  counts[index] = (counts[index] as number) + 1;
}

/**
 * What happens to the elements of an array when stored in a format, counted in one pass. The first nine
 * counts partition `total`: zeros + flushed + subnormal + normal + overflowed + saturated + infinities + nans.
 * Counts are float64 (exact to 2^53) so multi-gigabyte scans accumulate without wrapping.
 * @example countClasses(FORMATS.e4m3, Float64Array.of(500)).saturated // => 1
 */
export interface ClassCounts {
  total: number;
  /** inputs that are exactly ±0 */
  zeros: number;
  /** nonzero finite inputs that became ±0 (underflow past half the smallest subnormal, or flushed subnormals) */
  flushed: number;
  /** inputs whose rounded value is subnormal */
  subnormal: number;
  /** inputs whose rounded value is normal (finite, not clamped) */
  normal: number;
  /** finite inputs that became ±infinity (or NaN in e4m3's non-saturating mode) */
  overflowed: number;
  /** finite inputs clamped to ±maxFinite (saturating mode, or toward-zero rounding) */
  saturated: number;
  /** inputs that are ±infinity */
  infinities: number;
  /** inputs that are NaN */
  nans: number;
  /** finite inputs (zeros included) that the format represents exactly */
  exact: number;
  /** largest finite |x| seen (0 if none) */
  maxAbs: number;
  /** smallest nonzero finite |x| seen (Infinity if none) */
  minNonzeroAbs: number;
  /** histogram of floor(log2|x|) over finite nonzero inputs, index e + BINADE_OFFSET */
  binades: Float64Array;
}

/**
 * Empty counts, to pass as `into` when accumulating over chunks.
 * @example emptyClassCounts().total // => 0
 */
export function emptyClassCounts(): ClassCounts {
  return {
    total: 0, zeros: 0, flushed: 0, subnormal: 0, normal: 0, overflowed: 0, saturated: 0, infinities: 0, nans: 0,
    exact: 0, maxAbs: 0, minNonzeroAbs: Infinity, binades: new Float64Array(BINADE_COUNT),
  };
}

/**
 * Count, in one pass, what storing each element in the format does (see ClassCounts), plus a histogram of the
 * input binades. Pass `into` to add to earlier counts (streaming over chunks of a file).
 * @example countClasses(FORMATS.binary16, Float64Array.of(0, 1e-8, 1, 7e4)).flushed // => 1
 */
export function countClasses(format: Format, data: FloatArray, options?: RoundOptions, into?: ClassCounts): ClassCounts {
  const tables = formatTables(format);
  const counts = into ?? emptyClassCounts();
  const mode = options?.mode ?? "nearest-even";
  if (mode !== "nearest-even" || !LITTLE_ENDIAN) countGeneric(format, data, options, counts);
  else if (data instanceof Float64Array) countFloat64Nearest(format, tables, data, options, counts);
  else countFloat32Nearest(format, tables, data, options, counts);
  return counts;
}

function countFloat64Nearest(format: Format, tables: FormatTables, data: Float64Array, options: RoundOptions | undefined, c: ClassCounts): void {
  const words = new Uint32Array(data.buffer, data.byteOffset, data.length * 2);
  const magic = tables.magic64;
  const binades = c.binades;
  const max = format.maxFinite;
  const minNormal = format.minNormal;
  const flush = options?.flushSubnormals === true;
  const saturate = (options?.overflow ?? format.defaultOverflow) === "saturate";
  let zeros = 0, flushed = 0, subnormal = 0, normal = 0, overflowed = 0, infinities = 0, nans = 0, exact = 0;
  let maxAbs = c.maxAbs, minAbs = c.minNonzeroAbs;
  const n = data.length;
  for (let i = 0; i < n; i++) {
    const field = ((words[2 * i + 1] as number) >>> 20) & 0x7ff;
    const a = Math.abs(data[i] as number);
    if (field === 0x7ff) {
      if (a === Infinity) infinities++;
      else nans++;
      continue;
    }
    if (a === 0) {
      zeros++;
      exact++;
      continue;
    }
    if (a > maxAbs) maxAbs = a;
    if (a < minAbs) minAbs = a;
    const e = field !== 0 ? field - 1023 : binadeOf(a);
    addOne(binades, e + BINADE_OFFSET);
    const m = magic[field] as number;
    const r = a + m - m;
    if (r > max) overflowed++;
    else if (r === 0) flushed++;
    else if (r < minNormal) {
      if (flush) flushed++;
      else {
        subnormal++;
        if (r === a) exact++;
      }
    } else {
      normal++;
      if (r === a) exact++;
    }
  }
  // saturating mode moves every overflow into "saturated" (same elements, other outcome)
  c.total += n;
  c.zeros += zeros;
  c.flushed += flushed;
  c.subnormal += subnormal;
  c.normal += normal;
  if (saturate) c.saturated += overflowed;
  else c.overflowed += overflowed;
  c.infinities += infinities;
  c.nans += nans;
  c.exact += exact;
  c.maxAbs = maxAbs;
  c.minNonzeroAbs = minAbs;
}

function countFloat32Nearest(format: Format, tables: FormatTables, data: Float32Array, options: RoundOptions | undefined, c: ClassCounts): void {
  const words = new Uint32Array(data.buffer, data.byteOffset, data.length);
  const magic = tables.magic32;
  const binades = c.binades;
  const max = format.maxFinite;
  const minNormal = format.minNormal;
  const flush = options?.flushSubnormals === true;
  const saturate = (options?.overflow ?? format.defaultOverflow) === "saturate";
  let zeros = 0, flushed = 0, subnormal = 0, normal = 0, overflowed = 0, infinities = 0, nans = 0, exact = 0;
  let maxAbs = c.maxAbs, minAbs = c.minNonzeroAbs;
  const n = data.length;
  for (let i = 0; i < n; i++) {
    const word = words[i] as number;
    const field = (word >>> 23) & 0xff;
    const a = Math.abs(data[i] as number);
    if (field === 0xff) {
      if (a === Infinity) infinities++;
      else nans++;
      continue;
    }
    if (a === 0) {
      zeros++;
      exact++;
      continue;
    }
    if (a > maxAbs) maxAbs = a;
    if (a < minAbs) minAbs = a;
    // binary32 subnormals: value = fraction · 2^-149, so floor(log2) = 31 − clz(fraction) − 149
    const e = field !== 0 ? field - 127 : -118 - Math.clz32(word & 0x7fffff);
    addOne(binades, e + BINADE_OFFSET);
    const m = magic[field] as number;
    const r = a + m - m;
    if (r > max) overflowed++;
    else if (r === 0) flushed++;
    else if (r < minNormal) {
      if (flush) flushed++;
      else {
        subnormal++;
        if (r === a) exact++;
      }
    } else {
      normal++;
      if (r === a) exact++;
    }
  }
  c.total += n;
  c.zeros += zeros;
  c.flushed += flushed;
  c.subnormal += subnormal;
  c.normal += normal;
  if (saturate) c.saturated += overflowed;
  else c.overflowed += overflowed;
  c.infinities += infinities;
  c.nans += nans;
  c.exact += exact;
  c.maxAbs = maxAbs;
  c.minNonzeroAbs = minAbs;
}

/** Any mode, element by element through roundDetailed (stochastic and toward-zero rounding). */
function countGeneric(format: Format, data: FloatArray, options: RoundOptions | undefined, c: ClassCounts): void {
  const binades = c.binades;
  for (let i = 0; i < data.length; i++) {
    const x = data[i] as number;
    const a = Math.abs(x);
    c.total++;
    if (x !== x) {
      c.nans++;
      continue;
    }
    if (a === Infinity) {
      c.infinities++;
      continue;
    }
    if (a === 0) {
      c.zeros++;
      c.exact++;
      continue;
    }
    if (a > c.maxAbs) c.maxAbs = a;
    if (a < c.minNonzeroAbs) c.minNonzeroAbs = a;
    addOne(binades, binadeOf(a) + BINADE_OFFSET);
    const result = roundDetailed(format, x, options);
    switch (result.class) {
      case "zero":
        c.flushed++;
        break;
      case "subnormal":
        c.subnormal++;
        break;
      case "normal":
        c.normal++;
        break;
      case "saturated":
        c.saturated++;
        break;
      default:
        c.overflowed++;
    }
    if (result.value === x) c.exact++;
  }
}

/**
 * Counts of binades over a format-free scan (see binadeHistogram).
 * @example binadeHistogram(Float32Array.of(0, 2)).zeros // => 1
 */
export interface BinadeHistogram {
  total: number;
  zeros: number;
  infinities: number;
  nans: number;
  /** counts of floor(log2|x|) over finite nonzero values, index e + BINADE_OFFSET */
  counts: Float64Array;
}

/**
 * A histogram of floor(log2|x|) over the finite nonzero elements, covering every binary64 binade
 * (index e + BINADE_OFFSET). Pass `into` to accumulate over chunks.
 * @example binadeHistogram(Float64Array.of(1, 3, 0.5)).counts[0 + BINADE_OFFSET] // => 1
 */
export function binadeHistogram(data: FloatArray, into?: BinadeHistogram): BinadeHistogram {
  const h = into ?? { total: 0, zeros: 0, infinities: 0, nans: 0, counts: new Float64Array(BINADE_COUNT) };
  const counts = h.counts;
  let zeros = 0, infinities = 0, nans = 0;
  const n = data.length;
  if (!LITTLE_ENDIAN) {
    for (let i = 0; i < n; i++) {
      const a = Math.abs(data[i] as number);
      if (a !== a) nans++;
      else if (a === Infinity) infinities++;
      else if (a === 0) zeros++;
      else addOne(counts, binadeOf(a) + BINADE_OFFSET);
    }
  } else if (data instanceof Float64Array) {
    const words = new Uint32Array(data.buffer, data.byteOffset, n * 2);
    for (let i = 0; i < n; i++) {
      const high = words[2 * i + 1] as number;
      const field = (high >>> 20) & 0x7ff;
      if (field === 0x7ff) {
        if (((high & 0xfffff) | (words[2 * i] as number)) === 0) infinities++;
        else nans++;
      } else if (field !== 0) addOne(counts, field + (BINADE_OFFSET - 1023));
      else if (((high & 0x7fffffff) | (words[2 * i] as number)) === 0) zeros++;
      else addOne(counts, binadeOf(data[i] as number) + BINADE_OFFSET);
    }
  } else {
    const words = new Uint32Array(data.buffer, data.byteOffset, n);
    for (let i = 0; i < n; i++) {
      const word = words[i] as number;
      const field = (word >>> 23) & 0xff;
      const fraction = word & 0x7fffff;
      if (field === 0xff) {
        if (fraction === 0) infinities++;
        else nans++;
      } else if (field !== 0) addOne(counts, field + (BINADE_OFFSET - 127));
      else if (fraction === 0) zeros++;
      // binary32 subnormals: value = fraction · 2^-149, so floor(log2) = 31 − clz(fraction) − 149
      else addOne(counts, -118 - Math.clz32(fraction) + BINADE_OFFSET);
    }
  }
  h.total += n;
  h.zeros += zeros;
  h.infinities += infinities;
  h.nans += nans;
  return h;
}

// --------------------------------------------------------------------------------------------------------------
// codecs of raw patterns

const decodeTables64 = new WeakMap<Format, Float64Array>();
const decodeTables32 = new WeakMap<Format, Float32Array>();

/**
 * Every code's value, for formats of 16 bits or fewer (65,536 or 256 entries, built once).
 * @example decodeTable(FORMATS.e4m3)[0x7e] // => 448
 */
export function decodeTable(format: Format): Float64Array {
  let table = decodeTables64.get(format);
  if (table === undefined) {
    checkFormatRecord(format);
    if (format.bits > 16) throw new RangeError(`${format.name} codes are ${format.bits} bits; a decode table needs 16 or fewer`);
    const size = 2 ** format.bits;
    table = new Float64Array(size);
    for (let code = 0; code < size; code++) table[code] = decode(format, code);
    decodeTables64.set(format, table);
  }
  return table;
}

function decodeTable32(format: Format): Float32Array {
  let table = decodeTables32.get(format);
  if (table === undefined) {
    table = Float32Array.from(decodeTable(format));
    decodeTables32.set(format, table);
  }
  return table;
}

function checkCodeArray(format: Format, codes: CodeArray): void {
  const width = codes instanceof Uint16Array ? 16 : 8;
  if (format.bits !== width) {
    throw new RangeError(`${format.name} codes are ${format.bits} bits; got a ${width}-bit array (binary16 and bfloat16 take Uint16Array, e4m3 and e5m2 Uint8Array)`);
  }
}

/**
 * Decode raw bit patterns of a 16-bit (Uint16Array) or 8-bit (Uint8Array) format into values. Writes into
 * `target` (a new Float32Array when omitted; every 16- and 8-bit value is exact in binary32) and returns it.
 * @example decodeArray(FORMATS.e4m3, Uint8Array.of(0x7e, 0x01)) // => Float32Array [448, 0.001953125]
 */
export function decodeArray<T extends FloatArray = Float32Array>(format: Format, codes: CodeArray, target?: T): T {
  checkFormatRecord(format);
  checkCodeArray(format, codes);
  const out = (target ?? new Float32Array(codes.length)) as T;
  if (out.length < codes.length) throw new RangeError(`target holds ${out.length} values; ${codes.length} codes given`);
  const n = codes.length;
  if (out instanceof Float32Array && format.name === "bfloat16" && format.exponentBits === 8 && format.fractionBits === 7 && LITTLE_ENDIAN) {
    // bfloat16 is the top half of a binary32 pattern
    const words = new Uint32Array(out.buffer, out.byteOffset, n);
    for (let i = 0; i < n; i++) words[i] = (codes[i] as number) << 16;
    return out;
  }
  const table = out instanceof Float32Array ? decodeTable32(format) : decodeTable(format);
  for (let i = 0; i < n; i++) out[i] = table[codes[i] as number] as number;
  return out;
}

const ENCODE_BLOCK = new Float64Array(4096);
const ENCODE_BLOCK_WORDS = new Uint32Array(ENCODE_BLOCK.buffer);

/**
 * Round values into a 16-bit or 8-bit format and write their bit patterns into `codes` (a new array of the
 * right width when omitted). NaN results are written as the canonical NaN code.
 * @example encodeArray(FORMATS.binary16, Float64Array.of(1, 65504)) // => Uint16Array [0x3c00, 0x7bff]
 */
export function encodeArray<C extends CodeArray = CodeArray>(format: Format, data: FloatArray, options?: RoundOptions, codes?: C): C {
  const tables = formatTables(format);
  if (format.bits !== 16 && format.bits !== 8) {
    throw new RangeError(`${format.name} codes are ${format.bits} bits; encodeArray handles 16- and 8-bit formats`);
  }
  const out = (codes ?? (format.bits === 16 ? new Uint16Array(data.length) : new Uint8Array(data.length))) as C;
  checkCodeArray(format, out);
  if (out.length < data.length) throw new RangeError(`target holds ${out.length} codes; ${data.length} values given`);
  const fractionBits = format.fractionBits;
  const signBit = 2 ** (format.bits - 1);
  const fieldTop = 2 ** format.exponentBits - 1;
  const nan = nanCode(format);
  const minNormal = format.minNormal;
  const minSubnormal = format.minSubnormal;
  const fieldShift = format.bias - 1023;
  // round a block at a time into a reused buffer, then read each rounded value's binary64 fields
  const rounded = ENCODE_BLOCK;
  const words = ENCODE_BLOCK_WORDS;
  for (let start = 0; start < data.length; start += rounded.length) {
    const end = Math.min(start + rounded.length, data.length);
    const block = rounded.subarray(0, end - start);
    roundInto(format, tables, data.subarray(start, end), block, options);
    for (let j = 0; j < block.length; j++) {
      const r = block[j] as number;
      let code: number;
      if (!LITTLE_ENDIAN) code = encodeRounded(format, r);
      else {
        const high = words[2 * j + 1] as number;
        const sign = high >>> 31 === 0 ? 0 : signBit;
        const a = Math.abs(r);
        if (r !== r) code = nan;
        else if (a === Infinity) code = sign | (fieldTop << fractionBits);
        else if (a < minNormal) code = sign | (a / minSubnormal);
        else {
          // a normal value on the grid: its binary64 exponent re-biased, and the top fraction bits
          const field = ((high >>> 20) & 0x7ff) + fieldShift;
          code = sign | (field << fractionBits) | ((high & 0xfffff) >>> (20 - fractionBits));
        }
      }
      out[start + j] = code;
    }
  }
  return out;
}
