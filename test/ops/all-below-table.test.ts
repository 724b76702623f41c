/**
 * allBelowZero (src/ops/activation/analytic.ts) tables the fixed parts of its quadrature and memoises by number keys.
 * These checks hold it to the direct evaluation of its documented rule (composite 12-point Gauss–Legendre on [−9, 9]
 * of the one-factor integral, Dunnett & Sobel 1955, from memory), written out here term by term as the function
 * first did it: the tabled form must give the same doubles (within 1e-12 relative where the sum is taken as its series in
 * 1/r², c ≥ 0.93), and a memoised answer the same value as a fresh one.
 * Outside anchors: Sheppard's P(u₁ ≤ 0, u₂ ≤ 0) = 1/4 + arcsin(c)/2π (Sheppard 1899) and 2^−n at c = 0.
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { allBelowZero } from "../../src/ops/activation/analytic.js";
import { gaussLegendre, normalCdf, normalPdf } from "../../src/numeric/index.js";

function direct(c: number, n: number): number {
  const r = Math.sqrt(c / (1 - c));
  const rule = gaussLegendre(12);
  const limit = 9;
  const panels = 12;
  const width = (2 * limit) / panels;
  let sum = r > 1 ? normalCdf(-limit / r) : 0;
  for (let p = 0; p < panels; p++) {
    const mid = -limit + (p + 0.5) * width;
    for (let i = 0; i < rule.nodes.length; i++) {
      const x = mid + 0.5 * width * (rule.nodes[i] as number);
      const w = 0.5 * width * (rule.weights[i] as number);
      sum += r > 1 ? (w / r) * normalPdf(x / r) * Math.pow(normalCdf(-x), n) : w * normalPdf(x) * Math.pow(normalCdf(-r * x), n);
    }
  }
  return sum;
}

// where allBelowZero sums its nodes as the series of e^(−x²/(2r²)): 81/(2r²) ≤ 3, r² = c/(1 − c)
const bySeries = (c: number): boolean => 81 / (2 * (c / (1 - c))) <= 3;

// the tabled (or series) value against the direct one: the same doubles, or within 1e-12 relative by the series
function expectRule(c: number, n: number): void {
  const value = allBelowZero(c, n);
  const reference = direct(c, n);
  if (bySeries(c)) expect(Math.abs(value - reference), `c ${c}, n ${n}`).toBeLessThanOrEqual(1e-12 * reference);
  else expect(value, `c ${c}, n ${n}`).toBe(reference);
  // a second call comes from the memo and must give the first call's value
  expect(allBelowZero(c, n)).toBe(value);
}

describe("allBelowZero with tabled nodes", () => {
  it("gives the direct evaluation's doubles over a sweep of correlations and counts", () => {
    for (const n of [1, 2, 3, 7, 32, 100, 1000, 4096, 65536]) {
      for (let k = 1; k < 40; k++) {
        const c = k / 40 + 1e-3 * Math.sin(k * n);
        if (!(c > 0 && c < 1)) continue;
        expectRule(c, n);
      }
    }
  });

  it("keeps every (c, n) apart in its memo: one correlation at many counts, many correlations, each twice", () => {
    // one u ≤ 0 has probability 1/2 whatever c is, two Sheppard's value (Sheppard 1899): a memo keyed on c alone, or
    // one slot answering for another key, would give one count's value for another
    for (let k = 1; k < 400; k++) {
      const c = k / 400;
      expect(allBelowZero(c, 2)).toBeCloseTo(0.25 + Math.asin(c) / (2 * Math.PI), 6);
      expect(allBelowZero(c, 1)).toBeCloseTo(0.5, 6);
    }
    for (let k = 1; k < 400; k++) {
      const c = k / 400;
      expectRule(c, 1);
      expectRule(c, 2);
      expectRule(c, 3);
    }
  });

  it("sums the nodes as their series in 1/r² within 1e-12 of the direct sum, for correlations near 1 and any count", () => {
    let series = 0;
    fc.assert(
      fc.property(fc.double({ min: 0.9, max: 0.999999, noNaN: true }), fc.integer({ min: 1, max: 1 << 22 }), (c, n) => {
        if (bySeries(c)) series++;
        expectRule(c, n);
      }),
      { numRuns: 300 },
    );
    expect(series).toBeGreaterThan(100);
  });

  it("meets Sheppard's two-variable orthant probability (Sheppard 1899) and 2^−n at c = 0", () => {
    for (const c of [0.1, 0.3, 0.5, 0.7, 0.9]) expect(allBelowZero(c, 2)).toBeCloseTo(0.25 + Math.asin(c) / (2 * Math.PI), 6);
    expect(allBelowZero(0, 10)).toBe(Math.pow(2, -10));
  });
});
