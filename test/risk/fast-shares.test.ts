import { describe, expect, it } from "vitest";
import * as fc from "fast-check";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { erfc as fastErfc, normalPdf } from "../../src/risk/_math.js";
import { directLawOverDraws, elementLaw, lawMixtureCrossing, lawOverDraws } from "../../src/risk/laws.js";

// The shares below and energy below of the Gaussian laws are read off shared rows from a spread of 0.25 to 8,
// their draw sums take the scale factors of the rule's nodes from products of three powers per spread, and the Gaussian
// energy share at a node is summed by Horner. Held here to references written out in the test: the full Simpson rule
// with each node's power taken at once, the energy share's series term by term (the integral of z²φ(z), Abramowitz &
// Stegun 7.1.5 integrated termwise; common practice), and the direct rule of laws.ts.

// E[Z²; |Z| ≤ a] = 2φ(0)·Σ (−1/2)^k/k!·a^{2k+3}/(2k+3), ascending until a term is below 1e-20 of the sum (a < 1)
function energySeries(a: number): number {
  let sum = 0;
  let coefficient = 1;
  for (let k = 0; k < 60; k++) {
    const term = (coefficient * a ** (2 * k + 3)) / (2 * k + 3);
    sum += term;
    if (Math.abs(term) < 1e-20 * Math.abs(sum)) break;
    coefficient *= -0.5 / (k + 1);
  }
  return 2 * normalPdf(0) * sum;
}

// The rule lawOverDraws documents: composite Simpson, step 1/8 on [−9, 9], weights normalised (Abramowitz & Stegun
// 25.4.5), every node evaluated, each scale factor 2^(spread·z) taken at once.
function simpson(rms: number, log2Spread: number, f: (r: number) => number): number {
  let sum = 0;
  let total = 0;
  for (let i = 0; i <= 144; i++) {
    const z = -9 + i / 8;
    const weight = (i === 0 || i === 144 ? 1 : i % 2 === 1 ? 4 : 2) * Math.exp(-0.5 * z * z);
    total += weight;
    sum += weight * f(rms * 2 ** (log2Spread * z));
  }
  return Math.min(1, Math.max(0, sum / total));
}

// relative difference, and relative in the complement near 1 (down to 1e-6)
function apart(actual: number, expected: number): number {
  if (actual === expected) return 0;
  const difference = Math.abs(actual - expected);
  const complement = 1 - expected;
  return Math.max(difference / Math.max(Math.abs(expected), 1e-300), complement > 1e-6 ? difference / complement : difference / 1e-6);
}

const gaussianShapes = ["gaussian", "half-gaussian", "bounded"] as const;

describe("the Gaussian energy share at one scale", () => {
  const law = elementLaw({ elements: 1, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0 });

  it("meets its series term by term within 1e-15 below a = 1", () => {
    for (let a = 2 ** -40; a < 1; a *= 1.0137) {
      const series = energySeries(a);
      expect(Math.abs(law.energyBelow(1, a) - series)).toBeLessThanOrEqual(1e-15 * series);
    }
  });

  it("is 1 − (erfc(a/√2) + 2aφ(a)) from a = 1, and 1 exactly where that rounds to 1", () => {
    for (let a = 1; a < 40; a *= 1.0071) {
      expect(law.energyBelow(1, a)).toBe(1 - (fastErfc(a / Math.SQRT2) + 2 * a * normalPdf(a)));
    }
    expect(law.energyBelow(1, 9)).toBe(1);
    expect(law.energyBelow(1, 8.5)).toBeLessThan(1);
  });
});

