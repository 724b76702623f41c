/**
 * The attention rows' softmax moments for Gaussian logits (gaussianSoftmaxRows in src/numeric/softmax.ts) against
 * checks from outside its method: the two-key row, which is a sigmoid of one N(0, 2s²) variable and so a one-dimensional
 * Gauss–Hermite integral (Golub & Welsch 1969 nodes, src/numeric/quadrature.ts); Stein's identity for the weighted
 * logit; the existing E[p²] quadrature; and a seeded Monte Carlo of softmax rows.
 */
import { describe, expect, it } from "vitest";
import { createRandom, gaussianExpectation, gaussianSoftmaxMoments, gaussianSoftmaxRow, gaussianSoftmaxRows } from "../../src/numeric/index.js";

const sigmoid = (x: number): number => 1 / (1 + Math.exp(-x));

/** Seeded Monte Carlo of E[S], E[S + S² − 2Σp³], E[(Σ p z)²]/s² over `samples` rows of n keys, with standard errors. */
function monteCarlo(variance: number, n: number, samples: number, seed: number) {
  const random = createRandom(seed);
  const s = Math.sqrt(variance);
  const z = new Float64Array(n);
  const acc = { S: [0, 0], C: [0, 0], T: [0, 0] };
  const add = (a: number[], x: number) => {
    a[0] = (a[0] as number) + x;
    a[1] = (a[1] as number) + x * x;
  };
  for (let r = 0; r < samples; r++) {
    let top = -Infinity;
    for (let j = 0; j < n; j++) {
      z[j] = s * random.normal();
      top = Math.max(top, z[j] as number);
    }
    let sum = 0;
    for (let j = 0; j < n; j++) sum += Math.exp((z[j] as number) - top);
    let S = 0;
    let cube = 0;
    let m = 0;
    for (let j = 0; j < n; j++) {
      const p = Math.exp((z[j] as number) - top) / sum;
      S += p * p;
      cube += p * p * p;
      m += p * (z[j] as number);
    }
    add(acc.S, S);
    add(acc.C, S + S * S - 2 * cube);
    add(acc.T, (m * m) / variance);
  }
  const stat = (a: number[]) => {
    const mean = (a[0] as number) / samples;
    return { mean, error: Math.sqrt(Math.max((a[1] as number) / samples - mean * mean, 0) / samples) };
  };
  return { S: stat(acc.S), C: stat(acc.C), T: stat(acc.T) };
}

