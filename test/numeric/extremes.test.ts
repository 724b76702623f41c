import { describe, expect, it } from "vitest";
import {
  createRandom,
  expectedMaxAbsNormal,
  expectedMaxNormal,
  expectedMaxNormalApprox,
  maxAbsNormalExceedanceLevel,
  maxAbsNormalQuantile,
  maxNormalQuantile,
  normalTwoSidedTail,
  probAnyExceeds,
} from "../../src/numeric/index.js";

describe("expectedMaxNormal (SCIENCE.md §4, 'Exact values (quadrature; σ = 1)' [X])", () => {
  const table: [number, number][] = [
    [10, 1.53875],
    [100, 2.50759],
    [1e3, 3.24144],
    [1e4, 3.85162],
    [1e6, 4.8629],
    [1e9, 6.08768],
  ];
  it.each(table)("n = %d gives %d to 1e-5 (the table's 5 decimals)", (n, v) => {
    expect(Math.abs(expectedMaxNormal(n) - v)).toBeLessThan(1e-5);
  });

  it("check #39: E[max of 1000] = 3.24144 vs the bound √(2 ln 1000) = 3.71692, and the bound always holds", () => {
    expect(Math.abs(expectedMaxNormal(1000) - 3.24144)).toBeLessThan(1e-4);
    expect(Math.abs(Math.sqrt(2 * Math.log(1000)) - 3.71692)).toBeLessThan(1e-5);
    for (const n of [2, 10, 1e3, 1e6, 1e12]) expect(expectedMaxNormal(n)).toBeLessThan(Math.sqrt(2 * Math.log(n)));
  });

  it("small n in closed form: n = 1 → 0, n = 2 → 1/√π, n = 3 → 3/(2√π) (E[max] of 2 and 3 normals, derived from E|Z1 − Z2|/2)", () => {
    expect(expectedMaxNormal(1)).toBe(0);
    expect(Math.abs(expectedMaxNormal(2) - 1 / Math.sqrt(Math.PI))).toBeLessThan(1e-12);
    expect(Math.abs(expectedMaxNormal(3) - 1.5 / Math.sqrt(Math.PI))).toBeLessThan(1e-12);
  });

  it("grows with n up to 1e12 and beyond, and n < 1 gives NaN", () => {
    let prev = -Infinity;
    for (const n of [1, 2, 5, 1e2, 1e5, 1e8, 1e12, 1e100, 1e300]) {
      const v = expectedMaxNormal(n);
      expect(v).toBeGreaterThan(prev);
      prev = v;
    }
    expect(expectedMaxNormal(0.5)).toBeNaN();
  });
});

describe("expectedMaxNormalApprox (SCIENCE.md §4 'refined' row)", () => {
  const table: [number, number][] = [
    [10, 1.6309],
    [100, 2.55645],
    [1e3, 3.27176],
    [1e4, 3.8729],
    [1e6, 4.87582],
    [1e9, 6.09556],
  ];
  it.each(table)("n = %d gives %d to 1e-5", (n, v) => {
    expect(Math.abs(expectedMaxNormalApprox(n) - v)).toBeLessThan(1e-5);
  });
  it("meets the integrated value within 0.01 at n = 1e9 and continues it past n = 1e250", () => {
    expect(Math.abs(expectedMaxNormalApprox(1e9) - expectedMaxNormal(1e9))).toBeLessThan(0.01);
    expect(expectedMaxNormal(1e280)).toBe(expectedMaxNormalApprox(1e280));
  });
});