describe("the fast Gaussian shares over draws", () => {
  const profileOf = (shape: (typeof gaussianShapes)[number], log2Spread: number, elements: number, rms: number): MagnitudeProfile => {
    const profile: MagnitudeProfile = { elements, zeroFraction: 0.25, shape, rms, log2Spread };
    // a bound far above every draw: the law is the Gaussian's at the thresholds asked
    if (shape === "bounded") profile.bound = rms * 2 ** (9 * log2Spread + 8);
    return profile;
  };
  const cases = fc.record({
    shape: fc.constantFrom(...gaussianShapes),
    log2Spread: fc.double({ min: 0.25, max: 4.2, noNaN: true }),
    // the threshold's place among the draws: x = log2(t/rms) = position · 9 · spread, plus a few binades
    position: fc.double({ min: -1.3, max: 1, noNaN: true }),
    offset: fc.double({ min: -3, max: 3, noNaN: true }),
    elements: fc.integer({ min: 1, max: 10_000_000 }),
    rmsLog2: fc.double({ min: -30, max: 10, noNaN: true }),
  });

  // the rows stand in for the direct rule within 1e-6 (share below) and 2e-6 (energy share) where that rule's ripple is
  // small: spreads to 2, shares to 0.9 (its complement near 1 carries the ripple); test/risk/share-tables.test.ts holds
  // the rows to a fine quadrature of the integral at every spread to 8
  it("read off the rows, stay within 1e-6 (share below) and 2e-6 (energy share) of the direct rule to spread 2", () => {
    fc.assert(
      fc.property(cases, ({ shape, log2Spread, position, offset, elements, rmsLog2 }) => {
        const spread = Math.min(log2Spread, 2);
        const profile = profileOf(shape, spread, elements, 2 ** rmsLog2);
        const t = profile.rms * 2 ** (position * 9 * spread + offset);
        const below = directLawOverDraws(profile, "below", t);
        const energy = directLawOverDraws(profile, "energy-below", t);
        if (below <= 0.9) expect(apart(lawOverDraws(profile, "below", t), below)).toBeLessThan(1e-6);
        if (energy <= 0.9) expect(apart(lawOverDraws(profile, "energy-below", t), energy)).toBeLessThan(2e-6);
      }),
      { numRuns: 3000 },
    );
  });

  // the direct rule (coarse sums, trimmed tails, node factors by products) against every node of the Simpson rule with
  // the test's own energy series: the rule's shortcuts are held to 1e-7 of the sum (test/risk/laws.test.ts), measured
  // within 6e-9 of it over 40,000 draws of these cases (as before the factors were products); near 1 that is more than
  // the complement's digits, so relative to the value alone. The log-normal law (smooth too) takes the same factors.
  it("by the direct rule, stay within 5e-8 of the full Simpson rule with each node's power taken at once", () => {
    const near = (actual: number, expected: number): number => Math.abs(actual - expected) / Math.max(expected, 1e-300);
    fc.assert(
      fc.property(cases, fc.boolean(), fc.double({ min: 0.2, max: 3, noNaN: true }), ({ shape, log2Spread, position, offset, elements, rmsLog2 }, logNormal, elementLog2Spread) => {
        const profile: MagnitudeProfile = logNormal
          ? { elements, zeroFraction: 0, shape: "log-normal", rms: 2 ** rmsLog2, log2Spread, elementLog2Spread }
          : profileOf(shape, log2Spread, elements, 2 ** rmsLog2);
        const t = profile.rms * 2 ** (position * 9 * log2Spread + offset);
        const law = elementLaw(profile);
        const energy = (r: number): number => {
          const a = t / r;
          return !logNormal && a < 1 ? energySeries(a) : law.energyBelow(r, t);
        };
        expect(near(directLawOverDraws(profile, "energy-below", t), simpson(profile.rms, log2Spread, energy))).toBeLessThan(5e-8);
        expect(near(directLawOverDraws(profile, "below", t), simpson(profile.rms, log2Spread, (r) => law.below(r, t)))).toBeLessThan(5e-8);
      }),
      { numRuns: 1500 },
    );
  });

  // the levels of the low quantile read off the rows, against the search on its own lattice (viaRows false)
  // (below a spread of 0.5: from there the levels are read off a table of the rows' exact crossings, which
  // test/risk/share-tables.test.ts holds to the integral)
  it("give the low-quantile levels within 1e-6 binade of the search on its own lattice, below a spread of 0.5", () => {
    fc.assert(
      fc.property(
        fc.constantFrom(...gaussianShapes),
        fc.double({ min: 0.25, max: 0.4999, noNaN: true }),
        fc.double({ min: -5, max: -0.5, noNaN: true }),
        (shape, log2Spread, pLog10) => {
          const profile = profileOf(shape, log2Spread, 1000, 1);
          const p = 10 ** pLog10;
          expect(Math.abs(lawMixtureCrossing(profile, "below", p) - lawMixtureCrossing(profile, "below", p, false))).toBeLessThan(1e-6);
        },
      ),
      { numRuns: 600 },
    );
  });
});
