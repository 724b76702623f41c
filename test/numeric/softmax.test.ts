/**
 * Softmax moments of Gaussian logits (src/numeric/softmax.ts) against values from outside the method: the
 * two-class case, where the softmax is a sigmoid of N(0, 2s²) and SCIENCE.md §2.9 gives the Gaussian expectations;
 * the small-variance expansion; the many-class limit; and a seeded Monte Carlo.
 */
import { describe, expect, it } from "vitest";
import { createRandom, gaussHermite, gaussianSoftmaxMoments, gaussianSoftmaxPairMoment } from "../../src/numeric/index.js";

const rel = (a: number, b: number): number => Math.abs(a / b - 1);

/** Seeded Monte Carlo of E[p_1], E[p_1²], E[ln Σ e^z] and the standard errors of the first two. */
function monteCarlo(variance: number, classes: number, samples: number, seed: number) {
  const random = createRandom(seed);
  const s = Math.sqrt(variance);
  let m1 = 0;
  let m2 = 0;
  let m4 = 0;
  let lse = 0;
  for (let r = 0; r < samples; r++) {
    const z1 = s * random.normal();
    let sum = Math.exp(z1);
    for (let j = 1; j < classes; j++) sum += Math.exp(s * random.normal());
    const p = Math.exp(z1) / sum;
    m1 += p;
    m2 += p * p;
    m4 += p ** 4;
    lse += Math.log(sum);
  }
  m1 /= samples;
  m2 /= samples;
  m4 /= samples;
  return { mean: m1, second: m2, logSumExp: lse / samples, secondError: Math.sqrt((m4 - m2 * m2) / samples) };
}

