/**
 * Lookup tables from every bit pattern of a 16- or 8-bit format to its binary32 value, from the format module's
 * decoder (every binary16, e4m3 and e5m2 value is exact in binary32). Built once and shared.
 */
import { decodeTable, FORMATS } from "../formats/index.js";

const cache = new Map<string, Float32Array>();

function table(name: "binary16" | "e4m3" | "e5m2"): Float32Array {
  let t = cache.get(name);
  if (!t) cache.set(name, (t = Float32Array.from(decodeTable(FORMATS[name]))));
  return t;
}

/** Value of every binary16 code, indexed by the code. */
export function decodeTable16(name: "binary16"): Float32Array {
  return table(name);
}

/** Value of every 8-bit code of e4m3 or e5m2, indexed by the code. */
export function decodeTable8(name: "e4m3" | "e5m2"): Float32Array {
  return table(name);
}
