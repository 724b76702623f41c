import { describe, expect, it } from "vitest";
import { chiSquareTail, lnGamma } from "../../src/numeric/chi-square.js";
import { normalPdf, normalSf } from "../../src/numeric/normal.js";

// Closed forms for whole degrees of freedom (Abramowitz & Stegun 1964, §26.4; from memory, and elementary: repeated
// integration by parts of the gamma integral): even k, P(χ²_k > x) = e^(−x/2)·Σ_{j<k/2} (x/2)^j/j!; odd k,
// 2·Q(√x) + 2·φ(√x)·Σ_{r=1}^{(k−1)/2} x^((2r−1)/2)/(1·3·…·(2r − 1)), Q the normal tail and φ its density.
function closedForm(k: number, x: number): number {
  if (k % 2 === 0) {
    let term = 1;
    let sum = 1;
    for (let j = 1; j < k / 2; j++) {
      term *= x / 2 / j;
      sum += term;
    }
    return Math.exp(-x / 2) * sum;
  }
  const root = Math.sqrt(x);
  let term = 1 / root;
  let sum = 0;
  for (let r = 1; r <= (k - 1) / 2; r++) {
    term *= x / (2 * r - 1);
    sum += term;
  }
  return 2 * normalSf(root) + 2 * normalPdf(root) * sum;
}

describe("the chi-square tail", () => {
  it("meets the closed forms for whole degrees of freedom, k = 1 to 40, from the bulk to the far tail", () => {
    for (let k = 1; k <= 40; k++) {
      for (const ratio of [0.05, 0.3, 0.8, 1, 1.3, 2, 3, 5, 8]) {
        const x = k * ratio;
        const expected = closedForm(k, x);
        const got = chiSquareTail(k, x);
        expect(Math.abs(got - expected), `k ${k}, x ${x}: ${got} vs ${expected}`).toBeLessThan(1e-9 * Math.max(expected, 1e-12) + 1e-15);
      }
    }
  });

  it("ln Γ at the half-integers and integers: Γ(n) = (n − 1)!, Γ(1/2) = √π", () => {
    expect(lnGamma(0.5)).toBeCloseTo(0.5 * Math.log(Math.PI), 9);
    expect(lnGamma(10)).toBeCloseTo(Math.log(362880), 9);
    expect(lnGamma(4.5)).toBeCloseTo(Math.log((7 * 5 * 3 * Math.sqrt(Math.PI)) / 16), 9);
  });

  it("the review's batch-norm arithmetic: a channel of fan-in 9 passes 4× its mean with χ²₉ > 18, P ≈ 0.035; one of 64 ≈ 0.90", () => {
    // P(χ²₉ > 18) by the odd closed form above: 0.0352
    const p = chiSquareTail(9, 18);
    expect(p).toBeCloseTo(closedForm(9, 18), 12);
    expect(p).toBeGreaterThan(0.035);
    expect(p).toBeLessThan(0.0355);
    expect(1 - (1 - p) ** 64).toBeCloseTo(0.9, 2);
  });
});