describe("gaussianSoftmaxMoments", () => {
  it("two classes: E[p²] is the sigmoid's E[φ²] at q = 2s² (SCIENCE.md §2.9 [X]: 0.2639555776, 0.2933790359, 0.3485736226 at q = 0.25, 1, 4)", () => {
    expect(gaussianSoftmaxMoments(0.125, 2).second).toBeCloseTo(0.2639555776, 9);
    expect(gaussianSoftmaxMoments(0.5, 2).second).toBeCloseTo(0.2933790359, 9);
    expect(gaussianSoftmaxMoments(2, 2).second).toBeCloseTo(0.3485736226, 9);
  });

  it("two classes: E[ln(e^a + e^b)] = E[softplus(a − b)] = 0.8060591833 at 2s² = 1 (SCIENCE.md §2.9, softplus E[φ] at q = 1)", () => {
    // ln(e^a + e^b) = b + softplus(a − b) and E[b] = 0
    expect(gaussianSoftmaxMoments(0.5, 2).logSumExp).toBeCloseTo(0.8060591833, 9);
  });

  it("the mean is 1/C to 1e-12, a check of the quadrature (exchangeable classes)", () => {
    for (const [v, C] of [[0.01, 2], [1, 10], [4, 1000], [16, 30], [100, 7]] as const) {
      expect(Math.abs(gaussianSoftmaxMoments(v, C).mean * C - 1)).toBeLessThan(1e-12);
    }
  });

  it("small logit variance: E[p²] = (1 + s²(1 − 1/C))/C² and E[ln Σ e^z] = ln C + s²(1 − 1/C)/2, up to O(s⁴) (derived: p ≈ (1 + z − z̄)/C)", () => {
    for (const C of [2, 10, 1000]) {
      const v = 1e-3;
      const m = gaussianSoftmaxMoments(v, C);
      expect(rel(m.second, (1 + v * (1 - 1 / C)) / (C * C))).toBeLessThan(2 * v * v);
      expect(Math.abs(m.logSumExp - (Math.log(C) + (v * (1 - 1 / C)) / 2))).toBeLessThan(v * v);
    }
    // below s² = 1e-4 the function returns the expansion itself; it must join the quadrature smoothly
    expect(rel(gaussianSoftmaxMoments(0.99e-4, 10).second, gaussianSoftmaxMoments(1.01e-4, 10).second)).toBeLessThan(1e-5);
    expect(gaussianSoftmaxMoments(1e-30, 10).second).toBeCloseTo(0.01, 15);
    expect(gaussianSoftmaxMoments(0, 12)).toEqual({ mean: 1 / 12, second: 1 / 144, logSumExp: Math.log(12) });
  });

  it("many classes: the denominator concentrates at C·e^(s²/2) (law of large numbers), so E[p²] → e^(s²)/C²", () => {
    for (const v of [0.25, 1, 2]) expect(rel(gaussianSoftmaxMoments(v, 1e6).second, Math.exp(v) / 1e12)).toBeLessThan(1e-3);
  });

  it("agrees with a seeded Monte Carlo within 4 standard errors (10 classes at s² = 1 and 2; 1000 classes at s² = 1; 10 classes at s² = 9)", () => {
    for (const [v, C, samples] of [[1, 10, 40000], [2, 10, 40000], [1, 1000, 2000], [9, 10, 40000]] as const) {
      const exact = gaussianSoftmaxMoments(v, C);
      const mc = monteCarlo(v, C, samples, 20260 + C);
      expect(Math.abs(exact.second - mc.second)).toBeLessThan(4 * mc.secondError);
      expect(Math.abs(exact.logSumExp - mc.logSumExp)).toBeLessThan(0.02 * Math.sqrt(v) + 1e-3);
    }
  });

  it("the log-normal approximation e^(s²)/C² overstates E[p²] with few classes: by 2.7× at s² = 2, C = 10", () => {
    const exact = gaussianSoftmaxMoments(2, 10).second;
    expect(exact).toBeCloseTo(0.02759, 4); // Monte Carlo above: 0.0277 ± 0.0001
    expect(Math.exp(2) / 100 / exact).toBeGreaterThan(2.5);
  });

  it("continuous across s² = 400 (once a jump to one-hot, E[p²] = 1/C) and across the end of the quadrature at 2000", () => {
    for (const C of [4, 50, 1000]) {
      for (const edge of [400, 2000]) {
        const below = gaussianSoftmaxMoments(edge - 0.1, C);
        const above = gaussianSoftmaxMoments(edge + 0.1, C);
        // 1 − C·E[p²] ∝ 1/s and E[ln Σ e^z] ≈ s·E[max]: a step of 0.2 in s² moves either by about 0.2/(2·edge) relative
        expect(rel(1 - C * above.second, 1 - C * below.second), `1 − C·E[p²] at s² = ${edge}, C = ${C}`).toBeLessThan(1e-3);
        expect(rel(above.logSumExp, below.logSumExp), `log-sum-exp at s² = ${edge}, C = ${C}`).toBeLessThan(1e-3);
        expect(C * above.second).toBeLessThan(1);
      }
    }
  });

  it("agrees with a seeded Monte Carlo past the old cutoff (s² = 500 and 2000, 50 classes) and past the quadrature (8000)", () => {
    for (const [v, seed] of [[500, 31], [2000, 32], [8000, 33]] as const) {
      const exact = gaussianSoftmaxMoments(v, 50);
      const mc = monteCarlo(v, 50, 40000, seed);
      expect(Math.abs(exact.second - mc.second), `E[p²] at s² = ${v}`).toBeLessThan(4 * mc.secondError);
      expect(Math.abs(exact.logSumExp - mc.logSumExp), `log-sum-exp at s² = ${v}`).toBeLessThan(0.02 * Math.sqrt(v) + 1e-3);
    }
  });

  it("past s² = 2000 the peaked limit's leading order (1 − C·E[p²] and E[ln Σ e^z] − s·E[max] ∝ 1/s) follows the quadrature", () => {
    for (const C of [4, 1000]) {
      for (const v of [5000, 10000]) {
        const carried = gaussianSoftmaxMoments(v, C);
        const exact = gaussianSoftmaxMoments(v, C, Infinity);
        // measured when written: within 4e-4 and 3e-6 relative; the next order is O(1/s) relative, so 1.5 times those
        expect(rel(1 - C * carried.second, 1 - C * exact.second), `1 − C·E[p²] at s² = ${v}, C = ${C}`).toBeLessThan(6e-4);
        expect(rel(carried.logSumExp, exact.logSumExp), `log-sum-exp at s² = ${v}, C = ${C}`).toBeLessThan(5e-6);
      }
    }
  });

  it("returns NaN for a negative variance or no classes", () => {
    expect(gaussianSoftmaxMoments(-1, 10).second).toBeNaN();
    expect(gaussianSoftmaxMoments(1, 0).second).toBeNaN();
  });
});

