/**
 * The generic floating-point format model: one record per format, built from exponent bits, fraction bits,
 * bias and the special-value encoding, with every limit derived from those four parameters.
 */
import { FORMAT_NAMES, findAlias, isFormatName, type FormatName } from "./names.js";

/**
 * What a conversion does with a value whose rounded magnitude exceeds the largest finite value.
 * `saturate`: clamp to ±largest finite. `infinity-or-nan`: ±infinity where the format has one, NaN otherwise
 * (OCP 8-bit floating point specification, saturating and non-saturating conversions).
 * The same union is declared in src/spec/types.ts.
 * @example roundTo(FORMATS.e4m3, 500, { overflow: "infinity-or-nan" }) // => NaN
 */
export type OverflowMode = "saturate" | "infinity-or-nan";

/**
 * The overflow modes, in the order the CLI lists them.
 * @example OVERFLOW_MODES.includes("saturate") // => true
 */
export const OVERFLOW_MODES = ["saturate", "infinity-or-nan"] as const satisfies readonly OverflowMode[];

/**
 * How the all-ones exponent field is used.
 * `ieee`: infinities (fraction 0) and NaNs (fraction ≠ 0), as in IEEE 754-2019 §3.4.
 * `nan-only`: no infinities; only the all-ones exponent with the all-ones fraction is NaN and every other code
 * in that binade is a finite number (OCP 8-bit floating point specification, E4M3).
 * @example FORMATS.e4m3.specials // => "nan-only"
 */
export type SpecialEncoding = "ieee" | "nan-only";

/**
 * The parameters a format is built from.
 * @example makeFormat({ ...parameters, fractionBits: 2 }) // a narrower variant
 */
export interface FormatParameters {
  name: FormatName;
  exponentBits: number;
  fractionBits: number;
  bias: number;
  specials: SpecialEncoding;
  /** true for tf32: a precision that matrix units apply to binary32 inputs, never a storage format */
  computeOnly: boolean;
  /** bytes one value occupies in memory (tf32 lives in a 32-bit container) */
  bytes: number;
  defaultOverflow: OverflowMode;
  /** some hardware flushes this format's subnormals (bfloat16); a hint for defaults, not used by rounding */
  subnormalsOftenFlushed: boolean;
  /** where the parameters come from */
  source: string;
}

/**
 * A floating-point format: its parameters and every limit derived from them. All values are exact.
 * @example FORMATS.binary16.overflowThreshold // => 65520
 */
export interface Format {
  readonly name: FormatName;
  readonly exponentBits: number;
  /** trailing significand bits (the stored fraction, without the hidden bit) */
  readonly fractionBits: number;
  readonly bias: number;
  /** p: significand bits including the hidden bit (fractionBits + 1) */
  readonly precision: number;
  readonly specials: SpecialEncoding;
  readonly hasInfinity: boolean;
  /** unbiased exponent of the smallest normal binade: 1 − bias */
  readonly emin: number;
  /** unbiased exponent of the largest finite binade */
  readonly emax: number;
  /** largest finite value */
  readonly maxFinite: number;
  /** largest subnormal value: minNormal − minSubnormal */
  readonly maxSubnormal: number;
  /**
   * Overflow threshold under round-to-nearest-even: the midpoint between maxFinite and the next grid point
   * above it. Magnitudes above it overflow; a magnitude equal to it overflows only when `overflowsAtThreshold`.
   * Infinity for binary64 (no finite binary64 value overflows binary64).
   */
  readonly overflowThreshold: number;
  /** whether a value exactly at overflowThreshold overflows: true when maxFinite's significand is odd (ties to even) */
  readonly overflowsAtThreshold: boolean;
  /** smallest positive normal value: 2^emin */
  readonly minNormal: number;
  /** smallest positive subnormal value: 2^(emin − p + 1) */
  readonly minSubnormal: number;
  /** magnitudes at or below this round to zero under round-to-nearest-even (half the smallest subnormal; the tie goes to the even zero) */
  readonly flushBound: number;
  /** machine epsilon: the gap between 1 and the next larger value, 2^(1 − p) */
  readonly epsilon: number;
  /** unit roundoff: the largest relative error of round-to-nearest in the normal range, 2^(−p) */
  readonly unitRoundoff: number;
  /** bits of one encoded value (sign + exponent + fraction); tf32 is 19 */
  readonly bits: number;
  /** bytes of memory one value takes */
  readonly bytes: number;
  /** log2(maxFinite / minSubnormal): binades from the smallest subnormal to the largest finite value */
  readonly dynamicRangeBinades: number;
  /** log2(maxFinite / minNormal): binades of the normal range alone (what is left when subnormals are flushed) */
  readonly normalRangeBinades: number;
  /** true for tf32: a compute precision applied to binary32 inputs of matrix products, not a storage format */
  readonly computeOnly: boolean;
  /** the overflow mode rounding uses when none is given */
  readonly defaultOverflow: OverflowMode;
  /** some hardware flushes this format's subnormal results to zero (bfloat16); rounding does not unless asked */
  readonly subnormalsOftenFlushed: boolean;
  /** where the parameters come from */
  readonly source: string;
}

