import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { mixtureShareAbove, type ScaleMixture } from "../../src/numeric/derivative-mixture.js";
import { fieldMixture, type MixtureField } from "../../src/numeric/gated-mixture.js";
import { erfc as preciseErfc } from "../../src/numeric/normal.js";
import { elementLaw } from "../../src/risk/laws.js";
import { CHEBYSHEV_ERFC_TAYLOR, erfc } from "../../src/risk/_math.js";

// A scale mixture's law is the weighted sum of its components' laws (the law of total probability): P(|x| ≤ t) =
// Σ wᵢ·P(|cᵢZ| ≤ t/r), its tail and energy below likewise. The risk module's mixture laws meet the widest components
// through one series and the narrowest as a whole; here they are held to the plain sum over every component, each
// component the Gaussian law of the same module.

const GAUSSIAN = elementLaw({ elements: 1, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0 });

function plain(m: ScaleMixture, r: number, t: number): { below: number; above: number; energy: number; preciseAbove: number } {
  let below = 0;
  let above = 0;
  let energy = 0;
  let preciseAbove = 0;
  for (let i = 0; i < m.weights.length; i++) {
    const w = m.weights[i] as number;
    const c = m.scales[i] as number;
    below += w * GAUSSIAN.below(r * c, t);
    above += w * GAUSSIAN.above(r * c, t);
    energy += w * c * c * GAUSSIAN.energyBelow(r * c, t);
    preciseAbove += w * preciseErfc(t / (c * Math.SQRT2));
  }
  return { below: Math.min(1, below), above: Math.min(1, above), energy: Math.min(1, energy), preciseAbove };
}

const relative = (value: number, reference: number): number => (value === reference ? 0 : Math.abs(value - reference) / Math.abs(reference));

// the derivative mixtures, a leaky ReLU's two scales, and a gated product's value and gate mixtures
const CASES: MixtureField[] = [];
for (const activation of ["gelu", "silu", "tanh", "sigmoid", "softplus"] as const) for (const q of [0.25, 1, 4, 16]) CASES.push({ activation, inputVariance: q });
for (const slope of [0.01, 0.2, -0.5, 1e-6]) CASES.push({ activation: "leaky-relu", inputVariance: 1, slope });
for (const activation of ["gelu", "silu", "relu"] as const) for (const of of ["value", "gate"] as const) CASES.push({ activation, inputVariance: 2, of });
// a squared-error head's row scale alone and times an activation's factor (src/numeric/gated-mixture.ts rowMixture)
for (const rows of [1, 4]) CASES.push({ rows }, { rows, rowCount: 256 }, { activation: "gelu", inputVariance: 2, rows, rowCount: 128 });

describe("the scale mixture laws against the plain sums over their components", () => {
  for (const field of CASES) {
    const { activation, inputVariance: q, slope, of } = field;
    it(`${activation}${of === undefined ? "" : ` ${of}`} at q = ${q}${slope === undefined ? "" : `, slope ${slope}`}: below, above and energy below within 1e-12 relative`, () => {
      const m = fieldMixture(field);
      const profile: MagnitudeProfile = { elements: 1, zeroFraction: 0, shape: "gaussian-mixture", rms: 1, log2Spread: 0, mixture: field };
      const law = elementLaw(profile);
      let worst = 0;
      // t/r from 2^−45 to 2^9 in 1/32 binade steps, at a scale of 1 and of an odd one (the ratio is what counts)
      for (const r of [1, 0.37]) {
        for (let e = -45; e <= 9; e += 1 / 32) {
          const t = r * 2 ** e;
          const sums = plain(m, r, t);
          worst = Math.max(worst, relative(law.below(r, t), sums.below), relative(law.energyBelow(r, t), sums.energy));
          // the tail past the smallest normal double has lost its relative digits in the plain sum's terms
          if (sums.above > 1e-290) worst = Math.max(worst, relative(law.above(r, t), sums.above));
          if (r === 1 && sums.preciseAbove > 1e-290) worst = Math.max(worst, relative(mixtureShareAbove(m, t), sums.preciseAbove));
        }
      }
      expect(worst).toBeLessThan(1e-12);
    });
  }

  it("reads 0 and 1 at the ends as the plain sums do", () => {
    const law = elementLaw({ elements: 1, zeroFraction: 0, shape: "gaussian-mixture", rms: 1, log2Spread: 0, mixture: { activation: "tanh", inputVariance: 4 } });
    expect(law.below(1, 0)).toBe(0);
    expect(law.above(1, 0)).toBe(1);
    expect(law.energyBelow(1, 0)).toBe(0);
    expect(law.below(1, 1e6)).toBe(1);
    expect(law.above(1, 1e6)).toBe(0);
    expect(law.energyBelow(1, 1e6)).toBe(1);
    expect(law.below(0, 1)).toBe(1);
    expect(law.above(0, 1)).toBe(0);
  });
});

describe("the Taylor series of the fast erfc", () => {
  it("is the fast erfc to rounding below 1/4 and erfc itself to the fit's 1.2e-7 (Press et al., Numerical Recipes §6.2)", () => {
    for (let y = 0; y < 0.25; y += 1 / 512) {
      let sum = 0;
      for (let k = CHEBYSHEV_ERFC_TAYLOR.length - 1; k >= 0; k--) sum = sum * y + (CHEBYSHEV_ERFC_TAYLOR[k] as number);
      expect(relative(sum, erfc(y))).toBeLessThan(1e-15);
      // src/numeric's erfc is 1 minus the series of Abramowitz & Stegun 7.1.6 here
      expect(relative(sum, preciseErfc(y))).toBeLessThan(1.2e-7);
    }
  });
});