describe("gaussianSoftmaxPairMoment", () => {
  it("ends: 1/C² for uncorrelated samples, E[p²] for identical ones", () => {
    expect(gaussianSoftmaxPairMoment(1, 0, 10)).toBe(0.01);
    expect(gaussianSoftmaxPairMoment(1, 1, 10)).toBe(gaussianSoftmaxMoments(1, 10).second);
    expect(Math.abs(gaussianSoftmaxPairMoment(1, 0.9999, 10) / gaussianSoftmaxMoments(1, 10).second - 1)).toBeLessThan(1e-3);
  });

  it("two classes: E[σ(d_n)σ(d_m)] for d ~ N(0, 2s²) with correlation c, by an independent 2 × 80-node Gauss–Hermite rule", () => {
    const { nodes, weights } = gaussHermite(80);
    const sigmoid = (x: number): number => 1 / (1 + Math.exp(-x));
    for (const [v, c] of [[0.5, 0.5], [2, 0.3], [1, 0.9]] as const) {
      const sd = Math.sqrt(2 * v);
      let outer = 0;
      for (let i = 0; i < nodes.length; i++) {
        const a = Math.SQRT2 * (nodes[i] as number);
        let inner = 0; // E over the sample's own part, given the common part a
        for (let j = 0; j < nodes.length; j++) inner += (weights[j] as number) * sigmoid(sd * (Math.sqrt(c) * a + Math.sqrt(1 - c) * Math.SQRT2 * (nodes[j] as number)));
        inner /= Math.sqrt(Math.PI);
        outer += (weights[i] as number) * inner * inner;
      }
      expect(gaussianSoftmaxPairMoment(v, c, 2)).toBeCloseTo(outer / Math.sqrt(Math.PI), 8);
    }
  });

  it("small correlation: the first-order Hermite term c·s²·(1/C − E[p²])²·C/(C − 1) (derived), joined smoothly at c·s² = 10⁻³", () => {
    const m2 = gaussianSoftmaxMoments(1, 10).second;
    const below = gaussianSoftmaxPairMoment(1, 0.99e-3, 10);
    const above = gaussianSoftmaxPairMoment(1, 1.01e-3, 10);
    const slope = ((1 / 10 - m2) ** 2 * 10) / 9;
    expect((below - 0.01) / 0.99e-3).toBeCloseTo(slope, 8);
    expect(Math.abs((above - 0.01) / 1.01e-3 / slope - 1)).toBeLessThan(0.01);
  });

  it("agrees with a seeded Monte Carlo within 4 standard errors (10 classes, s² = 1 and 2, c = 0.5 and 0.9)", () => {
    for (const [v, c] of [[1, 0.5], [2, 0.9]] as const) {
      const random = createRandom(99);
      const s = Math.sqrt(v);
      const samples = 30000;
      let sum = 0;
      let sumSquares = 0;
      for (let r = 0; r < samples; r++) {
        let sn = 0;
        let sm = 0;
        let first = 0;
        for (let j = 0; j < 10; j++) {
          const common = Math.sqrt(c) * random.normal();
          const en = Math.exp(s * (common + Math.sqrt(1 - c) * random.normal()));
          const em = Math.exp(s * (common + Math.sqrt(1 - c) * random.normal()));
          sn += en;
          sm += em;
          if (j === 0) first = en * em;
        }
        const product = first / (sn * sm);
        sum += product;
        sumSquares += product * product;
      }
      const mean = sum / samples;
      const error = Math.sqrt((sumSquares / samples - mean * mean) / samples);
      expect(Math.abs(gaussianSoftmaxPairMoment(v, c, 10) - mean)).toBeLessThan(4 * error);
    }
  });

  it("past s² = 400 no jump: the quadrature there carried on by the peaked limit (10 classes, c = 0.5; before, 0.0293 became 0.055)", () => {
    const below = gaussianSoftmaxPairMoment(399.999, 0.5, 10);
    const above = gaussianSoftmaxPairMoment(400.001, 0.5, 10);
    expect(Math.abs(above / below - 1)).toBeLessThan(1e-6);
  });

  it("past s² = 400 the peaked limit's leading order follows the quadrature run on to 625 (10 classes, c = 0.5; a decay ∝ 1/s would be 6e-4 off)", () => {
    const quadrature = gaussianSoftmaxPairMoment(625, 0.5, 10, Infinity);
    expect(Math.abs(gaussianSoftmaxPairMoment(625, 0.5, 10) / quadrature - 1)).toBeLessThan(1e-4);
  });

  it("s → ∞, two classes: both samples' class 1 wins with the orthant probability 1/4 + asin(c)/(2π) (Sheppard 1899, Phil. Trans. A 192)", () => {
    for (const c of [0.3, 0.9, 0.99]) {
      expect(Math.abs(gaussianSoftmaxPairMoment(1e12, c, 2) / (0.25 + Math.asin(c) / (2 * Math.PI)) - 1)).toBeLessThan(1e-6);
    }
  });

  it("agrees with a seeded Monte Carlo within 4 standard errors past s² = 400 (10 classes, s² = 500 and 2000)", () => {
    for (const [v, c] of [[500, 0.5], [2000, 0.5], [2000, 0.9]] as const) {
      const random = createRandom(7);
      const s = Math.sqrt(v);
      const samples = 100000;
      let sum = 0;
      let sumSquares = 0;
      const zn = new Float64Array(10);
      const zm = new Float64Array(10);
      for (let r = 0; r < samples; r++) {
        let mn = -Infinity;
        let mm = -Infinity;
        for (let j = 0; j < 10; j++) {
          const common = Math.sqrt(c) * random.normal();
          zn[j] = s * (common + Math.sqrt(1 - c) * random.normal());
          zm[j] = s * (common + Math.sqrt(1 - c) * random.normal());
          mn = Math.max(mn, zn[j] as number);
          mm = Math.max(mm, zm[j] as number);
        }
        let sn = 0;
        let sm = 0;
        for (let j = 0; j < 10; j++) {
          sn += Math.exp((zn[j] as number) - mn);
          sm += Math.exp((zm[j] as number) - mm);
        }
        const product = Math.exp((zn[0] as number) - mn + (zm[0] as number) - mm) / (sn * sm);
        sum += product;
        sumSquares += product * product;
      }
      const mean = sum / samples;
      const error = Math.sqrt((sumSquares / samples - mean * mean) / samples);
      expect(Math.abs(gaussianSoftmaxPairMoment(v, c, 10) - mean)).toBeLessThan(4 * error);
    }
  });
});