describe("gaussianSoftmaxRows", () => {
  it("a row of one key: S = 1, nothing left by the Jacobian, the weighted logit is the logit (softmax definition)", () => {
    const [row] = gaussianSoftmaxRows(2, 1);
    expect(row!.sumSquares).toBeCloseTo(1, 10);
    expect(row!.centred).toBeCloseTo(0, 10);
    expect(row!.tilt).toBeCloseTo(1, 8);
  });

  it("two keys: p = sigmoid(w), w ~ N(0, 2s²), z = c ± w/2 with c ~ N(0, s²/2) apart from w (Gauss–Hermite, 96 nodes: 1e-6, its accuracy for a sigmoid at q = 8; a larger q needs more nodes)", () => {
    for (const variance of [0.25, 1, 4]) {
      const row = gaussianSoftmaxRows(variance, 2)[1]!;
      const q = 2 * variance;
      // S = p² + (1 − p)², Σp³ = p³ + (1 − p)³, and (Σ p z)² = (c + w(p − ½))² with E[c²] = s²/2 (own algebra)
      const S = gaussianExpectation((w) => sigmoid(w) ** 2 + sigmoid(-w) ** 2, q);
      const centred = gaussianExpectation((w) => {
        const p = sigmoid(w);
        const s2 = p * p + (1 - p) * (1 - p);
        return s2 + s2 * s2 - 2 * (p ** 3 + (1 - p) ** 3);
      }, q);
      const slope = gaussianExpectation((w) => {
        const p = sigmoid(w);
        const s2 = p * p + (1 - p) * (1 - p);
        return s2 + 3 * s2 * s2 - 4 * (p ** 3 + (1 - p) ** 3);
      }, q);
      const tilt = (variance / 2 + gaussianExpectation((w) => (w * (sigmoid(w) - 0.5)) ** 2, q)) / variance;
      expect(row.sumSquares, `S at s² = ${variance}`).toBeCloseTo(S, 6);
      expect(row.centred, `centred at s² = ${variance}`).toBeCloseTo(centred, 6);
      expect(row.tilt, `tilt at s² = ${variance}`).toBeCloseTo(tilt, 6);
      // a difference of terms up to 4·S: held to the nodes' stated 1e-6 (toBeCloseTo(…, 6) asks 5e-7)
      expect(Math.abs(row.slope - slope), `slope at s² = ${variance}`).toBeLessThan(1e-6);
    }
  });

  it("the heat equation: E[S + 3S² − 4Σp³] = ½·E[Δ_z S] is dE[S]/ds², the central difference of E[S] (within 1e-5, relative)", () => {
    // d/dt E[f(z + √t·w)] = ½·E[Δf] (common practice); the step 1e-3·s² leaves a difference error of order 1e-6
    for (const [variance, n] of [[0.25, 2], [1, 32], [9, 64], [64, 128], [400, 64], [5000, 64]] as const) {
      const h = 1e-3 * variance;
      const difference = (gaussianSoftmaxRow(variance + h, n)!.sumSquares - gaussianSoftmaxRow(variance - h, n)!.sumSquares) / (2 * h);
      const row = gaussianSoftmaxRow(variance, n)!;
      expect(Math.abs(row.slope / difference - 1), `s² = ${variance}, n = ${n}`).toBeLessThan(1e-5);
    }
  });

  it("Stein's lemma: E[Σ_j p_j z_j] = s²·Σ_j E[∂p_j/∂z_j] = s²·(1 − E[S]) (Stein 1981, Lemma 1)", () => {
    for (const [variance, n] of [[0.5, 16], [1, 128], [9, 64], [40, 32]] as const) {
      const row = gaussianSoftmaxRows(variance, n)[n - 1]!;
      expect(Math.abs(row.tiltMean - (1 - row.sumSquares)), `s² = ${variance}, n = ${n}`).toBeLessThan(1e-7);
    }
  });

  it("every row length agrees with n·E[p²] of gaussianSoftmaxMoments, an independent quadrature per n", () => {
    const rows = gaussianSoftmaxRows(3, 40);
    for (const n of [1, 2, 7, 40]) expect(rows[n - 1]!.sumSquares / (n * gaussianSoftmaxMoments(3, n).second)).toBeCloseTo(1, 9);
  });

  it("a long causal row set (past 128 keys the rows are interpolated between a grid of lengths) agrees with each length's own quadrature within 1e-9", () => {
    // each length's own quadrature (gaussianSoftmaxRow: one row, its lattice set at that length) sums no grid; the
    // lengths taken fall between the grid's, near its start, its middle and its end, and on it; n·E[p²] of
    // gaussianSoftmaxMoments is a third quadrature (the Laplace transform of E[p²] alone)
    for (const variance of [0.04, 1.7, 19, 1500]) {
      const rows = gaussianSoftmaxRows(variance, 3000);
      expect(rows).toHaveLength(3000);
      for (const n of [129, 131, 133, 167, 250, 701, 1999, 2950, 2999, 3000]) {
        const own = gaussianSoftmaxRow(variance, n)!;
        const row = rows[n - 1]!;
        for (const field of ["sumSquares", "centred", "slope", "tilt", "tiltMean"] as const) {
          // the slope is a difference of terms up to 4·S (S + 3S² − 4Σp³): near one-hot rows two quadratures of it on
          // different lattices agree to ~3e-8 whatever the lengths summed (every length summed did the same)
          const within = field === "slope" && variance > 100 ? 1e-7 : 1e-9;
          expect(Math.abs(row[field] / own[field] - 1), `${field} at s² = ${variance}, n = ${n}`).toBeLessThan(within);
        }
        if (variance < 100) expect(Math.abs(row.sumSquares / (n * gaussianSoftmaxMoments(variance, n).second) - 1), `n·E[p²] at s² = ${variance}, n = ${n}`).toBeLessThan(1e-9);
      }
    }
  });

  it("a seeded Monte Carlo of 20,000 rows agrees within 4 standard errors, spread and concentrated", () => {
    for (const [variance, n, seed] of [[1, 32, 11], [16, 32, 12], [4, 128, 13]] as const) {
      const row = gaussianSoftmaxRows(variance, n)[n - 1]!;
      const mc = monteCarlo(variance, n, 20_000, seed);
      expect(Math.abs(row.sumSquares - mc.S.mean), `S at s² = ${variance}, n = ${n}`).toBeLessThan(4 * mc.S.error);
      expect(Math.abs(row.centred - mc.C.mean), `centred at s² = ${variance}, n = ${n}`).toBeLessThan(4 * mc.C.error);
      expect(Math.abs(row.tilt - mc.T.mean), `tilt at s² = ${variance}, n = ${n}`).toBeLessThan(4 * mc.T.error);
    }
  });

  it("the Jacobian's share falls below the even-row bound S·(1 − 1/n) as rows concentrate (Cauchy–Schwarz: Σp³ ≥ S²)", () => {
    const spread = gaussianSoftmaxRows(0.01, 64)[63]!;
    const peaked = gaussianSoftmaxRows(16, 64)[63]!;
    expect(spread.centred / (spread.sumSquares * (1 - 1 / 64))).toBeGreaterThan(0.98);
    expect(peaked.centred / (peaked.sumSquares * (1 - 1 / 64))).toBeLessThan(0.3);
  });

  it("one row length alone (gaussianSoftmaxRow) agrees with the last of every length, spread, concentrated and one-hot", () => {
    for (const [variance, n] of [[1e-5, 9], [1, 256], [30, 64], [900, 12]] as const) {
      const all = gaussianSoftmaxRows(variance, n)[n - 1]!;
      const one = gaussianSoftmaxRow(variance, n)!;
      for (const key of ["sumSquares", "centred", "tilt", "tiltMean"] as const) {
        expect(Math.abs(one[key] - all[key]), `${key} at s² = ${variance}, n = ${n}`).toBeLessThanOrEqual(1e-11 * Math.abs(all[key]));
      }
      // the slope, S + 3S² − 4Σp³, cancels terms up to 4·S near one-hot rows: held relative to those
      expect(Math.abs(one.slope - all.slope), `slope at s² = ${variance}, n = ${n}`).toBeLessThanOrEqual(1e-11 * 4 * all.sumSquares);
    }
    expect(gaussianSoftmaxRow(Number.NaN, 4)).toBeUndefined();
  });

  it("continuous across s² = 400 (once a jump to one-hot rows) and across the end of the quadrature at 2000", () => {
    for (const n of [64, 1500]) {
      for (const edge of [400, 2000]) {
        const below = gaussianSoftmaxRow(edge - 0.1, n)!;
        const above = gaussianSoftmaxRow(edge + 0.1, n)!;
        // d ln(1 − S)/d ln s² ≈ −1/2 (1 − S ∝ 1/s, peakedRows): a step of 0.2 in s² moves it by about 0.2/(2·edge)
        for (const key of ["sumSquares", "centred", "tilt", "tiltMean"] as const) {
          expect(Math.abs(above[key] / below[key] - 1), `${key} at s² = ${edge}, n = ${n}`).toBeLessThan(1e-3);
        }
        expect(above.centred).toBeGreaterThan(0);
        expect(1 - above.sumSquares).toBeGreaterThan(0);
      }
    }
  });

  it("a seeded Monte Carlo of 20,000 rows agrees within 4 standard errors past the old cutoff (s² = 500, 2000) and past the quadrature (8000)", () => {
    for (const [variance, n, seed] of [[500, 64, 21], [2000, 64, 22], [500, 16, 23], [8000, 64, 24]] as const) {
      const row = gaussianSoftmaxRow(variance, n)!;
      const mc = monteCarlo(variance, n, 20_000, seed);
      expect(Math.abs(row.sumSquares - mc.S.mean), `S at s² = ${variance}, n = ${n}`).toBeLessThan(4 * mc.S.error);
      expect(Math.abs(row.centred - mc.C.mean), `centred at s² = ${variance}, n = ${n}`).toBeLessThan(4 * mc.C.error);
      expect(Math.abs(row.tilt - mc.T.mean), `tilt at s² = ${variance}, n = ${n}`).toBeLessThan(4 * mc.T.error);
    }
  });

  it("Stein's lemma holds in the quadrature past the old cutoff (Stein 1981, Lemma 1)", () => {
    for (const [variance, n] of [[500, 64], [1999, 1500]] as const) {
      const row = gaussianSoftmaxRow(variance, n)!;
      expect(Math.abs(row.tiltMean - (1 - row.sumSquares)), `s² = ${variance}, n = ${n}`).toBeLessThan(1e-7);
    }
  });

  it("past s² = 2000 the peaked limit's leading order (1 − S, the Jacobian's share ∝ 1/s; tilt − E[x_max²] ∝ 1/s²) follows the quadrature", () => {
    for (const variance of [5000, 10000]) {
      const carried = gaussianSoftmaxRow(variance, 64)!;
      const exact = gaussianSoftmaxRow(variance, 64, Infinity)!;
      // measured when written: 1 − S within 4e-4, the share within 2.6%, tilt within 1e-5 (relative); the next order
      // is O(1/s) relative, so 1.5 times those
      expect(Math.abs((1 - carried.sumSquares) / (1 - exact.sumSquares) - 1), `1 − S at s² = ${variance}`).toBeLessThan(6e-4);
      expect(Math.abs(carried.centred / exact.centred - 1), `share at s² = ${variance}`).toBeLessThan(0.04);
      expect(Math.abs(carried.tilt / exact.tilt - 1), `tilt at s² = ${variance}`).toBeLessThan(1.5e-5);
    }
  });

  it("the one-hot limit only at s² = ∞: S = 1, no Jacobian, tilt E[max(x_1, x_2)²] = 1 for two keys (max² + min² = x_1² + x_2², and max and min swap under x → −x)", () => {
    const row = gaussianSoftmaxRow(Number.MAX_VALUE, 2)!;
    expect(row.sumSquares).toBeCloseTo(1, 12);
    expect(row.centred).toBeCloseTo(0, 12);
    expect(row.tilt).toBeCloseTo(1, 6);
    const far = gaussianSoftmaxRow(1e8, 2)!;
    expect(far.centred).toBeGreaterThan(0);
  });

  it("returns nothing for a negative or non-finite variance or no keys", () => {
    expect(gaussianSoftmaxRows(-1, 4)).toEqual([]);
    expect(gaussianSoftmaxRows(Number.NaN, 4)).toEqual([]);
    expect(gaussianSoftmaxRows(1, 0)).toEqual([]);
  });
});
