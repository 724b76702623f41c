/**
 * The safetensors layout, parsed and validated without reading any tensor data.
 * Layout (the format's public description): 8 bytes N, an unsigned little-endian 64-bit integer; N bytes of a
 * UTF-8 JSON header beginning with "{" (trailing spaces allowed) mapping each tensor name to
 * { dtype, shape, data_offsets: [begin, end] }, offsets relative to the byte buffer that follows the header,
 * plus an optional "__metadata__" map of strings; then the byte buffer, little-endian.
 */
import { DTYPE_BYTES, FLOAT_DTYPES, type FloatDtype, type ScanIssue, type SkippedTensor, type TensorFileLayout, type TensorLayout } from "./types.js";
import { firstInvalidUtf8 } from "./utf8.js";

/** Headers this large or larger are refused before anything is allocated: a hostile length must not cost memory. */
export const MAX_HEADER_BYTES = 100 * 1024 * 1024;

/** safetensors dtypes that are not floating point: listed as skipped, never an error. */
const NON_FLOAT_DTYPES = new Set(["BOOL", "U8", "I8", "U16", "I16", "U32", "I32", "U64", "I64"]);

/** The outcome of reading the 8-byte prefix: the header length, or why the file cannot be read. */
export type SafetensorsPrefix = { ok: true; headerLength: number } | { ok: false; issue: ScanIssue };

/**
 * Read the header length from the file's first bytes and check it against the file size and the cap.
 * @param first the first min(8, size) bytes of the file
 */
export function parseSafetensorsPrefix(file: string, first: Uint8Array, fileSize: number): SafetensorsPrefix {
  if (fileSize < 8 || first.length < 8) {
    return fail(file, undefined, `file has ${fileSize} bytes, fewer than the 8-byte header length a safetensors file starts with`);
  }
  const view = new DataView(first.buffer, first.byteOffset, 8);
  const length = view.getBigUint64(0, true);
  if (length >= BigInt(MAX_HEADER_BYTES)) {
    return fail(file, 0, `header length ${length} bytes is 100 MB or more; refused`);
  }
  const headerLength = Number(length);
  if (8 + headerLength > fileSize) {
    return fail(file, 0, `header length ${headerLength} bytes runs past the end of the file (${fileSize} bytes)`);
  }
  if (headerLength < 2) return fail(file, 8, `header of ${headerLength} bytes cannot hold a JSON object`);
  return { ok: true, headerLength };
}

/** The outcome of parsing the header: the validated layout, or a problem that makes the whole file unreadable. */
export type SafetensorsHeader = { ok: true; layout: TensorFileLayout } | { ok: false; issue: ScanIssue };

/**
 * Parse and validate the JSON header. Problems with single tensors (unknown dtype, offsets out of range, sizes that do
 * not match dtype × shape, overlaps) become issues and those tensors are left out; the rest of the file stays readable.
 * @param header the N header bytes (file bytes 8 to 8 + N)
 */
