import { describe, expect, it } from "vitest";
import { erf, erfc, normalSf, referenceErfc } from "../../src/risk/_math.js";

describe("the fast erfc of the risk module", () => {
  it("stays within 1.2e-7 relative of src/numeric's erfc from 0 to 26 (Numerical Recipes §6.2 bound)", () => {
    let worst = 0;
    for (let x = 0; x <= 26; x += 0.01) {
      const reference = referenceErfc(x);
      worst = Math.max(worst, Math.abs(erfc(x) - reference) / reference);
    }
    expect(worst).toBeLessThan(1.2e-7);
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
