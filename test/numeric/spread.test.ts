import { describe, expect, it } from "vitest";
import {
  activationMoments,
  createRandom,
  reciprocalWidthSum,
  spreadConstants,
  squaredNormLogSpread,
  squaredNormRatioQuantile,
} from "../../src/numeric/index.js";

describe("spreadConstants (SCIENCE.md §2.6, 'General activation' [X, heuristic], q = 1)", () => {
  it("ReLU 5 and 5; identity 2 and 2 (exact)", () => {
    const relu = spreadConstants("relu");
    expect(relu.forward).toBeCloseTo(5, 12);
    expect(relu.backward).toBeCloseTo(5, 12);
    const lin = spreadConstants("identity");
    expect(lin.forward).toBeCloseTo(2, 12);
    expect(lin.backward).toBeCloseTo(2, 12);
  });
  it("leaky a = 0.2: 6(1+a⁴)/(1+a²)² − 1 = 4.556", () => {
    const k = spreadConstants("leaky-relu", 1, 0.2);
    expect(Math.abs(k.forward - 4.556)).toBeLessThan(5e-4);
    expect(Math.abs(k.backward - 4.556)).toBeLessThan(5e-4);
  });
  it.each([
    ["gelu", 6.22, 5.27],
    ["silu", 6.26, 4.97],
    ["tanh", 0.63, 3.75],
    ["sigmoid", 0.53, 2.41],
  ] as const)("%s: %d / %d to the table's two decimals", (name, f, b) => {
    const k = spreadConstants(name);
    expect(Math.abs(k.forward - f)).toBeLessThan(0.006);
    expect(Math.abs(k.backward - b)).toBeLessThan(0.006);
  });
  it("ReLU one-layer check (SCIENCE.md §2.6 derivation): Var[g²·1(g>0)] = 3/2 − 1/4 = 5/4 for g ~ N(0,1)", () => {
    const m = activationMoments("relu", 1);
    expect(m.fourth - m.second ** 2).toBeCloseTo(1.25, 14);
  });
});

describe("log-normal squared-norm model (SCIENCE.md §2.6)", () => {
  it("ln ratio ~ N(−κβ/2, κβ)", () => {
    expect(squaredNormLogSpread(5, 0.2)).toEqual({ logMean: -0.5, logVariance: 1 });
    expect(squaredNormLogSpread(-1, 0.2).logMean).toBeNaN();
  });
  it.each([
    [0.1, 0.0876, 6.92],
    [0.2, 0.0276, 13.33],
    [0.5, 2.16e-3, 37.9],
    [1, 8.19e-5, 82.3],
  ])("ReLU tail factors at β = %d: 0.1%% → %d, 99.9%% → %d (table's 3 digits)", (beta, low, high) => {
    expect(Math.abs(squaredNormRatioQuantile(5, beta, 0.001) / low - 1)).toBeLessThan(6e-3);
    expect(Math.abs(squaredNormRatioQuantile(5, beta, 0.999) / high - 1)).toBeLessThan(6e-3);
  });
  it("β = 0 gives the ratio 1 at every quantile; β sums reciprocal widths (Hanin 2018)", () => {
    expect(squaredNormRatioQuantile(5, 0, 0.999)).toBe(1);
    expect(reciprocalWidthSum([100, 200, 400])).toBeCloseTo(0.0175, 15);
    expect(reciprocalWidthSum([10, 0])).toBeNaN();
  });
  it("check #27: Monte Carlo of 10 ReLU layers of width 50 (β = 0.2) gives ln‖h‖² ≈ N(−κβ/2, κβ), κ = 5, within 25%", () => {
    // He-initialised Gaussian weights, seeded. SCIENCE.md §2.6 reports mean −0.531 and variance 1.093 for
    // (n, L) = (50, 10) with 4000 draws (an O(1/n) excess); 400 draws add a sampling sd of about 7%
    const r = createRandom(11);
    const n = 50;
    const layers = 10;
    const draws = 400;
    const logs: number[] = [];
    const w = new Float64Array(n * n);
    for (let d = 0; d < draws; d++) {
      let h = r.fillNormal(new Float64Array(n));
      let norm0 = 0;
      for (const v of h) norm0 += v * v;
      for (let l = 0; l < layers; l++) {
        r.fillNormal(w, 0, Math.sqrt(2 / n));
        const next = new Float64Array(n);
        for (let i = 0; i < n; i++) {
          let s = 0;
          for (let j = 0; j < n; j++) s += w[i * n + j]! * (h[j]! > 0 ? h[j]! : 0);
          next[i] = s;
        }
        h = next;
      }
      let norm = 0;
      for (const v of h) norm += v * v;
      logs.push(Math.log(norm / norm0));
    }
    const mean = logs.reduce((a, b) => a + b, 0) / draws;
    const variance = logs.reduce((a, b) => a + (b - mean) ** 2, 0) / (draws - 1);
    const model = squaredNormLogSpread(5, layers / n);
    expect(Math.abs(variance / model.logVariance - 1)).toBeLessThan(0.25);
    expect(Math.abs(mean - model.logMean)).toBeLessThan(0.15);
  });
});