const POW2_MIN = -1074;
const POW2_MAX = 1023;
/** 2^k for k in [−1074, 1023], built from bit patterns so that no libm call is trusted to be exact. */
const POW2_TABLE: Float64Array = (() => {
  const table = new Float64Array(POW2_MAX - POW2_MIN + 1);
  const words = new Uint32Array(table.buffer);
  for (let k = POW2_MIN; k <= POW2_MAX; k++) {
    const i = k - POW2_MIN;
    // little-endian words: [low, high]; IEEE 754-2019 §3.4 binary64 layout
    if (k >= -1022) words[2 * i + 1] = (k + 1023) << 20;
    else if (k >= -1042) words[2 * i + 1] = 1 << (k + 1074 - 32);
    else words[2 * i] = 2 ** (k + 1074);
  }
  return table;
})();

/**
 * 2^k, exact, for an integer k; 0 below 2^-1074 and Infinity above 2^1023.
 * @example pow2(-24) // => 5.960464477539063e-8
 */
export function pow2(k: number): number {
  if (k < POW2_MIN) return 0;
  if (k > POW2_MAX) return Infinity;
  return POW2_TABLE[k - POW2_MIN] as number;
}

/**
 * Build a format record from its parameters, deriving every limit.
 * @example makeFormat({ name: "binary16", exponentBits: 5, fractionBits: 10, bias: 15, ... }).maxFinite // => 65504
 */
export function makeFormat(p: FormatParameters): Format {
  const precision = p.fractionBits + 1;
  const emin = 1 - p.bias;
  const topField = 2 ** p.exponentBits - 1;
  // IEEE 754-2019 §3.3: the all-ones field is reserved, so emax = 2^w − 2 − bias; OCP E4M3 uses that field for numbers
  const emax = p.specials === "ieee" ? topField - 1 - p.bias : topField - p.bias;
  // the largest finite significand: all ones (IEEE), or all ones but the last bit when that code is NaN (OCP E4M3)
  const topSignificand = p.specials === "ieee" ? 2 ** precision - 1 : 2 ** precision - 2;
  const topUlp = pow2(emax - precision + 1);
  const maxFinite = topSignificand * topUlp;
  const overflowThreshold = precision >= 53 ? Infinity : maxFinite + topUlp / 2;
  const minNormal = pow2(emin);
  const minSubnormal = pow2(emin - precision + 1);
  const epsilon = pow2(1 - precision);
  const bits = 1 + p.exponentBits + p.fractionBits;
  return Object.freeze({
    name: p.name,
    exponentBits: p.exponentBits,
    fractionBits: p.fractionBits,
    bias: p.bias,
    precision,
    specials: p.specials,
    hasInfinity: p.specials === "ieee",
    emin,
    emax,
    maxFinite,
    maxSubnormal: minNormal - minSubnormal,
    overflowThreshold,
    overflowsAtThreshold: topSignificand % 2 === 1,
    minNormal,
    minSubnormal,
    flushBound: minSubnormal / 2,
    epsilon,
    unitRoundoff: epsilon / 2,
    bits,
    bytes: p.bytes,
    dynamicRangeBinades: Math.log2(topSignificand) + (emax - precision + 1) - (emin - precision + 1),
    normalRangeBinades: Math.log2(topSignificand) + (emax - precision + 1) - emin,
    computeOnly: p.computeOnly,
    defaultOverflow: p.defaultOverflow,
    subnormalsOftenFlushed: p.subnormalsOftenFlushed,
    source: p.source,
  });
}

