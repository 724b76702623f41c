import { describe, expect, it } from "vitest";
import { pairCovariance, pairCovarianceAt } from "../../src/numeric/pair-covariance.js";

// g(c) = Cov(f(u), f(v))/E[f]² for unit Gaussians u, v of correlation c, against closed forms
describe("pairCovariance (Mehler's series)", () => {
  it("u²: 2c² (Isserlis' theorem: E[u²v²] = 1 + 2c²)", () => {
    const b = pairCovariance((x) => x * x, 1);
    for (const c of [-0.6, 0, 0.3, 0.9, 1]) expect(pairCovarianceAt(b, c)).toBeCloseTo(2 * c * c, 10);
  });

  it("relu(u)²: the degree-2 arc-cosine kernel (Cho & Saul 2009: E[relu(u)²relu(v)²] = J₂(θ)/2π, J₂ = 3 sin θ cos θ + (π − θ)(1 + 2cos²θ), the form from memory; it gives E[relu⁴] = 3/2 at θ = 0 and 1/4 at θ = π/2)", () => {
    const b = pairCovariance((x) => (x > 0 ? x * x : 0), 2);
    for (const c of [-0.5, 0, 0.1, 0.318, 0.5, 0.7, 0.9, 1]) {
      const t = Math.acos(c);
      const j2 = 3 * Math.sin(t) * Math.cos(t) + (Math.PI - t) * (1 + 2 * c * c);
      // E[relu²] = 1/2 at unit variance, so g = (J₂/2π)/(1/4) − 1; the series' tail is held at c¹³, 1e-4 at c = 0.9
      expect(Math.abs(pairCovarianceAt(b, c) - ((2 / Math.PI) * j2 - 1)), `c = ${c}`).toBeLessThan(2e-4);
    }
  });

  it("a ReLU's gate 1[u > 0]: (2/π)·arcsin c (Sheppard 1899: P(u > 0, v > 0) = 1/4 + arcsin(c)/2π)", () => {
    const b = pairCovariance((x) => (x > 0 ? 1 : 0), 1);
    // a step's series converges slowly; the tail held at c¹³ leaves 1e-3 up to c = 0.5
    for (const c of [0, 0.1, 0.3, 0.5]) expect(Math.abs(pairCovarianceAt(b, c) - (2 / Math.PI) * Math.asin(c)), `c = ${c}`).toBeLessThan(1e-3);
    expect(pairCovarianceAt(b, 1)).toBeCloseTo(1, 10);
  });
});
