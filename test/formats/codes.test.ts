import { getFloat16 } from "@petamoriken/float16";
import { describe, expect, it } from "vitest";
import {
  FORMATS,
  decode,
  decodeArray,
  decodeTable,
  encode,
  encodeArray,
  encodeBigInt,
  formatCode,
  nanCode,
  type Format,
} from "../../src/formats/index.js";

/** ±0 compare with Object.is; NaN equals NaN */
function same(a: number, b: number): boolean {
  return Object.is(a, b) || (Number.isNaN(a) && Number.isNaN(b));
}

describe("binary16: all 65,536 bit patterns", () => {
  it("decode like @petamoriken/float16 getFloat16 and re-encode bit-exactly (NaNs to the canonical quiet NaN)", () => {
    const view = new DataView(new ArrayBuffer(2));
    const f = FORMATS.binary16;
    let nanCount = 0;
    for (let code = 0; code < 65536; code++) {
      view.setUint16(0, code);
      const expected = getFloat16(view, 0); // @petamoriken/float16 3.9.3
      const value = decode(f, code);
      if (!same(value, expected)) throw new Error(`code ${formatCode(f, code)}: ${value} vs ${expected}`);
      const back = encode(f, value);
      if (Number.isNaN(value)) {
        nanCount++;
        if (back !== 0x7e00) throw new Error(`NaN code ${formatCode(f, code)} re-encoded as ${formatCode(f, back)}`);
      } else if (back !== code) throw new Error(`code ${formatCode(f, code)} re-encoded as ${formatCode(f, back)}`);
    }
    // IEEE 754-2019 §3.4: exponent all ones with nonzero fraction: 2 signs × 1023 fractions
    expect(nanCount).toBe(2046);
  });

  it("decodeArray and encodeArray agree with the scalar codec over every pattern", () => {
    const f = FORMATS.binary16;
    const codes = new Uint16Array(65536).map((_, i) => i);
    const values64 = decodeArray(f, codes, new Float64Array(65536));
    const values32 = decodeArray(f, codes);
    const back = encodeArray(f, values64);
    for (let code = 0; code < 65536; code++) {
      const value = decode(f, code);
      if (!same(values64[code] as number, value) || !same(values32[code] as number, value)) throw new Error(`decodeArray ${code}`);
      const expected = Number.isNaN(value) ? 0x7e00 : code;
      if (back[code] !== expected) throw new Error(`encodeArray ${formatCode(f, code)} gave ${back[code]}`);
    }
  });
});

describe("bfloat16: all 65,536 bit patterns", () => {
  it("decode as the top half of a binary32 pattern (bfloat16 definition) and re-encode bit-exactly", () => {
    const f = FORMATS.bfloat16;
    const word = new Uint32Array(1);
    const asFloat = new Float32Array(word.buffer);
    const codes = new Uint16Array(65536).map((_, i) => i);
    const fast = decodeArray(f, codes);
    const viaTable = decodeArray(f, codes, new Float64Array(65536));
    for (let code = 0; code < 65536; code++) {
      word[0] = code << 16;
      const expected = asFloat[0] as number;
      const value = decode(f, code);
      if (!same(value, expected) || !same(fast[code] as number, expected) || !same(viaTable[code] as number, expected)) {
        throw new Error(`code ${formatCode(f, code)}: ${value} vs ${expected}`);
      }
      const back = encode(f, value);
      if (back !== (Number.isNaN(value) ? nanCode(f) : code)) throw new Error(`code ${formatCode(f, code)} re-encoded as ${back}`);
    }
  });
});

function checkEightBit(f: Format, expectedNanCodes: number[]): void {
  const values: number[] = [];
  for (let code = 0; code < 256; code++) {
    const value = decode(f, code);
    values.push(value);
    if (Number.isNaN(value)) {
      expect(expectedNanCodes).toContain(code);
      expect(encode(f, value)).toBe(nanCode(f));
    } else {
      expect(encode(f, value), `code ${formatCode(f, code)}`).toBe(code);
      // OCP 8-bit specification: in saturating mode an infinite input becomes ±max
      const saturated = Number.isFinite(value) ? code : encode(f, Math.sign(value) * f.maxFinite);
      expect(encode(f, value, { overflow: "saturate" })).toBe(saturated);
    }
  }
  expect(values.filter(Number.isNaN).length).toBe(expectedNanCodes.length);
  // ordered: positive codes increase strictly with the code, negative codes mirror them
  const positive = values.slice(0, 128).filter((v) => !Number.isNaN(v));
  for (let i = 1; i < positive.length; i++) expect(positive[i] as number).toBeGreaterThan(positive[i - 1] as number);
  for (let code = 0; code < 128; code++) {
    const p = values[code] as number;
    const n = values[code + 128] as number;
    expect(same(n, -p)).toBe(true);
  }
  const table = decodeTable(f);
  for (let code = 0; code < 256; code++) expect(same(table[code] as number, values[code] as number)).toBe(true);
  const all = Uint8Array.from({ length: 256 }, (_, i) => i);
  const decoded = decodeArray(f, all);
  const reencoded = encodeArray(f, decoded);
  for (let code = 0; code < 256; code++) {
    expect(reencoded[code]).toBe(Number.isNaN(values[code] as number) ? nanCode(f) : code);
  }
}

