/**
 * Lookup tables from every bit pattern of a 16- or 8-bit format to its value, built once and shared.
 * TEMPORARY decoding until src/formats lands its decoders (then the tables are built from those).
 */

const cache16 = new Map<string, Float32Array>();
const cache8 = new Map<string, Float32Array>();

/** Value of every binary16 code, indexed by the code. */
export function decodeTable16(name: "binary16"): Float32Array {
  let table = cache16.get(name);
  if (!table) {
    table = new Float32Array(65536);
    for (let code = 0; code < 65536; code++) table[code] = decodeCode(code, 5, 10, 15, "ieee");
    cache16.set(name, table);
  }
  return table;
}

/** Value of every 8-bit code of e4m3 or e5m2, indexed by the code. */
export function decodeTable8(name: "e4m3" | "e5m2"): Float32Array {
  let table = cache8.get(name);
  if (!table) {
    table = new Float32Array(256);
    for (let code = 0; code < 256; code++) {
      table[code] = name === "e4m3" ? decodeCode(code, 4, 3, 7, "nan-only") : decodeCode(code, 5, 2, 15, "ieee");
    }
    cache8.set(name, table);
  }
  return table;
}

function decodeCode(code: number, exponentBits: number, fractionBits: number, bias: number, specials: "ieee" | "nan-only"): number {
  const sign = code >> (exponentBits + fractionBits) ? -1 : 1;
  const field = (code >> fractionBits) & ((1 << exponentBits) - 1);
  const fraction = code & ((1 << fractionBits) - 1);
  const top = (1 << exponentBits) - 1;
  if (specials === "ieee" && field === top) return fraction === 0 ? sign * Infinity : NaN;
  if (specials === "nan-only" && field === top && fraction === (1 << fractionBits) - 1) return NaN;
  if (field === 0) return sign * fraction * 2 ** (1 - bias - fractionBits);
  return sign * (1 + fraction / 2 ** fractionBits) * 2 ** (field - bias);
}
