import { describe, expect, it } from "vitest";
import { createRandom } from "../../src/numeric/index.js";

// Expected sequences printed by test/numeric/reference/xoshiro128ss.c, a C transcription of the
// xoshiro128** 1.1 and splitmix64 reference code (Blackman & Vigna), compiled with cc -O2.
describe("createRandom (xoshiro128** seeded by splitmix64)", () => {
  it.each([
    [0, [3737715805, 2584255861, 2876756834, 3286328325, 1553311962, 1625202774, 3260698944, 2754151956]],
    [42, [1776835114, 4165204688, 17111135, 2317295270, 2792088233, 2554630222, 2940343271, 2244566231]],
    [-1, [477689756, 2493998634, 555695776, 607808419, 61340979, 301466976, 2478485284, 2565876330]],
  ])("seed %d gives the reference program's first eight 32-bit outputs", (seed, expected) => {
    const r = createRandom(seed);
    expect(Array.from({ length: 8 }, () => r.nextUint32())).toEqual(expected);
  });

  it("next() builds 53-bit doubles exactly as the reference program does (seed 42)", () => {
    const r = createRandom(42);
    expect([r.next(), r.next(), r.next(), r.next()]).toEqual([
      0.41370166815658871, 0.0039839933778147429, 0.65008370276388672, 0.68460201861414161,
    ]);
  });

  it("is deterministic: two sources with one seed agree, different seeds differ", () => {
    const a = createRandom(7);
    const b = createRandom(7);
    const c = createRandom(8);
    const xa = a.fillNormal(new Float64Array(100));
    expect(b.fillNormal(new Float64Array(100))).toEqual(xa);
    expect(c.fillNormal(new Float64Array(100))).not.toEqual(xa);
  });

  it("1e5 normals have mean, variance, skewness and excess kurtosis of N(0,1) within 5 standard errors", () => {
    // standard errors for n i.i.d. N(0,1): mean 1/√n, variance √(2/n), skewness √(6/n), kurtosis √(24/n)
    const n = 100000;
    const x = createRandom(2024).fillNormal(new Float64Array(n));
    let m1 = 0;
    for (const v of x) m1 += v;
    m1 /= n;
    let m2 = 0;
    let m3 = 0;
    let m4 = 0;
    for (const v of x) {
      const d = v - m1;
      m2 += d * d;
      m3 += d * d * d;
      m4 += d * d * d * d;
    }
    m2 /= n;
    m3 /= n;
    m4 /= n;
    expect(Math.abs(m1)).toBeLessThan(5 / Math.sqrt(n));
    expect(Math.abs(m2 - 1)).toBeLessThan(5 * Math.sqrt(2 / n));
    expect(Math.abs(m3 / m2 ** 1.5)).toBeLessThan(5 * Math.sqrt(6 / n));
    expect(Math.abs(m4 / (m2 * m2) - 3)).toBeLessThan(5 * Math.sqrt(24 / n));
  });

  it("1e5 uniforms lie in [low, high) with mean and variance of U(low, high) within 5 standard errors", () => {
    const n = 100000;
    const x = createRandom(5).fillUniform(new Float64Array(n), -2, 6);
    let s = 0;
    let s2 = 0;
    let outside = 0;
    for (const v of x) {
      if (!(v >= -2 && v < 6)) outside++;
      s += v;
      s2 += v * v;
    }
    expect(outside).toBe(0);
    const mean = s / n;
    const variance = s2 / n - mean * mean;
    // U(−2, 6): mean 2, variance 64/12, sd of the sample mean √(64/12/n)
    expect(Math.abs(mean - 2)).toBeLessThan(5 * Math.sqrt(64 / 12 / n));
    expect(Math.abs(variance / (64 / 12) - 1)).toBeLessThan(0.02);
  });

  it("rejects seeds that are not safe integers", () => {
    expect(() => createRandom(1.5)).toThrow(RangeError);
    expect(() => createRandom(NaN)).toThrow(/NaN/);
  });
});
