/**
 * The NumPy .npy layout, parsed and validated without reading array data.
 * Layout (NumPy's format description, numpy.lib.format): the magic "\x93NUMPY", a major and a minor version byte,
 * the header length (version 1: 2-byte little-endian; versions 2 and 3: 4-byte little-endian), then the header:
 * a Python dict literal with keys 'descr', 'fortran_order' and 'shape', ending in "\n" (latin-1 in versions 1 and 2,
 * UTF-8 in version 3). The data follows the header.
 */
import { MAX_HEADER_BYTES } from "./safetensors.js";
import type { FloatDtype, ScanIssue, TensorFileLayout } from "./types.js";
import { firstInvalidUtf8 } from "./utf8.js";

/** The six magic bytes every .npy file starts with. */
export const NPY_MAGIC = Uint8Array.of(0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59);

/** Bytes before the header: magic, two version bytes and the header length (2 bytes in version 1, 4 after). */
export type NpyPrefix = { ok: true; version: number; prefixLength: number; headerLength: number } | { ok: false; issue: ScanIssue };

/**
 * Read the magic, version and header length.
 * @param first the first min(12, size) bytes of the file
 */
export function parseNpyPrefix(file: string, first: Uint8Array, fileSize: number): NpyPrefix {
  if (first.length < 6 || !NPY_MAGIC.every((b, i) => first[i] === b)) {
    return failure(file, 0, 'not a .npy file: it does not start with the magic "\\x93NUMPY"');
  }
  // magic, two version bytes and a header length of at least 2 bytes: 10 bytes before any header
  if (first.length < 10) return failure(file, first.length, `file ends after ${first.length} bytes, inside the .npy prefix (magic, version, header length: 10 bytes)`);
  const major = first[6]!;
  const minor = first[7]!;
  if (major < 1 || major > 3 || minor !== 0) {
    return failure(file, 6, `.npy format version ${major}.${minor} is not known; accepted: 1.0, 2.0, 3.0`);
  }
  const view = new DataView(first.buffer, first.byteOffset, first.length);
  let prefixLength = 10;
  let headerLength: number;
  if (major === 1) headerLength = view.getUint16(8, true);
  else {
    if (first.length < 12) return failure(file, 8, "file ends inside the header length");
    headerLength = view.getUint32(8, true);
    prefixLength = 12;
  }
  if (headerLength >= MAX_HEADER_BYTES) return failure(file, 8, `header length ${headerLength} bytes is 100 MB or more; refused`);
  if (prefixLength + headerLength > fileSize) {
    return failure(file, 8, `header length ${headerLength} bytes runs past the end of the file (${fileSize} bytes)`);
  }
  return { ok: true, version: major, prefixLength, headerLength };
}

/** The outcome of parsing the header dict. */
export type NpyHeader = { ok: true; layout: TensorFileLayout } | { ok: false; issue: ScanIssue };

/**
 * Parse and validate the header dict, then check the data it describes lies within the file.
 * @param tensor the name given to the array (the file name without .npy)
 * @param header the header bytes
 */