const IEEE = "IEEE 754-2019 Table 3.5";

/**
 * Every format headroom knows, by name.
 * Defaults: IEEE formats and e5m2 overflow to infinity; e4m3 saturates (SCIENCE.md §1.3 modelling choice,
 * following the OCP 8-bit specification's saturating conversion), and is reported as "saturated".
 * @example FORMATS.e4m3.maxFinite // => 448
 */
export const FORMATS: Readonly<Record<FormatName, Format>> = Object.freeze({
  binary16: makeFormat({
    name: "binary16", exponentBits: 5, fractionBits: 10, bias: 15, specials: "ieee", computeOnly: false, bytes: 2,
    defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: false, source: IEEE,
  }),
  bfloat16: makeFormat({
    name: "bfloat16", exponentBits: 8, fractionBits: 7, bias: 127, specials: "ieee", computeOnly: false, bytes: 2,
    defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: true,
    source: "bfloat16 hardware numerics definition (2018): binary32 with 16 fraction bits dropped",
  }),
  binary32: makeFormat({
    name: "binary32", exponentBits: 8, fractionBits: 23, bias: 127, specials: "ieee", computeOnly: false, bytes: 4,
    defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: false, source: IEEE,
  }),
  binary64: makeFormat({
    name: "binary64", exponentBits: 11, fractionBits: 52, bias: 1023, specials: "ieee", computeOnly: false, bytes: 8,
    defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: false, source: IEEE,
  }),
  tf32: makeFormat({
    name: "tf32", exponentBits: 8, fractionBits: 10, bias: 127, specials: "ieee", computeOnly: true, bytes: 4,
    defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: false,
    source: "TF32 definition: binary32 range with 10 fraction bits, applied to matrix-product inputs",
  }),
  e5m2: makeFormat({
    name: "e5m2", exponentBits: 5, fractionBits: 2, bias: 15, specials: "ieee", computeOnly: false, bytes: 1,
    defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: false,
    source: "OCP 8-bit floating point specification (OFP8) rev. 1.0, E5M2",
  }),
  e4m3: makeFormat({
    name: "e4m3", exponentBits: 4, fractionBits: 3, bias: 7, specials: "nan-only", computeOnly: false, bytes: 1,
    defaultOverflow: "saturate", subnormalsOftenFlushed: false,
    source: "OCP 8-bit floating point specification (OFP8) rev. 1.0, E4M3",
  }),
});

/**
 * Look a format up by name (case-insensitive; the accepted aliases of FORMAT_ALIASES, such as fp16 and bf16, too).
 * Throws a RangeError that echoes the name and lists the accepted ones.
 * @example getFormat("bf16").precision // => 8
 */
export function getFormat(name: string): Format {
  const key = name.trim().toLowerCase();
  if (isFormatName(key)) return FORMATS[key];
  // only the aliases marked accepted: the others are suggestions in messages, never taken as the format
  const alias = findAlias(key);
  if (alias?.accepted === true) return FORMATS[alias.format];
  throw new RangeError(`unknown format "${name}"; accepted: ${FORMAT_NAMES.join(", ")}`);
}

/**
 * Resolve the options shared by rounding functions against a format's defaults.
 * @example resolveOverflow(FORMATS.e4m3) // => "saturate"
 */
export function resolveOverflow(format: Format, overflow?: OverflowMode): OverflowMode {
  return overflow ?? format.defaultOverflow;
}

/**
 * Block scaling of 8-bit formats (OCP Microscaling v1.0; Rouhani et al. 2023): elements per block (k = 32) and the
 * shared exponents an E8M0 scale holds, 2^(0 − 127) … 2^(254 − 127) (SCIENCE.md §1.4).
 */
export const MX_BLOCK = { size: 32, minExponent: -127, maxExponent: 127 } as const;

/**
 * Bytes per element as headroom writes them: whole, or to two decimals when per-block scale bytes add a fraction
 * (one E8M0 byte per {@link MX_BLOCK} elements: 1/32 = 0.03125).
 * @example bytesPerElementText(1.03125) // => "1.03"
 */
export function bytesPerElementText(bytes: number): string {
  return Number.isInteger(bytes) ? String(bytes) : bytes.toFixed(2);
}
