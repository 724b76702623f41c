import { describe, expect, it } from "vitest";
import { erf, erfc, normalSf, normalUpperQuantile } from "../../src/risk/_math.js";

describe("the fast erfc of the risk module", () => {
  it("matches erf values of Abramowitz & Stegun Table 7.1 (erf 0.5, 1, 2) within 1.2e-7", () => {
    // A&S Table 7.1 (ten decimals; values quoted from memory, unconfirmed): erf(0.5) = 0.5204998778,
    // erf(1) = 0.8427007929, erf(2) = 0.9953222650, erf(0.3) = 0.3286267595
    expect(Math.abs(erf(0.5) - 0.5204998778)).toBeLessThan(1.2e-7);
    expect(Math.abs(erf(1) - 0.8427007929)).toBeLessThan(1.2e-7);
    expect(Math.abs(erfc(2) - (1 - 0.995322265)) / (1 - 0.995322265)).toBeLessThan(1.2e-7);
    expect(Math.abs(erf(0.3) - 0.3286267595)).toBeLessThan(1e-10);
  });

  it("inverts the tail: P(Z > z) = 1e-3 at z = 3.0902323 (standard normal table)", () => {
    expect(normalUpperQuantile(1e-3)).toBeCloseTo(3.0902323, 6);
  });

  it("matches the tail values of SCIENCE.md §4: P(|Z| > t) = erfc(t/√2)", () => {
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
    for (const [t, tail] of table) expect(Math.abs(2 * normalSf(t) - tail) / tail).toBeLessThan(1.5e-7);
  });

  it("erf keeps full relative accuracy for tiny arguments (no 1 − erfc cancellation): erf(x) ≈ 2x/√π", () => {
    expect(erf(1e-12) / ((2 * 1e-12) / Math.sqrt(Math.PI))).toBeCloseTo(1, 12);
  });
});
