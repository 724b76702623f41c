/**
 * Format ranges written out from the standards, so the risk tests do not depend on src/formats.
 * binary16: IEEE 754-2019 Table 3.5 parameters (SCIENCE.md §1.2 check values 1-5); bfloat16: SCIENCE.md §1.2
 * check values 6-7; binary32: C limits (check value 8); e4m3: OCP 8-bit specification (check values 11, 13, 15).
 */
import type { RangeLimits } from "../../src/risk/index.js";

export const BINARY16: RangeLimits = {
  format: "binary16",
  maxFinite: 65504,
  overflowLevel: 65520,
  saturates: false,
  flushBound: 2 ** -25,
  minNormal: 2 ** -14,
  smallest: 2 ** -24,
  unitRoundoff: 2 ** -11,
};

export const BFLOAT16_FTZ: RangeLimits = {
  format: "bfloat16",
  maxFinite: (2 - 2 ** -7) * 2 ** 127,
  overflowLevel: (2 - 2 ** -8) * 2 ** 127,
  saturates: false,
  flushBound: 2 ** -126,
  minNormal: 2 ** -126,
  smallest: 2 ** -126,
  unitRoundoff: 2 ** -8,
};

export const BINARY32: RangeLimits = {
  format: "binary32",
  maxFinite: (2 - 2 ** -23) * 2 ** 127,
  overflowLevel: (2 - 2 ** -24) * 2 ** 127,
  saturates: false,
  flushBound: 2 ** -150,
  minNormal: 2 ** -126,
  smallest: 2 ** -149,
  unitRoundoff: 2 ** -24,
};

export const E4M3_SATURATING: RangeLimits = {
  format: "e4m3",
  maxFinite: 448,
  overflowLevel: 448,
  saturates: true,
  flushBound: 2 ** -10,
  minNormal: 2 ** -6,
  smallest: 2 ** -9,
  unitRoundoff: 2 ** -4,
};

// the non-saturating conversion: 464 rounds to 448 (ties to even), anything above is NaN (OCP 8-bit specification,
// SCIENCE.md check value 13)
export const E4M3_NAN: RangeLimits = { ...E4M3_SATURATING, overflowLevel: 464, saturates: false };

// e5m2 from the OCP 8-bit specification (OFP8 v1.0, Table 1): max normal 57344, min normal 2^-14, min subnormal 2^-16;
// the overflow threshold is max + half its ulp 2^13 (round to nearest, IEEE 754-2019 §4.3.1), the flush bound 2^-17
export const E5M2: RangeLimits = {
  format: "e5m2",
  maxFinite: 57344,
  overflowLevel: 61440,
  saturates: false,
  flushBound: 2 ** -17,
  minNormal: 2 ** -14,
  smallest: 2 ** -16,
  unitRoundoff: 2 ** -3,
};