export function parseNpyHeader(
  file: string,
  tensor: string,
  version: number,
  prefixLength: number,
  header: Uint8Array,
  fileSize: number,
): NpyHeader {
  const at = (offset: number, message: string): NpyHeader => ({
    ok: false,
    issue: { file, tensor, byteOffset: prefixLength + offset, message },
  });
  let text: string;
  if (version === 3) {
    const bad = firstInvalidUtf8(header);
    if (bad >= 0) return at(bad, "header is not valid UTF-8");
    text = new TextDecoder("utf-8").decode(header);
  } else {
    text = new TextDecoder("latin1").decode(header);
  }
  let dict: PyValue;
  try {
    dict = new PyLiteralParser(text).parseWhole();
  } catch (error) {
    if (error instanceof PyParseError) return at(charToByte(text, error.position, version), `malformed header dict: ${error.message}`);
    throw error;
  }
  if (!isDict(dict)) return at(0, "malformed header dict: the header is not a dict");
  const descr = dict.get("descr");
  const fortran = dict.get("fortran_order");
  const shape = dict.get("shape");
  for (const key of dict.keys()) {
    if (key !== "descr" && key !== "fortran_order" && key !== "shape") {
      return at(0, `malformed header dict: unexpected key ${JSON.stringify(key)}; expected descr, fortran_order, shape`);
    }
  }
  if (typeof fortran !== "boolean") return at(0, "malformed header dict: fortran_order must be True or False");
  if (!isTuple(shape) || !shape.items.every((d) => typeof d === "number" && Number.isSafeInteger(d) && d >= 0)) {
    return at(0, "malformed header dict: shape must be a tuple of non-negative integers");
  }
  const dims = shape.items as number[];
  const elements = dims.reduce((product, dim) => product * dim, 1);
  if (!Number.isSafeInteger(elements)) return at(0, `shape (${dims.join(", ")}) has more elements than can be counted exactly`);
  const dataStart = prefixLength + header.length;
  const layout: TensorFileLayout = { file, kind: "npy", size: fileSize, tensors: [], skipped: [], issues: [] };

  if (typeof descr !== "string") {
    // a structured dtype (a list of fields) is legal .npy but has no single float element type
    if (isList(descr)) {
      layout.skipped.push({ name: tensor, dtype: "structured", shape: dims, reason: "structured dtype (record fields)" });
      return { ok: true, layout };
    }
    return at(0, "malformed header dict: descr must be a string or a list of fields");
  }
  const type = /^([<>|=])([a-zA-Z])(\d+)$/.exec(descr);
  if (!type) {
    if (/^[<>|=]?[OUSVMm]/.test(descr)) {
      layout.skipped.push({ name: tensor, dtype: descr, shape: dims, reason: "not numeric data (objects, strings, dates or raw bytes)" });
      return { ok: true, layout };
    }
    return at(0, `unknown dtype ${JSON.stringify(descr)}; accepted: <f2, <f4, <f8 and their big-endian forms (>f2, ...)`);
  }
  const [, order, kind, sizeText] = type as unknown as [string, string, string, string];
  const itemSize = Number(sizeText);
  const dataBytes = elements * itemSize;
  if (dataStart + dataBytes > fileSize) {
    return {
      ok: false,
      issue: {
        file,
        tensor,
        byteOffset: Math.min(dataStart, fileSize),
        message: `data of ${dataBytes} bytes (${descr} × (${dims.join(", ")})) runs past the end of the file (${fileSize} bytes, data from byte ${dataStart}): truncated`,
      },
    };
  }
  const floatDtype = kind === "f" ? ({ 2: "F16", 4: "F32", 8: "F64" } as Record<number, FloatDtype>)[itemSize] : undefined;
  if (!floatDtype) {
    const reason = kind === "f" || kind === "c" ? "a float width headroom does not read" : "not floating point";
    layout.skipped.push({ name: tensor, dtype: descr, shape: dims, reason });
    return { ok: true, layout };
  }
  layout.tensors.push({
    name: tensor,
    dtype: floatDtype,
    shape: dims,
    elements,
    begin: dataStart,
    byteLength: dataBytes,
    // "=" is the writer's native order; NumPy writes an explicit "<" or ">" for multi-byte types, so "=" is rare: read it as little-endian
    littleEndian: order !== ">",
    order: fortran && dims.length > 1 ? "F" : "C",
  });
  return { ok: true, layout };
}

// -------------------------------------------------------------------------------------------------
// a parser for the Python literals a .npy header holds

type PyValue = string | number | boolean | null | PyTuple | PyList | Map<string, PyValue>;
interface PyTuple {
  tuple: true;
  items: PyValue[];
}
interface PyList {
  list: true;
  items: PyValue[];
}

function isDict(value: PyValue): value is Map<string, PyValue> {
  return value instanceof Map;
}
function isTuple(value: PyValue | undefined): value is PyTuple {
  return typeof value === "object" && value !== null && "tuple" in value;
}
function isList(value: PyValue | undefined): value is PyList {
  return typeof value === "object" && value !== null && "list" in value;
}

class PyParseError extends Error {
  constructor(
    message: string,
    readonly position: number,
  ) {
    super(message);
  }
}

