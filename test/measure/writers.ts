/**
 * Independent writers of tensor files for the tests, written from each format's public description, not from
 * headroom's readers:
 * - safetensors: the format's public description ("8 bytes: N, an unsigned little-endian 64-bit integer, containing
 *   the size of the header; N bytes: a JSON UTF-8 string representing the header ... data_offsets point to the tensor
 *   data relative to the beginning of the byte buffer ... Rest of the file: byte-buffer"), little-endian data.
 * - .npy: NumPy's format description (numpy.lib.format): magic "\x93NUMPY", major and minor version bytes, header
 *   length as little-endian uint16 (1.0) or uint32 (2.0, 3.0), an ASCII (UTF-8 for 3.0) dict literal with 'descr',
 *   'fortran_order' and 'shape', padded with spaces and ended by "\n" so the data starts on a multiple of 64 bytes.
 * Element encodings: binary32/binary64 by DataView (IEEE 754-2019 interchange formats); binary16 by
 * @petamoriken/float16's setFloat16; bfloat16 as the top 16 bits of the binary32 pattern rounded to nearest even
 * (common practice); 8-bit codes are written raw by the tests.
 */
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { setFloat16 } from "@petamoriken/float16";

export type WriteDtype = "F64" | "F32" | "F16" | "BF16" | "F8_E4M3" | "F8_E5M2" | "I32" | "BOOL" | "U8";

const SIZES: Record<WriteDtype, number> = { F64: 8, F32: 4, F16: 2, BF16: 2, F8_E4M3: 1, F8_E5M2: 1, I32: 4, BOOL: 1, U8: 1 };

/** bfloat16 code of a binary32 value, rounded to nearest even (common practice); NaN stays a quiet NaN. */
export function bfloat16Code(x: number): number {
  const view = new DataView(new ArrayBuffer(4));
  view.setFloat32(0, x);
  const bits = view.getUint32(0);
  if (Number.isNaN(x)) return (bits >>> 16) | 0x40;
  const lsb = (bits >>> 16) & 1;
  return ((bits + 0x7fff + lsb) >>> 16) & 0xffff;
}

/** Encode values (or raw codes for the 8-bit and integer types) as little- or big-endian bytes. */
export function encode(dtype: WriteDtype, values: ArrayLike<number>, littleEndian = true): Uint8Array {
  const size = SIZES[dtype];
  const bytes = new Uint8Array(values.length * size);
  const view = new DataView(bytes.buffer);
  for (let i = 0; i < values.length; i++) {
    const v = values[i]!;
    const at = i * size;
    switch (dtype) {
      case "F64":
        view.setFloat64(at, v, littleEndian);
        break;
      case "F32":
        view.setFloat32(at, v, littleEndian);
        break;
      case "F16":
        setFloat16(view, at, v, littleEndian);
        break;
      case "BF16":
        view.setUint16(at, bfloat16Code(v), littleEndian);
        break;
      case "I32":
        view.setInt32(at, v, littleEndian);
        break;
      default:
        view.setUint8(at, v);
    }
  }
  return bytes;
}

export interface SafetensorsEntry {
  name: string;
  dtype: string;
  shape: number[];
  data: Uint8Array;
  /** override the offsets written into the header (for hostile files) */
  offsets?: [number, number];
}

/**
 * Bytes of a safetensors file: header (padded with spaces to a multiple of 8, as writers commonly do) then the data
 * of each entry in order. `gap` bytes of `gapByte` go between tensors (a hostile file; the description forbids holes).
 */
export function safetensorsBytes(
  entries: readonly SafetensorsEntry[],
  options: { metadata?: Record<string, string>; gap?: number; gapByte?: number; headerText?: string; headerLength?: bigint } = {},
): Uint8Array {
  const header: Record<string, unknown> = {};
  if (options.metadata) header["__metadata__"] = options.metadata;
  const gap = options.gap ?? 0;
  let offset = 0;
  const pieces: Uint8Array[] = [];
  for (const entry of entries) {
    const begin = offset;
    const end = begin + entry.data.length;
    header[entry.name] = { dtype: entry.dtype, shape: entry.shape, data_offsets: entry.offsets ?? [begin, end] };
    pieces.push(entry.data);
    offset = end;
    if (gap > 0) {
      pieces.push(new Uint8Array(gap).fill(options.gapByte ?? 0xff));
      offset += gap;
    }
  }
  let text = options.headerText ?? JSON.stringify(header);
  const raw = new TextEncoder().encode(text);
  const padded = options.headerText === undefined ? Math.ceil(raw.length / 8) * 8 : raw.length;
  text += " ".repeat(padded - raw.length);
  const headerBytes = new TextEncoder().encode(text);
  const prefix = new Uint8Array(8);
  new DataView(prefix.buffer).setBigUint64(0, options.headerLength ?? BigInt(headerBytes.length), true);
  return concat([prefix, headerBytes, ...pieces]);
}

/** Bytes of a .npy file of the given version, descr (e.g. "<f4", ">f8") and shape; data given as bytes. */
export function npyBytes(
  version: 1 | 2 | 3,
  descr: string,
  shape: readonly number[],
  data: Uint8Array,
  options: { fortran?: boolean; dictText?: string } = {},
): Uint8Array {
  const shapeText = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(", ")})`;
  const dict = options.dictText ?? `{'descr': '${descr}', 'fortran_order': ${options.fortran ? "True" : "False"}, 'shape': ${shapeText}, }`;
  const lengthBytes = version === 1 ? 2 : 4;
  const encoded = version === 3 ? new TextEncoder().encode(dict) : latin1(dict);
  const unpadded = 6 + 2 + lengthBytes + encoded.length + 1;
  const total = Math.ceil(unpadded / 64) * 64;
  const header = concat([encoded, new Uint8Array(total - unpadded).fill(0x20), Uint8Array.of(0x0a)]);
  const prefix = new Uint8Array(8 + lengthBytes);
  prefix.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, version, 0]);
  const view = new DataView(prefix.buffer);
  if (version === 1) view.setUint16(8, header.length, true);
  else view.setUint32(8, header.length, true);
  return concat([prefix, header, data]);
}

function latin1(text: string): Uint8Array {
  return Uint8Array.from(text, (c) => c.charCodeAt(0));
}

export function concat(pieces: readonly Uint8Array[]): Uint8Array {
  const out = new Uint8Array(pieces.reduce((n, p) => n + p.length, 0));
  let at = 0;
  for (const piece of pieces) {
    out.set(piece, at);
    at += piece.length;
  }
  return out;
}

/** A fresh temporary folder and a function writing files into it; call `cleanup` in afterAll. */
export function scratch(): { dir: string; write(name: string, bytes: Uint8Array): string; cleanup(): void } {
  const dir = mkdtempSync(join(tmpdir(), "headroom-measure-"));
  return {
    dir,
    write(name, bytes) {
      const path = join(dir, name);
      writeFileSync(path, bytes);
      return path;
    },
    cleanup() {
      rmSync(dir, { recursive: true, force: true });
    },
  };
}
