/**
 * Chunk decoders: raw tensor bytes (in a buffer headroom allocated itself, so typed-array views at offset 0 are aligned)
 * to Float32Array or Float64Array values, in place where the element type allows.
 */
import { decodeArray, FORMATS } from "../formats/index.js";
import { DTYPE_BYTES, type FloatDtype } from "./types.js";

/** Decodes chunks of one dtype and byte order. The returned array is valid until the next call. */
export interface ChunkDecoder {
  readonly dtype: FloatDtype;
  /** decode the first `count` elements of `bytes`; may byte-swap `bytes` in place */
  decode(bytes: Buffer, count: number): Float32Array | Float64Array;
}

const HOST_LITTLE_ENDIAN = new Uint8Array(Uint16Array.of(1).buffer)[0] === 1;

/**
 * A decoder for `dtype` stored in the given byte order, with room for `capacity` elements per chunk.
 * Binary16, bfloat16 and the 8-bit formats decode exactly into binary32 (every value of theirs is a binary32 value),
 * through the format module's decodeArray.
 */
export function chunkDecoder(dtype: FloatDtype, littleEndian: boolean, capacity: number): ChunkDecoder {
  if (!HOST_LITTLE_ENDIAN) throw new RangeError("headroom reads tensor files on little-endian hosts only");
  const swap = !littleEndian && DTYPE_BYTES[dtype] > 1;
  switch (dtype) {
    case "F64":
      return {
        dtype,
        decode(bytes, count) {
          if (swap) bytes.subarray(0, count * 8).swap64();
          return new Float64Array(bytes.buffer, bytes.byteOffset, count);
        },
      };
    case "F32":
      return {
        dtype,
        decode(bytes, count) {
          if (swap) bytes.subarray(0, count * 4).swap32();
          return new Float32Array(bytes.buffer, bytes.byteOffset, count);
        },
      };
    case "BF16":
    case "F16": {
      const format = dtype === "BF16" ? FORMATS.bfloat16 : FORMATS.binary16;
      const out = new Float32Array(capacity);
      return {
        dtype,
        decode(bytes, count) {
          if (swap) bytes.subarray(0, count * 2).swap16();
          return decodeArray(format, new Uint16Array(bytes.buffer, bytes.byteOffset, count), out).subarray(0, count);
        },
      };
    }
    case "F8_E4M3":
    case "F8_E5M2": {
      const format = dtype === "F8_E4M3" ? FORMATS.e4m3 : FORMATS.e5m2;
      const out = new Float32Array(capacity);
      return {
        dtype,
        decode(bytes, count) {
          return decodeArray(format, new Uint8Array(bytes.buffer, bytes.byteOffset, count), out).subarray(0, count);
        },
      };
    }
  }
}