/** Dicts, tuples, lists, quoted strings, integers (with Python 2's L suffix), True, False, None. Depth is capped. */
class PyLiteralParser {
  private pos = 0;
  private depth = 0;
  constructor(private readonly text: string) {}

  parseWhole(): PyValue {
    const value = this.value();
    this.space();
    if (this.pos < this.text.length) throw new PyParseError(`unexpected ${JSON.stringify(this.text[this.pos])} after the dict`, this.pos);
    return value;
  }

  private space(): void {
    while (this.pos < this.text.length && " \t\n\r".includes(this.text[this.pos]!)) this.pos++;
  }

  private value(): PyValue {
    this.space();
    const c = this.text[this.pos];
    if (c === undefined) throw new PyParseError("header ends too early", this.pos);
    if (c === "{") return this.nested(() => this.dict());
    if (c === "(") return this.nested(() => this.sequence(")"));
    if (c === "[") return this.nested(() => ({ list: true as const, items: this.sequence("]").items }));
    if (c === "'" || c === '"') return this.string();
    if (/[-0-9]/.test(c)) return this.integer();
    for (const [word, value] of [["True", true], ["False", false], ["None", null]] as const) {
      if (this.text.startsWith(word, this.pos)) {
        this.pos += word.length;
        return value;
      }
    }
    throw new PyParseError(`unexpected ${JSON.stringify(c)}`, this.pos);
  }

  private nested<T>(parse: () => T): T {
    if (++this.depth > 16) throw new PyParseError("nested too deeply", this.pos);
    const result = parse();
    this.depth--;
    return result;
  }

  private dict(): Map<string, PyValue> {
    const map = new Map<string, PyValue>();
    this.pos++; // {
    for (;;) {
      this.space();
      if (this.text[this.pos] === "}") {
        this.pos++;
        return map;
      }
      const keyAt = this.pos;
      const key = this.value();
      if (typeof key !== "string") throw new PyParseError("dict keys must be strings", keyAt);
      if (map.has(key)) throw new PyParseError(`key ${JSON.stringify(key)} appears twice`, keyAt);
      this.space();
      if (this.text[this.pos] !== ":") throw new PyParseError('expected ":" after a key', this.pos);
      this.pos++;
      map.set(key, this.value());
      this.space();
      if (this.text[this.pos] === ",") this.pos++;
      else if (this.text[this.pos] !== "}") throw new PyParseError('expected "," or "}"', this.pos);
    }
  }

  private sequence(close: string): PyTuple {
    const items: PyValue[] = [];
    this.pos++; // ( or [
    for (;;) {
      this.space();
      if (this.text[this.pos] === close) {
        this.pos++;
        return { tuple: true, items };
      }
      items.push(this.value());
      this.space();
      if (this.text[this.pos] === ",") this.pos++;
      else if (this.text[this.pos] !== close) throw new PyParseError(`expected "," or "${close}"`, this.pos);
    }
  }

  private string(): string {
    const quote = this.text[this.pos]!;
    const start = this.pos;
    let out = "";
    this.pos++;
    while (this.pos < this.text.length) {
      const c = this.text[this.pos]!;
      if (c === quote) {
        this.pos++;
        return out;
      }
      if (c === "\\") {
        const next = this.text[this.pos + 1];
        if (next === undefined) break;
        out += next;
        this.pos += 2;
        continue;
      }
      if (c === "\n") break;
      out += c;
      this.pos++;
    }
    throw new PyParseError("unterminated string", start);
  }

  private integer(): number {
    const match = /^-?\d+L?/.exec(this.text.slice(this.pos, this.pos + 40));
    if (!match) throw new PyParseError("expected an integer", this.pos);
    this.pos += match[0].length;
    const digits = match[0].replace("L", "");
    const value = Number(digits);
    if (!Number.isSafeInteger(value)) throw new PyParseError(`integer ${digits} is too large`, this.pos - match[0].length);
    return value;
  }
}

function charToByte(text: string, position: number, version: number): number {
  if (version !== 3) return position; // latin-1: one byte per character
  return new TextEncoder().encode(text.slice(0, position)).length;
}

function failure(file: string, byteOffset: number, message: string): { ok: false; issue: ScanIssue } {
  return { ok: false, issue: { file, byteOffset, message } };
}