export function parseSafetensorsHeader(file: string, header: Uint8Array, fileSize: number): SafetensorsHeader {
  const headerStart = 8;
  const dataStart = headerStart + header.length;
  const bad = firstInvalidUtf8(header);
  if (bad >= 0) return fail(file, headerStart + bad, "header is not valid UTF-8");
  const text = new TextDecoder("utf-8").decode(header);
  if (text.trimStart()[0] !== "{") {
    return fail(file, headerStart, 'header does not begin with "{" (a JSON object is required)');
  }
  let parsed: unknown;
  try {
    parsed = JSON.parse(text);
  } catch (error) {
    const message = error instanceof Error ? error.message : String(error);
    return fail(file, headerStart + jsonErrorByte(text, message), `header is not JSON: ${message}`);
  }
  if (typeof parsed !== "object" || parsed === null || Array.isArray(parsed)) {
    return fail(file, headerStart, "header is not a JSON object");
  }

  const issues: ScanIssue[] = [];
  const skipped: SkippedTensor[] = [];
  const candidates: TensorLayout[] = [];
  /** every entry with a usable byte range, float or not, for the overlap check */
  const ranges: { name: string; begin: number; end: number }[] = [];
  let metadata: Record<string, string> | undefined;

  for (const [name, entry] of Object.entries(parsed as Record<string, unknown>)) {
    if (name === "__metadata__") {
      const checked = checkMetadata(entry);
      if (typeof checked === "string") issues.push({ file, tensor: name, byteOffset: headerStart, message: checked });
      else metadata = checked;
      continue;
    }
    const problem = (message: string, byteOffset = headerStart): void => {
      issues.push({ file, tensor: name, byteOffset, message });
    };
    if (typeof entry !== "object" || entry === null || Array.isArray(entry)) {
      problem("header entry is not an object with dtype, shape and data_offsets");
      continue;
    }
    const { dtype, shape, data_offsets: offsets } = entry as Record<string, unknown>;
    if (typeof dtype !== "string") {
      problem("dtype is missing or not a string");
      continue;
    }
    if (!Array.isArray(shape) || !shape.every(isCount)) {
      problem(`shape ${JSON.stringify(shape)} is not a list of non-negative integers`);
      continue;
    }
    if (!Array.isArray(offsets) || offsets.length !== 2 || !offsets.every(isCount)) {
      problem(`data_offsets ${JSON.stringify(offsets)} is not a pair of non-negative integers [begin, end]`);
      continue;
    }
    const [begin, end] = offsets as [number, number];
    if (end < begin) {
      problem(`data_offsets [${begin}, ${end}] end before they begin`, dataStart + begin);
      continue;
    }
    const absoluteBegin = dataStart + begin;
    const absoluteEnd = dataStart + end;
    if (absoluteEnd > fileSize) {
      problem(
        `data [${absoluteBegin}, ${absoluteEnd}) runs past the end of the file (${fileSize} bytes): truncated or offsets out of range`,
        Math.min(absoluteBegin, fileSize),
      );
      continue;
    }
    ranges.push({ name, begin: absoluteBegin, end: absoluteEnd });
    const dims = shape as number[];
    const elements = dims.reduce((product, dim) => product * dim, 1);
    if (!Number.isSafeInteger(elements)) {
      problem(`shape ${JSON.stringify(dims)} has more elements than can be counted exactly`, absoluteBegin);
      continue;
    }
    if (NON_FLOAT_DTYPES.has(dtype)) {
      skipped.push({ name, dtype, shape: dims, reason: "not floating point" });
      continue;
    }
    if (!isFloatDtype(dtype)) {
      problem(`unknown dtype ${JSON.stringify(dtype)}; accepted: ${FLOAT_DTYPES.join(", ")} (integer and bool tensors are skipped)`, absoluteBegin);
      continue;
    }
    const byteLength = elements * DTYPE_BYTES[dtype];
    if (end - begin !== byteLength) {
      problem(
        `data holds ${end - begin} bytes but ${dtype} × ${JSON.stringify(dims)} needs ${byteLength}`,
        absoluteBegin,
      );
      continue;
    }
    candidates.push({ name, dtype, shape: dims, elements, begin: absoluteBegin, byteLength, littleEndian: true, order: "C" });
  }

  const overlapping = findOverlaps(ranges);
  for (const [name, other] of overlapping) {
    const range = ranges.find((r) => r.name === name)!;
    issues.push({
      file,
      tensor: name,
      byteOffset: range.begin,
      message: `data [${range.begin}, ${range.end}) overlaps the data of tensor ${JSON.stringify(other)}`,
    });
  }
  const tensors = candidates.filter((t) => !overlapping.has(t.name)).sort((a, b) => a.begin - b.begin);
  const layout: TensorFileLayout = { file, kind: "safetensors", size: fileSize, tensors, skipped, issues };
  if (metadata) layout.metadata = metadata;
  return { ok: true, layout };
}

// no offset where none points at something (a file too short to hold the header length)
function fail(file: string, byteOffset: number | undefined, message: string): { ok: false; issue: ScanIssue } {
  return { ok: false, issue: byteOffset === undefined ? { file, message } : { file, byteOffset, message } };
}

function isCount(value: unknown): value is number {
  return typeof value === "number" && Number.isSafeInteger(value) && value >= 0;
}

function isFloatDtype(dtype: string): dtype is FloatDtype {
  return (FLOAT_DTYPES as readonly string[]).includes(dtype);
}

function checkMetadata(entry: unknown): Record<string, string> | string {
  if (typeof entry !== "object" || entry === null || Array.isArray(entry)) return "__metadata__ is not a map of strings";
  for (const [key, value] of Object.entries(entry)) {
    if (typeof value !== "string") return `__metadata__ value of ${JSON.stringify(key)} is not a string`;
  }
  return entry as Record<string, string>;
}

/** Every tensor whose non-empty byte range shares a byte with another's, mapped to one tensor it overlaps. */
function findOverlaps(ranges: readonly { name: string; begin: number; end: number }[]): Map<string, string> {
  const sorted = ranges.filter((r) => r.end > r.begin).sort((a, b) => a.begin - b.begin || a.end - b.end);
  const overlaps = new Map<string, string>();
  let reach: { name: string; end: number } | undefined;
  for (const range of sorted) {
    if (reach && range.begin < reach.end) {
      overlaps.set(range.name, reach.name);
      if (!overlaps.has(reach.name)) overlaps.set(reach.name, range.name);
    }
    if (!reach || range.end > reach.end) reach = { name: range.name, end: range.end };
  }
  return overlaps;
}

/** The byte position a JSON.parse message points at ("... at position 12"), or 0 when it names none. */
function jsonErrorByte(text: string, message: string): number {
  const match = /position (\d+)/.exec(message);
  if (!match) return 0;
  const chars = Math.min(Number(match[1]), text.length);
  return new TextEncoder().encode(text.slice(0, chars)).length;
}
