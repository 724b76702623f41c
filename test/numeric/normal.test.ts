import { describe, expect, it } from "vitest";
import fc from "fast-check";
import {
  erf,
  erfc,
  normalCdf,
  normalLogCdf,
  normalPdf,
  normalQuantile,
  normalSf,
  normalTwoSidedQuantile,
  normalTwoSidedTail,
  normalUpperQuantile,
} from "../../src/numeric/index.js";

function expectRel(actual: number, expected: number, rel: number): void {
  expect(Math.abs(actual - expected)).toBeLessThanOrEqual(rel * Math.abs(expected));
}

describe("normalTwoSidedTail", () => {
  // SCIENCE.md §4 "Gaussian tails" [X]: P(|Z| > t) = erfc(t/√2)
  const table: [number, number][] = [
    [1, 0.3173105],
    [2, 0.04550026],
    [3, 2.699796e-3],
    [4, 6.334248e-5],
    [5, 5.733031e-7],
    [6, 1.973175e-9],
    [7, 2.559625e-12],
    [8, 1.244192e-15],
  ];
  it.each(table)("P(|Z| > %d) matches SCIENCE.md §4 to the table's 7 digits", (t, p) => {
    expectRel(normalTwoSidedTail(t), p, 1e-6);
  });

  it("P(|Z| > 4) and P(|Z| > 6) to 1e-6 relative (SCIENCE.md check #40)", () => {
    expectRel(normalTwoSidedTail(4), 6.334248e-5, 1e-6);
    expectRel(normalTwoSidedTail(6), 1.973175e-9, 1e-6);
  });

  it("is 1 at and below 0, NaN for NaN", () => {
    expect(normalTwoSidedTail(0)).toBe(1);
    expect(normalTwoSidedTail(-3)).toBe(1);
    expect(normalTwoSidedTail(NaN)).toBeNaN();
  });
});

describe("normalSf and normalCdf", () => {
  it("stay between the Mills bounds φ(t)(1/t − 1/t³) < Q(t) < φ(t)/t deep in the tail (SCIENCE.md §4)", () => {
    for (let t = 2; t <= 37; t += 0.25) {
      const q = normalSf(t);
      const phi = normalPdf(t);
      expect(q).toBeGreaterThan(phi * (1 / t - 1 / t ** 3));
      expect(q).toBeLessThan(phi / t);
    }
  });

  it("agree with mpmath 1.3.0 ncdf at 30 digits in the tails", () => {
    // mpmath.ncdf(-x) at mp.dps = 30
    expectRel(normalSf(5), 2.86651571879193911673752332875e-7, 1e-14);
    expectRel(normalSf(8), 6.22096057427178412351599517259e-16, 1e-14);
    expectRel(normalSf(10), 7.6198530241605260659733432516e-24, 1e-13);
    expectRel(normalSf(20), 2.75362411860623369507562278086e-89, 1e-13);
    expectRel(normalCdf(-20), 2.75362411860623369507562278086e-89, 1e-13);
  });

  it("Φ(x) + Φ(−x) = 1 and Φ(0) = 1/2 (symmetry of the normal law)", () => {
    expect(normalCdf(0)).toBe(0.5);
    fc.assert(
      fc.property(fc.double({ min: -8, max: 8, noNaN: true }), (x) => {
        expect(Math.abs(normalCdf(x) + normalCdf(-x) - 1)).toBeLessThan(4e-16);
      }),
    );
  });

  it("ln Φ stays finite and accurate where Φ underflows", () => {
    // ln Q(t) = ln φ(t) − ln t + ln(1 − 1/t² + 3/t⁴ − …) (A&S 26.2.12); at t = 40 the series to 1/t⁸ suffices
    const t = 40;
    const series = 1 - 1 / t ** 2 + 3 / t ** 4 - 15 / t ** 6 + 105 / t ** 8;
    const expected = -0.5 * t * t - 0.5 * Math.log(2 * Math.PI) - Math.log(t) + Math.log(series);
    expectRel(normalLogCdf(-40), expected, 1e-14);
    expect(Number.isFinite(normalLogCdf(-1e5))).toBe(true);
    // log1p(−Q(10)) ≈ −Q(10) = −7.6198530241605260659733432516e-24 (mpmath ncdf(−10))
    expectRel(normalLogCdf(10), -7.6198530241605260659733432516e-24, 1e-13);
    expectRel(normalLogCdf(-5), Math.log(2.86651571879193911673752332875e-7), 1e-14);
  });
});