describe("expectedMaxAbsNormal", () => {
  it("n = 1 is E|Z| = √(2/π) = 0.7978845608 (SCIENCE.md §4)", () => {
    expect(Math.abs(expectedMaxAbsNormal(1) - 0.7978845608)).toBeLessThan(1e-10);
  });
  it("approaches E[max of 2n normals] for large n (the two tails of |Z| are those of 2n one-sided draws)", () => {
    expect(Math.abs(expectedMaxAbsNormal(1e6) - expectedMaxNormal(2e6))).toBeLessThan(1e-6);
    expect(Math.abs(expectedMaxAbsNormal(1e12) - expectedMaxNormal(2e12))).toBeLessThan(1e-9);
  });
  it("agrees with a seeded Monte Carlo mean of 20000 maxima of 10 |Z| within 5 standard errors", () => {
    const r = createRandom(99);
    const draws = 20000;
    let s = 0;
    let s2 = 0;
    for (let k = 0; k < draws; k++) {
      let m = 0;
      for (let i = 0; i < 10; i++) m = Math.max(m, Math.abs(r.normal()));
      s += m;
      s2 += m * m;
    }
    const mean = s / draws;
    const se = Math.sqrt((s2 / draws - mean * mean) / draws);
    expect(Math.abs(mean - expectedMaxAbsNormal(10))).toBeLessThan(5 * se);
  });
});

describe("quantiles of the maximum", () => {
  it("maxNormalQuantile(n, p) satisfies Φ(m)^n = p, including for n = 1e12", () => {
    // n = 1: the plain quantile; median of max of 2 normals: Φ(m)² = 1/2 → m = Φ⁻¹(1/√2)
    expect(Math.abs(maxNormalQuantile(1, 0.975) - 1.9599639845400542)).toBeLessThan(1e-12);
    for (const [n, p] of [
      [1e3, 0.5],
      [1e12, 0.999],
      [1e12, 1e-6],
    ] as const) {
      const m = maxNormalQuantile(n, p);
      // P(max ≤ m) = (1 − Q(m))^n with Q(m) = P(|Z| > m)/2
      const logF = n * Math.log1p(-normalTwoSidedTail(m) / 2);
      expect(Math.abs(logF - Math.log(p))).toBeLessThan(1e-9 * Math.max(1, Math.abs(Math.log(p))));
    }
  });

  it("maxAbsNormalQuantile(1, p) is the two-sided quantile: median |Z| = 0.6744897502 (SCIENCE.md §4)", () => {
    expect(Math.abs(maxAbsNormalQuantile(1, 0.5) - 0.6744897502)).toBeLessThan(1e-10);
  });

  it("maxAbsNormalExceedanceLevel inverts probAnyExceeds, even for p = 1e-12 and n = 1e9", () => {
    for (const [n, p] of [
      [1, 0.3173105],
      [1e3, 0.01],
      [1e9, 1e-12],
    ] as const) {
      const m = maxAbsNormalExceedanceLevel(n, p);
      expect(Math.abs(probAnyExceeds(n, m) / p - 1)).toBeLessThan(1e-9);
    }
    // one element: the level exceeded with probability P(|Z| > 1) = 0.3173105 is 1 (SCIENCE.md §4)
    expect(Math.abs(maxAbsNormalExceedanceLevel(1, 0.3173105) - 1)).toBeLessThan(1e-6);
  });
});

describe("probAnyExceeds", () => {
  it("one element: P(|Z| > 4) = 6.334248e-5 (SCIENCE.md §4 tails); one-sided halves it", () => {
    expect(Math.abs(probAnyExceeds(1, 4) / 6.334248e-5 - 1)).toBeLessThan(1e-6);
    expect(Math.abs(probAnyExceeds(1, 4, "upper") / (6.334248e-5 / 2) - 1)).toBeLessThan(1e-6);
  });
  it("keeps tiny probabilities: n = 1e6 elements past t = 8 gives ≈ 1e6 × 1.244192e-15 (SCIENCE.md §4)", () => {
    expect(Math.abs(probAnyExceeds(1e6, 8) / (1e6 * 1.244192e-15) - 1)).toBeLessThan(1e-6);
  });
  it("equals 1 − (1 − P)^n where that is well conditioned: n = 100, t = 2", () => {
    const p = 0.04550026; // P(|Z| > 2), SCIENCE.md §4
    expect(Math.abs(probAnyExceeds(100, 2) - (1 - (1 - p) ** 100))).toBeLessThan(1e-6);
  });
  it("edge cases: n = 0 → 0, t ≤ 0 → 1, negative n → NaN", () => {
    expect(probAnyExceeds(0, 3)).toBe(0);
    expect(probAnyExceeds(5, 0)).toBe(1);
    expect(probAnyExceeds(-1, 3)).toBeNaN();
  });
});
