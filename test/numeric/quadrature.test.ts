import { describe, expect, it } from "vitest";
import {
  gaussHermite,
  gaussianExpectation,
  gaussianExpectationSplit,
  gaussLegendre,
} from "../../src/numeric/index.js";

const SQRT_PI = Math.sqrt(Math.PI);

// (2k − 1)!! = E[z^{2k}] for z ~ N(0,1) (moments of the normal law)
function doubleFactorialOdd(k: number): number {
  let r = 1;
  for (let j = 2 * k - 1; j > 1; j -= 2) r *= j;
  return r;
}

describe("gaussHermite", () => {
  it("n = 2 has nodes ±1/√2 and weights √π/2 (H_2 = 4x² − 2, closed form)", () => {
    const { nodes, weights } = gaussHermite(2);
    expect(nodes[0]).toBeCloseTo(-Math.SQRT1_2, 15);
    expect(nodes[1]).toBeCloseTo(Math.SQRT1_2, 15);
    expect(weights[0]).toBeCloseTo(SQRT_PI / 2, 15);
  });

  it.each([1, 2, 3, 5, 10, 20, 50, 64, 96, 100, 150, 199, 200])(
    "n = %d: weights sum to √π and the rule reproduces E[z^2k] = (2k−1)!! for 2k ≤ min(2n−1, 20)",
    (n) => {
      const rule = gaussHermite(n);
      let sum = 0;
      for (const w of rule.weights) sum += w;
      expect(Math.abs(sum - SQRT_PI)).toBeLessThan(1e-14 * n);
      for (let k = 1; 2 * k <= Math.min(2 * n - 1, 20); k++) {
        const m = gaussianExpectation((x) => x ** (2 * k), 1, n);
        expect(Math.abs(m / doubleFactorialOdd(k) - 1)).toBeLessThan(1e-12);
      }
      // nodes strictly ascend and are symmetric
      for (let i = 1; i < n; i++) expect(rule.nodes[i]!).toBeGreaterThan(rule.nodes[i - 1]!);
      for (let i = 0; i < n; i++) expect(rule.nodes[i]! + rule.nodes[n - 1 - i]!).toBe(0);
    },
  );

  it("the largest node of n = 200 lies near √(2n) (Hermite zeros are below √(2n+1))", () => {
    const x = gaussHermite(200).nodes[199]!;
    expect(x).toBeLessThan(Math.sqrt(401));
    expect(x).toBeGreaterThan(Math.sqrt(401) - 2);
  });

  it("returns the cached rule on a second call, and rejects bad sizes", () => {
    expect(gaussHermite(40)).toBe(gaussHermite(40));
    expect(() => gaussHermite(0)).toThrow(RangeError);
    expect(() => gaussHermite(201)).toThrow(RangeError);
    expect(() => gaussHermite(2.5)).toThrow(/2.5/);
  });
});

describe("gaussLegendre", () => {
  it.each([1, 2, 7, 12, 50, 200])("n = %d integrates x^k exactly on [−1, 1] for k < 2n (up to 30)", (n) => {
    const { nodes, weights } = gaussLegendre(n);
    for (let k = 0; k < Math.min(2 * n, 31); k++) {
      let s = 0;
      for (let i = 0; i < n; i++) s += weights[i]! * nodes[i]! ** k;
      const exact = k % 2 === 1 ? 0 : 2 / (k + 1);
      expect(Math.abs(s - exact)).toBeLessThan(1e-14);
    }
  });
});

describe("gaussianExpectation", () => {
  it("E[cos(√q z)] = e^{−q/2} (the normal characteristic function)", () => {
    for (const q of [0.01, 0.5, 1, 4, 16]) {
      expect(Math.abs(gaussianExpectation(Math.cos, q) - Math.exp(-q / 2))).toBeLessThan(1e-13);
    }
  });

  it("q = 0 gives f(0); q < 0 gives NaN", () => {
    expect(gaussianExpectation((x) => x + 3, 0)).toBe(3);
    expect(gaussianExpectation((x) => x, -1)).toBeNaN();
  });
});

describe("gaussianExpectationSplit (kinked integrands)", () => {
  it("E|Z| = √(2/π) = 0.7978845608 (SCIENCE.md §4)", () => {
    expect(gaussianExpectationSplit(Math.abs, 1)).toBeCloseTo(0.7978845608, 10);
  });

  it("ReLU moments at variance q: E[φ] = √(q/2π), E[φ²] = q/2 (SCIENCE.md §2.9 closed forms)", () => {
    const relu = (x: number): number => (x > 0 ? x : 0);
    for (const q of [1e-6, 0.25, 1, 4, 1e4]) {
      expect(Math.abs(gaussianExpectationSplit(relu, q) / Math.sqrt(q / (2 * Math.PI)) - 1)).toBeLessThan(1e-13);
      expect(Math.abs(gaussianExpectationSplit((x) => relu(x) ** 2, q) / (q / 2) - 1)).toBeLessThan(1e-13);
    }
  });

  it("a jump at 0: E[1(z > 0)] = 1/2, which Gauss–Hermite with an odd rule gets wrong", () => {
    const step = (x: number): number => (x > 0 ? 1 : 0);
    expect(gaussianExpectationSplit(step, 1)).toBeCloseTo(0.5, 14);
    expect(Math.abs(gaussianExpectation((x) => (x >= 0 ? 1 : 0), 1, 11) - 0.5)).toBeGreaterThan(0.01);
  });

  it("E[cos(√q z)] = e^{−q/2} for large q too", () => {
    for (const q of [1, 100]) {
      expect(Math.abs(gaussianExpectationSplit(Math.cos, q) - Math.exp(-q / 2))).toBeLessThan(1e-13);
    }
  });
});
