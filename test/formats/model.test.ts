import { describe, expect, it } from "vitest";
import { FORMAT_NAMES, FORMATS, getFormat, makeFormat, pow2 } from "../../src/formats/index.js";

describe("format parameters against their published definitions", () => {
  it("binary16 matches IEEE 754-2019 Table 3.5 (k = 16, p = 11, emax = 15, bias = 15, w = 5, t = 10)", () => {
    const f = FORMATS.binary16;
    expect([f.bits, f.precision, f.emax, f.bias, f.exponentBits, f.fractionBits]).toEqual([16, 11, 15, 15, 5, 10]);
    expect(f.emin).toBe(-14); // IEEE 754-2019 §3.3: emin = 1 − emax
    // IEEE 754-2019 §3.3 derived limits; same as @petamoriken/float16's FLOAT16_MAX_VALUE etc. and SCIENCE.md §1.2
    expect(f.maxFinite).toBe(65504);
    expect(f.minNormal).toBe(6.103515625e-5);
    expect(f.minSubnormal).toBe(5.9604644775390625e-8);
    expect(f.maxSubnormal).toBe(2 ** -14 - 2 ** -24);
    expect(f.epsilon).toBe(9.765625e-4);
    expect(f.unitRoundoff).toBe(4.8828125e-4);
    // SCIENCE.md §1.1: T_ovf = (2 − 2^-p)·2^emax, and ties at it overflow because 65504's significand is odd
    expect(f.overflowThreshold).toBe(65520);
    expect(f.overflowsAtThreshold).toBe(true);
    expect(f.flushBound).toBe(2 ** -25);
    expect(f.bytes).toBe(2);
    expect(f.hasInfinity).toBe(true);
  });

  it("binary32 matches IEEE 754-2019 Table 3.5 (k = 32, p = 24, emax = 127) and ISO C FLT_MAX/FLT_MIN/FLT_EPSILON", () => {
    const f = FORMATS.binary32;
    expect([f.bits, f.precision, f.emax, f.bias, f.exponentBits, f.fractionBits]).toEqual([32, 24, 127, 127, 8, 23]);
    // C <float.h>: FLT_MAX = 0x1.fffffep+127, FLT_MIN = 0x1p-126, FLT_EPSILON = 0x1p-23, FLT_TRUE_MIN = 0x1p-149
    expect(f.maxFinite).toBe(3.4028234663852886e38);
    expect(f.minNormal).toBe(1.1754943508222875e-38);
    expect(f.epsilon).toBe(1.1920928955078125e-7);
    expect(f.minSubnormal).toBe(1.401298464324817e-45);
    // Math.fround (ECMAScript binary32 rounding) agrees on the largest finite value and on the threshold
    expect(Math.fround(3.5e38)).toBe(Infinity);
    expect(Math.fround(f.maxFinite)).toBe(f.maxFinite);
    expect(Math.fround(f.overflowThreshold)).toBe(Infinity);
    expect(Math.fround(f.overflowThreshold - 2 ** 103)).toBe(f.maxFinite);
    expect(f.overflowThreshold).toBe(340282356779733661637539395458142568448); // SCIENCE.md §1.2, exact rational
  });

  it("binary64 matches IEEE 754-2019 Table 3.5 (k = 64, p = 53, emax = 1023) and ECMAScript's Number constants", () => {
    const f = FORMATS.binary64;
    expect([f.bits, f.precision, f.emax, f.bias, f.exponentBits, f.fractionBits]).toEqual([64, 53, 1023, 1023, 11, 52]);
    // ECMAScript Number.MAX_VALUE, Number.MIN_VALUE, Number.EPSILON are binary64's limits
    expect(f.maxFinite).toBe(Number.MAX_VALUE);
    expect(f.minSubnormal).toBe(Number.MIN_VALUE);
    expect(f.epsilon).toBe(Number.EPSILON);
    expect(f.minNormal).toBe(2.2250738585072014e-308);
    expect(f.overflowThreshold).toBe(Infinity); // no finite binary64 value overflows binary64
    expect(f.dynamicRangeBinades).toBeCloseTo(2098, 9); // SCIENCE.md §1.2
  });

  it("bfloat16 matches its published definition: 1/8/7 bits, bias 127, binary32's exponent range", () => {
    // bfloat16 hardware numerics definition (2018); Kalamkar et al. 2019: "the same range" as FP32
    const f = FORMATS.bfloat16;
    expect([f.bits, f.precision, f.emax, f.emin, f.bias, f.exponentBits, f.fractionBits]).toEqual([16, 8, 127, -126, 127, 8, 7]);
    expect(f.maxFinite).toBe(338953138925153547590470800371487866880); // (2 − 2^-7)·2^127, SCIENCE.md §1.2
    expect(f.overflowThreshold).toBe(339617752923046005526922703901628039168);
    expect(f.minNormal).toBe(FORMATS.binary32.minNormal);
    expect(f.minSubnormal).toBe(2 ** -133);
    expect(f.epsilon).toBe(2 ** -7);
    expect(f.unitRoundoff).toBe(2 ** -8);
    expect(f.subnormalsOftenFlushed).toBe(true); // SCIENCE.md §1.2 (Higham: implementations do not support subnormals)
  });

  it("tf32 matches its published definition: 1/8/10 bits in a 32-bit container, a compute precision", () => {
    // CUDA math API: "1 sign bit, 8 bits for the exponent, and 10 ... bits for the mantissa ... storage size 32 bits"
    const f = FORMATS.tf32;
    expect([f.bits, f.bytes, f.precision, f.emax, f.emin, f.bias]).toEqual([19, 4, 11, 127, -126, 127]);
    expect(f.computeOnly).toBe(true);
    expect(f.maxFinite).toBe((2 - 2 ** -10) * 2 ** 127);
    expect(f.unitRoundoff).toBe(2 ** -11);
    for (const name of FORMAT_NAMES) if (name !== "tf32") expect(FORMATS[name].computeOnly).toBe(false);
  });

  it("e4m3 and e5m2 match the OCP 8-bit floating point specification (max 448 and 57344, min subnormal 2^-9 and 2^-16, bias 7 and 15)", () => {
    const e4 = FORMATS.e4m3;
    const e5 = FORMATS.e5m2;
    // OCP OFP8 rev. 1.0 Table 1 (= Micikevicius et al. 2022 Table 1)
    expect([e4.bias, e4.maxFinite, e4.minNormal, e4.maxSubnormal, e4.minSubnormal]).toEqual([7, 448, 2 ** -6, 0.875 * 2 ** -6, 2 ** -9]);
    expect([e5.bias, e5.maxFinite, e5.minNormal, e5.maxSubnormal, e5.minSubnormal]).toEqual([15, 57344, 2 ** -14, 0.75 * 2 ** -14, 2 ** -16]);
    expect(e4.hasInfinity).toBe(false); // OCP: E4M3 has no infinities
    expect(e5.hasInfinity).toBe(true);
    expect([e4.emax, e4.emin, e4.precision, e5.emax, e5.emin, e5.precision]).toEqual([8, -6, 4, 15, -14, 3]);
    expect([e4.epsilon, e5.epsilon]).toEqual([0.125, 0.25]);
    // SCIENCE.md §1.3: 464 → 448 (448's significand 1.110 is even, so the tie stays); e5m2 ties at 61440 overflow
    expect([e4.overflowThreshold, e4.overflowsAtThreshold]).toEqual([464, false]);
    expect([e5.overflowThreshold, e5.overflowsAtThreshold]).toEqual([61440, true]);
    expect(e4.bytes + e5.bytes).toBe(2);
    // SCIENCE.md §1.3: log2(max / min subnormal) = 17.8 and 31.8
    expect(e4.dynamicRangeBinades).toBeCloseTo(Math.log2(448 / 2 ** -9), 12);
    expect(e5.dynamicRangeBinades).toBeCloseTo(31.8, 1);
  });

  it("defaults: e4m3 saturates (SCIENCE.md §1.3 modelling choice); the others overflow to infinity", () => {
    expect(FORMATS.e4m3.defaultOverflow).toBe("saturate");
    for (const name of FORMAT_NAMES) if (name !== "e4m3") expect(FORMATS[name].defaultOverflow).toBe("infinity-or-nan");
  });

  it("every record's limits follow the IEEE 754-2019 §3.3 relations (common to all binary formats)", () => {
    for (const name of FORMAT_NAMES) {
      const f = FORMATS[name];
      expect(f.precision).toBe(f.fractionBits + 1);
      expect(f.emin).toBe(1 - f.bias);
      expect(f.minNormal).toBe(2 ** f.emin);
      expect(f.minSubnormal).toBe(2 ** (f.emin - f.precision + 1));
      expect(f.epsilon).toBe(2 * f.unitRoundoff);
      expect(f.bits).toBe(1 + f.exponentBits + f.fractionBits);
      expect(f.dynamicRangeBinades).toBeCloseTo(Math.log2(f.maxFinite) - Math.log2(f.minSubnormal), 9);
      expect(f.normalRangeBinades).toBeCloseTo(Math.log2(f.maxFinite) - f.emin, 9);
      expect(Object.isFrozen(f)).toBe(true);
    }
  });
});

