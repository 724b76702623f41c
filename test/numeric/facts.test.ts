import { describe, expect, it } from "vitest";
import {
  erf,
  expectedMaxAbsNormal,
  gaussianExpectationSplit,
  logProduct,
  normalTwoSidedQuantile,
  powerLogSpace,
} from "../../src/numeric/index.js";

const rel = (a: number, b: number): number => Math.abs(a / b - 1);

describe("simple facts (SCIENCE.md §4 [X])", () => {
  it("check #36: 1.5^100 = 4.0656117753521524e17 and 0.8^100 = 2.0370359763344861e-10 to 1e-12 relative", () => {
    expect(rel(powerLogSpace(1.5, 100), 4.0656117753521524e17)).toBeLessThan(1e-12);
    expect(rel(powerLogSpace(0.8, 100), 2.0370359763344861e-10)).toBeLessThan(1e-12);
    expect(rel(logProduct(new Array<number>(100).fill(1.5)).value, 4.0656117753521524e17)).toBeLessThan(1e-12);
    expect(rel(logProduct(new Array<number>(100).fill(0.8)).value, 2.0370359763344861e-10)).toBeLessThan(1e-12);
  });
  it("1.1^50 = 117.3908529 and 0.9^50 = 5.153775e-3", () => {
    expect(rel(powerLogSpace(1.1, 50), 117.3908529)).toBeLessThan(1e-9);
    expect(rel(powerLogSpace(0.9, 50), 5.153775e-3)).toBeLessThan(1e-6);
  });
  it("check #18: ReLU + Glorot halves the variance per layer: 2^-30 = 9.313225746154785e-10 (SCIENCE.md §2.2)", () => {
    const p = logProduct(new Array<number>(30).fill(0.5));
    expect(p.log2).toBe(-30);
    expect(p.value).toBe(9.313225746154785e-10);
  });
  it("log space survives where a running product would not: 0.5^2000 · 2^1990 = 2^-10", () => {
    const factors = [...new Array<number>(2000).fill(0.5), ...new Array<number>(1990).fill(2)];
    expect(logProduct(factors).value).toBe(2 ** -10);
    expect(logProduct([-2, 3, -0.5]).value).toBeCloseTo(3, 14);
    expect(logProduct([4, 0]).value).toBe(0);
  });
  it("E|Z| = √(2/π) = 0.7978845608 and median |Z| = 0.6744897502", () => {
    expect(Math.abs(gaussianExpectationSplit(Math.abs, 1) - 0.7978845608)).toBeLessThan(1e-10);
    expect(Math.abs(expectedMaxAbsNormal(1) - 0.7978845608)).toBeLessThan(1e-10);
    expect(Math.abs(normalTwoSidedQuantile(0.5) - 0.6744897502)).toBeLessThan(1e-10);
  });
  it("the N(0, σ²) flushed fraction in binary16, P(|x| ≤ 2^-25) = erf(2^-25/(σ√2)): σ = 1e-3 → 2.378e-5", () => {
    expect(rel(erf(2 ** -25 / (1e-3 * Math.SQRT2)), 2.378e-5)).toBeLessThan(1e-3);
    expect(rel(erf(2 ** -25 / (1e-7 * Math.SQRT2)), 0.2343)).toBeLessThan(1e-3);
  });
});
