/**
 * An independent exact rounding reference for the tests, written with BigInt arithmetic on the binary64 bit
 * pattern. It shares no code with src/formats: each format is given by the constants of its published definition,
 * and rounding is done on the exact integer significand.
 */

/** A format as its published definition states it. */
export interface ReferenceFormat {
  /** significand bits including the hidden bit */
  precision: number;
  /** exponent of the smallest normal binade */
  emin: number;
  /** largest finite value, as printed in the definition */
  maxFinite: number;
  hasInfinity: boolean;
}

/** Published definitions (each entry names its source). */
export const REFERENCE_FORMATS = {
  // bfloat16 hardware numerics definition (2018): 1 sign, 8 exponent (bias 127), 7 fraction bits; binary32's range
  bfloat16: { precision: 8, emin: -126, maxFinite: (2 - 2 ** -7) * 2 ** 127, hasInfinity: true },
  // TF32 (CUDA math API): 1 sign, 8 exponent, 10 fraction bits; binary32's range
  tf32: { precision: 11, emin: -126, maxFinite: (2 - 2 ** -10) * 2 ** 127, hasInfinity: true },
  // OCP 8-bit floating point specification rev. 1.0, E5M2: bias 15, max 57344 = S.11110.11, infinities S.11111.00
  e5m2: { precision: 3, emin: -14, maxFinite: 57344, hasInfinity: true },
  // OCP 8-bit floating point specification rev. 1.0, E4M3: bias 7, max 448 = S.1111.110, no infinities
  e4m3: { precision: 4, emin: -6, maxFinite: 448, hasInfinity: false },
  // IEEE 754-2019 Table 3.5 binary16: p = 11, emax = 15
  binary16: { precision: 11, emin: -14, maxFinite: 65504, hasInfinity: true },
} as const satisfies Record<string, ReferenceFormat>;

/** |x| = significand · 2^exponent, exactly, for a finite nonzero binary64 x. */
export function decompose(x: number): { negative: boolean; significand: bigint; exponent: number } {
  const view = new DataView(new ArrayBuffer(8));
  view.setFloat64(0, x);
  const bits = view.getBigUint64(0);
  const negative = bits >> 63n === 1n;
  const field = Number((bits >> 52n) & 0x7ffn);
  const fraction = bits & ((1n << 52n) - 1n);
  if (field === 0) return { negative, significand: fraction, exponent: -1074 };
  return { negative, significand: fraction | (1n << 52n), exponent: field - 1075 };
}

function bitLength(n: bigint): number {
  return n.toString(2).length;
}

/** n · 2^e as a binary64 number (exact when representable; n < 2^60). */
function scale(n: bigint, e: number): number {
  let value = Number(n);
  // apply the power of two in steps that stay inside the normal range, so each step is exact
  while (e > 0) {
    const step = Math.min(e, 1000);
    value *= 2 ** step;
    e -= step;
  }
  while (e < 0) {
    const step = Math.max(e, -1000);
    value *= 2 ** step;
    e -= step;
  }
  return value;
}

export type ReferenceMode = "nearest-even" | "toward-zero";

/**
 * Round x into the format, exactly, by integer arithmetic on its significand: round-to-nearest-even or
 * toward zero, with an unbounded exponent above; then compare with the largest finite value.
 * Overflow: "saturate" clamps to ±max; "infinity-or-nan" gives ±Infinity or NaN (no infinity in the format).
 * Toward zero never rounds past max (IEEE 754-2019 §7.4).
 */
export function referenceRound(
  format: ReferenceFormat,
  x: number,
  overflow: "saturate" | "infinity-or-nan",
  mode: ReferenceMode = "nearest-even",
): number {
  if (Number.isNaN(x)) return NaN;
  if (x === 0) return x;
  const negative = x < 0;
  let magnitude: number;
  if (!Number.isFinite(x)) {
    magnitude = overflow === "saturate" ? format.maxFinite : format.hasInfinity ? Infinity : NaN;
  } else {
    const { significand, exponent } = decompose(x);
    const floorLog2 = bitLength(significand) - 1 + exponent;
    const quantumExponent = Math.max(floorLog2, format.emin) - format.precision + 1;
    let n: bigint;
    if (exponent >= quantumExponent) {
      n = significand << BigInt(exponent - quantumExponent);
    } else {
      const shift = BigInt(quantumExponent - exponent);
      n = significand >> shift;
      const remainder = significand - (n << shift);
      const half = 1n << (shift - 1n);
      if (mode === "nearest-even" && (remainder > half || (remainder === half && (n & 1n) === 1n))) n += 1n;
    }
    magnitude = scale(n, quantumExponent);
    if (magnitude > format.maxFinite) {
      if (mode === "toward-zero" || overflow === "saturate") magnitude = format.maxFinite;
      else magnitude = format.hasInfinity ? Infinity : NaN;
    }
  }
  return negative ? -magnitude : magnitude;
}

/** The binary64 value next to x toward +Infinity (steps = 1) or further; by bit pattern. */
export function stepBinary64(x: number, steps: number): number {
  if (steps === 0 || !Number.isFinite(x)) return x;
  const view = new DataView(new ArrayBuffer(8));
  // walk along the ordered line of magnitudes: negative numbers move the other way
  let ordered: bigint;
  view.setFloat64(0, x);
  const bits = view.getBigUint64(0);
  ordered = bits >> 63n === 1n ? -(bits & ((1n << 63n) - 1n)) : bits;
  ordered += BigInt(steps);
  const next = ordered < 0n ? (1n << 63n) | -ordered : ordered;
  if (next >= 0x7ff0000000000000n && ordered >= 0n) return Infinity;
  if (ordered < 0n && -ordered >= 0x7ff0000000000000n) return -Infinity;
  view.setBigUint64(0, next);
  return view.getFloat64(0);
}

/** A seeded uniform source on [0, 1) (mulberry32), so stochastic tests are reproducible. */
export function seeded(seed: number): () => number {
  let state = seed >>> 0;
  return () => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}