describe("getFormat(name)", () => {
  it("finds each format by its name and by common aliases, ignoring case", () => {
    for (const name of FORMAT_NAMES) expect(getFormat(name)).toBe(FORMATS[name]);
    expect(getFormat("BF16")).toBe(FORMATS.bfloat16);
    expect(getFormat("fp16")).toBe(FORMATS.binary16);
    expect(getFormat("fp32")).toBe(FORMATS.binary32);
  });

  it("throws a RangeError echoing the name and listing the accepted names", () => {
    expect(() => getFormat("float8")).toThrow(RangeError);
    expect(() => getFormat("float8")).toThrow(/"float8".*binary16, bfloat16, binary32, binary64, tf32, e5m2, e4m3/);
  });
});

describe("makeFormat(parameters)", () => {
  it("derives an IEEE-style 8-bit E4M3 variant that reaches only 240 (OCP OFP8 notes: the IEEE-style variant's max)", () => {
    const ieeeStyle = makeFormat({
      name: "e4m3", exponentBits: 4, fractionBits: 3, bias: 7, specials: "ieee", computeOnly: false, bytes: 1,
      defaultOverflow: "infinity-or-nan", subnormalsOftenFlushed: false, source: "test",
    });
    expect(ieeeStyle.maxFinite).toBe(240);
    expect(ieeeStyle.hasInfinity).toBe(true);
  });
});

describe("pow2(k)", () => {
  it("is exact across the binary64 range, subnormals included (ECMAScript Number.MIN_VALUE = 2^-1074)", () => {
    expect(pow2(-1074)).toBe(Number.MIN_VALUE);
    expect(pow2(-1075)).toBe(0);
    expect(pow2(1023) * 2).toBe(Infinity);
    expect(pow2(1024)).toBe(Infinity);
    for (let k = -1074; k <= 1023; k++) expect(pow2(k)).toBe(2 ** k);
  });
});