describe("erf and erfc", () => {
  it("are odd / complementary: erf(−x) = −erf(x), erfc(−x) = 2 − erfc(x), erf(0) = 0", () => {
    expect(erf(0)).toBe(0);
    fc.assert(
      fc.property(fc.double({ min: -6, max: 6, noNaN: true }), (x) => {
        expect(erf(-x)).toBe(-erf(x));
        expect(Math.abs(erfc(-x) - (2 - erfc(x)))).toBeLessThan(5e-16);
        expect(Math.abs(erf(x) + erfc(x) - 1)).toBeLessThan(5e-16);
      }),
    );
  });

  it("match mpmath 1.3.0 erf/erfc (30 digits) across the series/continued-fraction switch", () => {
    // mpmath.erf / mpmath.erfc at mp.dps = 30
    expectRel(erf(0.5), 0.520499877813046537682746653892, 4e-16);
    expectRel(erf(2.4), 0.99931148610335492111445002519, 4e-16);
    expectRel(erfc(1), 0.157299207050285130658779364917, 1e-15);
    expectRel(erfc(2.4), 6.88513896645078885549974809715e-4, 1e-13);
    expectRel(erfc(2.6), 2.36034416529349087812820602355e-4, 1e-14);
    expectRel(erfc(6), 2.15197367124989131165933503992e-17, 1e-14);
    expectRel(erfc(26), 5.66319240885614284647572789693e-296, 1e-13);
    expect(erfc(28)).toBe(0);
    expect(erf(NaN)).toBeNaN();
  });
});

describe("normalQuantile", () => {
  // mpmath 1.3.0 findroot of ln Φ(x) = ln p at 40 digits
  const table: [number, number][] = [
    [1e-300, -37.047096299361199237],
    [1e-100, -21.273453560965324295],
    [1e-20, -9.2623400897984075737],
    [1e-10, -6.3613409024040562047],
    [1e-5, -4.2648907939228246285],
    [0.001, -3.0902323061678135415],
    [0.025, -1.9599639845400542355],
    [0.1, -1.281551565544600467],
    [0.3, -0.52440051270804078404],
    [0.75, 0.6744897501960817432],
    [0.975, 1.9599639845400542355],
    [0.999, 3.0902323061678135415],
  ];
  it.each(table)("Φ⁻¹(%s) to 1e-12 relative (mpmath 1.3.0)", (p, x) => {
    expectRel(normalQuantile(p), x, 1e-12);
  });

  it("inverts normalCdf to 1e-12 relative in p over (0, 1/2] (round trip)", () => {
    fc.assert(
      fc.property(fc.double({ min: 1e-300, max: 0.5, noNaN: true }), (p) => {
        expectRel(normalCdf(normalQuantile(p)), p, 1e-12);
      }),
    );
  });

  it("handles the ends: 0 → −∞, 1 → +∞, out of range → NaN, 1/2 → 0", () => {
    expect(normalQuantile(0)).toBe(-Infinity);
    expect(normalQuantile(1)).toBe(Infinity);
    expect(normalQuantile(0.5)).toBe(0);
    expect(normalQuantile(-0.1)).toBeNaN();
    expect(normalQuantile(1.1)).toBeNaN();
    expect(normalQuantile(NaN)).toBeNaN();
  });

  it("upper and two-sided quantiles: median |Z| = 0.6744897502 (SCIENCE.md §4)", () => {
    expectRel(normalTwoSidedQuantile(0.5), 0.6744897502, 1e-10);
    expectRel(normalUpperQuantile(1e-300), 37.047096299361199237, 1e-12);
    expectRel(normalTwoSidedQuantile(normalTwoSidedTail(6)), 6, 1e-12);
  });
});
