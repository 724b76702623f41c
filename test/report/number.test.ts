import { describe, expect, test } from "vitest";
import {
  formatBinades,
  formatBytes,
  formatCompactCount,
  formatCount,
  formatPercent,
  formatPowerOfTwo,
  formatProbability,
  formatValue,
} from "../../src/report/number.js";

describe("formatBinades", () => {
  test("one decimal, no negative zero, infinities spelled", () => {
    expect(formatBinades(12.34)).toBe("12.3");
    expect(formatBinades(-4)).toBe("-4.0");
    expect(formatBinades(-0.04)).toBe("0.0");
    expect(formatBinades(Infinity)).toBe("inf");
    expect(formatBinades(-Infinity)).toBe("-inf");
    expect(formatBinades(NaN)).toBe("n/a");
  });
});

describe("formatProbability", () => {
  test("exponent form below 0.01", () => {
    expect(formatProbability(0.000032)).toBe("3.2e-5");
    // trailing zeros dropped, as the findings' sentences write numbers (src/risk/words.ts plainNumber: "1e-9")
    expect(formatProbability(1e-12)).toBe("1e-12");
    expect(formatProbability(2e-5)).toBe("2e-5");
    // below the 1e-12 the per-step probabilities are integrated to (README, Estimates), no digit is resolved
    expect(formatProbability(1e-300)).toBe("<1e-12");
    expect(formatProbability(4.2e-232)).toBe("<1e-12");
    expect(formatProbability(0.0099)).toBe("9.9e-3");
  });
  test("two significant digits from 0.01 up; 0 and 1 exact; never rounds up to certainty", () => {
    expect(formatProbability(0.25)).toBe("0.25");
    expect(formatProbability(0.5)).toBe("0.5");
    expect(formatProbability(0.0123)).toBe("0.012");
    expect(formatProbability(0)).toBe("0");
    expect(formatProbability(1)).toBe("1");
    expect(formatProbability(0.999)).toBe("0.99");
  });
  test("out of range reads n/a", () => {
    expect(formatProbability(-0.1)).toBe("n/a");
    expect(formatProbability(1.5)).toBe("n/a");
    expect(formatProbability(NaN)).toBe("n/a");
  });
});

describe("sizes and counts", () => {
  test("formatBytes uses binary units", () => {
    expect(formatBytes(512)).toBe("512 B");
    expect(formatBytes(1536)).toBe("1.5 KiB");
    expect(formatBytes(3 * 1024 ** 2)).toBe("3.0 MiB");
    expect(formatBytes(-1)).toBe("n/a");
  });
  test("formatCount groups digits, independent of the locale", () => {
    expect(formatCount(1234567)).toBe("1,234,567");
    expect(formatCount(999)).toBe("999");
    expect(formatCount(-1000)).toBe("-1,000");
  });
  test("formatCompactCount", () => {
    expect(formatCompactCount(950)).toBe("950");
    expect(formatCompactCount(12_300)).toBe("12.3k");
    expect(formatCompactCount(4_500_000)).toBe("4.5M");
    expect(formatCompactCount(2e9)).toBe("2G");
  });
});

describe("values", () => {
  test("formatPowerOfTwo", () => {
    expect(formatPowerOfTwo(16)).toBe("2^16");
    expect(formatPowerOfTwo(16, true)).toBe("2^16 (65536)");
    expect(formatPowerOfTwo(-3, true)).toBe("2^-3 (0.125)");
  });
  test("formatValue: binary16 limits (IEEE 754-2019 Table 3.5: max 65504, min subnormal 2^-24)", () => {
    expect(formatValue(65504)).toBe("65504");
    expect(formatValue(2 ** -24)).toBe("5.96e-8");
    expect(formatValue(1234.5678)).toBe("1230");
    expect(formatValue(0.000123456)).toBe("0.000123");
    expect(formatValue(3.4028234663852886e38)).toBe("3.4e38");
    expect(formatValue(0)).toBe("0");
    expect(formatValue(-Infinity)).toBe("-inf");
  });
  test("formatPercent", () => {
    expect(formatPercent(0.125)).toBe("12.5%");
    // below 0.1%, two significant digits (plain to 0.001%, then exponent form), the sentences' floor at 1e-6%
    expect(formatPercent(0.0001)).toBe("0.01%");
    expect(formatPercent(0.00099)).toBe("0.099%");
    expect(formatPercent(1.5e-5)).toBe("0.0015%");
    expect(formatPercent(2.4e-8)).toBe("2.4e-6%");
    expect(formatPercent(9e-9)).toBe("<1e-6%");
    expect(formatPercent(0)).toBe("0%");
    // a share short of all is not rounded up to certainty (common practice)
    expect(formatPercent(0.9999950632426285)).toBe(">99.9%");
    expect(formatPercent(0.9994)).toBe("99.9%");
    expect(formatPercent(1)).toBe("100%");
  });
});