describe("the 256 codes of each 8-bit format (OCP 8-bit floating point specification)", () => {
  it("e4m3: NaN only at S.1111.111 (0x7f, 0xff); 0x7e is 448; no infinities; all others decode, re-encode and are ordered", () => {
    checkEightBit(FORMATS.e4m3, [0x7f, 0xff]);
    expect(decode(FORMATS.e4m3, 0x7e)).toBe(448); // S.1111.110
    expect(decode(FORMATS.e4m3, 0x08)).toBe(2 ** -6); // S.0001.000 smallest normal
    expect(decode(FORMATS.e4m3, 0x07)).toBe(0.013671875); // S.0000.111 largest subnormal
    expect(decode(FORMATS.e4m3, 0x01)).toBe(2 ** -9); // S.0000.001 smallest subnormal
    expect(Object.is(decode(FORMATS.e4m3, 0x80), -0)).toBe(true);
  });

  it("e5m2: infinities at S.11111.00, NaN at S.11111.{01,10,11}; all others decode, re-encode and are ordered", () => {
    checkEightBit(FORMATS.e5m2, [0x7d, 0x7e, 0x7f, 0xfd, 0xfe, 0xff]);
    expect(decode(FORMATS.e5m2, 0x7b)).toBe(57344); // S.11110.11
    expect(decode(FORMATS.e5m2, 0x7c)).toBe(Infinity);
    expect(decode(FORMATS.e5m2, 0xfc)).toBe(-Infinity);
    expect(decode(FORMATS.e5m2, 0x04)).toBe(2 ** -14); // S.00001.00
    expect(decode(FORMATS.e5m2, 0x03)).toBe(4.57763671875e-5); // S.00000.11
    expect(decode(FORMATS.e5m2, 0x01)).toBe(2 ** -16); // S.00000.01
  });
});

describe("codecs of the wider formats", () => {
  it("binary32 codes agree with a Float32Array view (ECMAScript binary32 storage)", () => {
    const word = new Uint32Array(1);
    const asFloat = new Float32Array(word.buffer);
    const samples = [0, 1, 0x3f800000, 0x7f7fffff, 0x7f800000, 0x00000001, 0x007fffff, 0x80800000, 0xc0490fdb, 0xff7fffff];
    for (const code of samples) {
      word[0] = code;
      const expected = asFloat[0] as number;
      expect(decode(FORMATS.binary32, code)).toBe(expected);
      expect(encode(FORMATS.binary32, expected)).toBe(code);
    }
  });

  it("binary64 codes go through bigint (ECMAScript DataView getFloat64)", () => {
    expect(encodeBigInt(FORMATS.binary64, 1)).toBe(0x3ff0000000000000n);
    expect(decode(FORMATS.binary64, 0x7fefffffffffffffn)).toBe(Number.MAX_VALUE);
    expect(decode(FORMATS.binary64, 1n)).toBe(Number.MIN_VALUE);
    expect(() => encode(FORMATS.binary64, 1)).toThrow(RangeError);
  });

  it("tf32 codes are 19 bits: sign, 8 exponent bits, 10 fraction bits (CUDA math API)", () => {
    expect(encode(FORMATS.tf32, 1)).toBe(127 << 10);
    expect(encode(FORMATS.tf32, -2)).toBe((1 << 18) | (128 << 10));
    expect(decode(FORMATS.tf32, (254 << 10) | 1023)).toBe(FORMATS.tf32.maxFinite);
    expect(formatCode(FORMATS.tf32, 127 << 10)).toBe("0x1fc00");
  });

  it("rejects patterns outside the format's width with a RangeError that echoes the pattern", () => {
    expect(() => decode(FORMATS.e4m3, 256)).toThrow(/256/);
    expect(() => decode(FORMATS.binary16, -1)).toThrow(RangeError);
    expect(() => decode(FORMATS.binary16, 1.5)).toThrow(RangeError);
    expect(() => decodeArray(FORMATS.e4m3, new Uint16Array(2))).toThrow(/Uint8Array/);
  });
});
