import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { anyOf, exp2 } from "../../src/risk/_math.js";
import {
  directLawOverDraws,
  elementLaw,
  isConstantLike,
  gaussianBelowOverDraws,
  gaussianEnergyBelowOverDraws,
  lawMixtureCrossing,
  lawOverDraws,
  lawOverDrawsBounds,
  mixtureCrossing,
  nonzeroElements,
  overDraws,
  overDrawsBounds,
  overDrawsInnerBounds,
  ruleOverDraws,
} from "../../src/risk/laws.js";

// The closure-free draw sums must be the element laws' draw sums exactly: the same nodes, the same arithmetic.
const shapes: MagnitudeProfile["shape"][] = ["gaussian", "half-gaussian", "uniform", "constant", "bounded", "log-normal"];
function sweep(): { profile: MagnitudeProfile; t: number }[] {
  const cases: { profile: MagnitudeProfile; t: number }[] = [];
  let k = 0;
  for (const shape of shapes) {
    for (const log2Spread of [0, 0.3, 1.7, 2.6]) {
      for (const bound of [undefined, 3]) {
        for (const ratio of [2 ** -30, 2 ** -3, 0.9, 2, 5, 2 ** 5]) {
          k++;
          const profile: MagnitudeProfile = { elements: 10 ** (k % 7), zeroFraction: k % 3 === 0 ? 0.5 : 0, shape, rms: 0.25, log2Spread };
          if (bound !== undefined) profile.bound = bound * profile.rms;
          if (shape === "log-normal") profile.elementLog2Spread = k % 4 === 0 ? 0 : 1.3;
          cases.push({ profile, t: ratio * profile.rms });
        }
      }
    }
  }
  return cases;
}

// The rule overDraws documents, summed over all its nodes: composite Simpson, step 1/8 on [−9, 9], weights
// normalised (Simpson's rule; Abramowitz & Stegun 25.4.5). The reference the faster sums are held to.
function simpson(rms: number, log2Spread: number, f: (r: number) => number): number {
  if (!(log2Spread > 0)) return f(rms);
  const count = 145;
  let sum = 0;
  let total = 0;
  for (let i = 0; i < count; i++) {
    const z = -9 + i / 8;
    const weight = (i === 0 || i === count - 1 ? 1 : i % 2 === 1 ? 4 : 2) * Math.exp(-0.5 * z * z);
    total += weight;
    sum += weight * f(rms * 2 ** (log2Spread * z));
  }
  return Math.min(1, Math.max(0, sum / total));
}

// relative difference, and relative in the complement for a probability near 1 (compared by its distance from 1,
// down to 1e-6: closer, the sum's rounding, about 1e-16, decides the complement's digits)
function apart(actual: number, expected: number): number {
  if (actual === expected) return 0;
  const difference = Math.abs(actual - expected);
  const complement = 1 - expected;
  return Math.max(difference / Math.max(Math.abs(expected), 1e-300), complement > 1e-6 ? difference / complement : difference / 1e-6);
}

describe("draw sums of the element laws", () => {
  // A closure and the closure-free sum of the same element law take the same path (coarse rule, Simpson rule, or the
  // panels of a step) with the same arithmetic: equal bit for bit. The any-above closures meet the any-above sums of
  // the element laws, two independent methods (panels of the step here, the fitted step there), within 1e-6 of the
  // value (1e-12 absolute for tiny values): test/risk/any-above.test.ts and step-sums.test.ts hold each to the
  // definition's integral
  it("closures equal the closure-free sums, and the any-above closures meet the any-above sums within 1e-6", () => {
    let worst = 0;
    let worstCase: unknown = null;
    for (const { profile, t } of sweep()) {
      const law = elementLaw(profile);
      const n = nonzeroElements(profile);
      const { rms, log2Spread } = profile;
      for (const positiveOnly of [false, true]) {
        const share = positiveOnly ? law.positiveShare : 1;
        const f = (r: number): number => anyOf(share * law.above(r, t), n);
        const closure = overDraws(rms, log2Spread, f);
        const sum = lawOverDraws(profile, "any-above", t, positiveOnly);
        const d = Math.min(Math.abs(closure - sum) / Math.max(sum, 1e-300), Math.abs(closure - sum) / 1e-6);
        if (d > worst) {
          worst = d;
          worstCase = { closure, sum, profile, t, positiveOnly };
        }
      }
      for (const measure of ["below", "energy-below"] as const) {
        const f = measure === "below" ? (r: number) => law.below(r, t) : (r: number) => law.energyBelow(r, t);
        const closure = overDraws(rms, log2Spread, f);
        const direct = directLawOverDraws(profile, measure, t);
        // the uniform and constant laws take the same panels as a closure: equal; the Gaussian and log-normal shares keep
        // the Simpson rule where a closure (not known to be smooth) takes the panels: within that rule's error at step 1/8
        if (profile.shape === "uniform" || isConstantLike(profile)) expect(closure).toBe(direct);
        else expect(Math.abs(closure - direct)).toBeLessThanOrEqual(2e-5 * Math.max(direct, 1e-12));
      }
    }
    if (worst >= 1e-6) console.log(JSON.stringify(worstCase));
    expect(worst).toBeLessThan(1e-6);
  });

  // the rule itself: its coarse sum is accepted when two coarse steps agree to 1e-10 (see laws.ts)
  it("the rule's sum stays within 1e-7 of the full Simpson rule", () => {
    for (const { profile, t } of sweep()) {
      const law = elementLaw(profile);
      const n = nonzeroElements(profile);
      const f = (r: number): number => anyOf(law.above(r, t), n);
      const rule = ruleOverDraws(profile.rms, profile.log2Spread, f);
      const full = simpson(profile.rms, profile.log2Spread, f);
      expect(Math.abs(rule - full)).toBeLessThanOrEqual(1e-7 * full);
    }
  });

  // the any-above sums integrate every draw, so their upper bound adds the mass beyond ±9 (2.3e-19) to the closures'
  it("without closures equal the bounds of the element law's closures bit for bit (any-above: plus the mass beyond ±9)", () => {
    for (const { profile, t } of sweep()) {
      const law = elementLaw(profile);
      const n = nonzeroElements(profile);
      const { rms, log2Spread } = profile;
      const [low, high] = lawOverDrawsBounds(profile, "any-above", t, false);
      const [closureLow, closureHigh] = overDrawsBounds(rms, log2Spread, (r) => anyOf(law.above(r, t), n));
      expect(low).toBe(closureLow);
      expect(high).toBeGreaterThanOrEqual(closureHigh);
      expect(high - closureHigh).toBeLessThanOrEqual(closureLow === closureHigh ? 0 : 2.31e-19);
      expect(lawOverDrawsBounds(profile, "energy-below", t, true)).toEqual(overDrawsInnerBounds(rms, log2Spread, (r) => law.energyBelow(r, t)));
    }
  });

  // the Gaussian "below" levels, asked here of the search's own lattice (viaRows false), are held to the levels read
  // off the shared rows in the last test of this block. The searches start from different levels and step
  // differently, so this also holds that the bracket found does not depend on the start
  // (the any-above levels are solved on the any-above sums themselves: test/risk/any-above.test.ts)
  it("lattice crossings equal mixtureCrossing with the law's closures", () => {
    for (const { profile } of sweep()) {
      if (profile.shape === "constant" || (profile.shape === "log-normal" && !(profile.elementLog2Spread! > 0))) continue;
      const { bound: _bound, ...unbounded } = profile;
      const law = elementLaw(profile.shape === "bounded" ? { ...unbounded, shape: "gaussian" } : unbounded);
      for (const p of [0.2, 1e-2, 1e-5]) {
        // the threshold 2^v as the lattice takes it (exp2), so the same arithmetic
        expect(lawMixtureCrossing(profile, "below", p, false)).toBe(mixtureCrossing((v) => law.below(1, exp2(v)), profile.log2Spread, p, false));
      }
    }
  });

  // The Gaussian shares below and energy below are read off rows of the draw integral summed in binades, shared by
  // every threshold (spreads 1/16 apart from 0.25 to 8), interpolated in x = log2(t/rms) and the spread. Held to the
  // direct rule where its own ripple is small (spreads to 2, shares to 0.9: its complement near 1 carries the ripple)
  // and the rule, not the closed form of the small ratios, gives the share; test/risk/share-tables.test.ts holds the
  // rows to a fine quadrature of the integral at every spread.
  it("read off the shared lattices stay within 2e-6 of the direct rule where its ripple is small", () => {
    let worst = 0;
    let worstBelow = 0;
    let worstCase: unknown = null;
    let compared = 0;
    for (let step = 0; step <= 35; step++) {
      const log2Spread = 0.25 + step * 0.0503;
      {
        const shape = (["gaussian", "half-gaussian", "bounded"] as const)[step % 3]!;
        const profile: MagnitudeProfile = { elements: 4096, zeroFraction: 0.5, shape, rms: 3.1e-3 * 7 ** (step % 5), log2Spread };
        if (shape === "bounded") profile.bound = profile.rms * 2 ** (9 * log2Spread + 8);
        for (let x = -9 * log2Spread - 2; x <= 9 * log2Spread + 4; x += 0.0917) {
          const t = profile.rms * 2 ** x;
          for (const measure of ["below", "energy-below"] as const) {
            const closed = measure === "below" ? gaussianBelowOverDraws(2 ** x, log2Spread) : gaussianEnergyBelowOverDraws(2 ** x, log2Spread);
            if (!Number.isNaN(closed)) continue;
            const direct = directLawOverDraws(profile, measure, t);
            if (direct > 0.9) continue;
            const d = apart(lawOverDraws(profile, measure, t), direct);
            compared++;
            if (measure === "below") worstBelow = Math.max(worstBelow, d);
            if (d > worst) {
              worst = d;
              worstCase = { measure, log2Spread, x, direct, shape };
            }
          }
        }
      }
    }
    expect(compared).toBeGreaterThan(8000);
    if (worst >= 2e-6) console.log(JSON.stringify(worstCase));
    expect(worst).toBeLessThan(2e-6);
    expect(worstBelow).toBeLessThan(1e-6);
  });

  // The Gaussian "below" crossing reads the mixture off the shared rows (to about 1e-8 of the rule's sum where the
  // rule's ripple is small), so its level moves by about that over the slope of the log mixture: held within 1e-6
  // binade of the search on its own lattice, over spreads below 0.5 (from 0.5 the levels are read off a table of the
  // rows' exact crossings, which test/risk/share-tables.test.ts holds to the integral) and quantile levels from 1e-5
  // to 0.3.
  it("read the Gaussian share below off the shared rows within 1e-6 binade of the lattice's own sums", () => {
    let worst = 0;
    for (let step = 0; step <= 14; step++) {
      const log2Spread = 0.2 + step * 0.0213;
      const shape = (["gaussian", "half-gaussian", "bounded"] as const)[step % 3]!;
      const profile: MagnitudeProfile = { elements: 1000, zeroFraction: 0.25, shape, rms: 1, log2Spread, bound: 6 };
      for (const p of [1e-5, 1e-3, 1e-2, 0.1, 0.3]) {
        worst = Math.max(worst, Math.abs(lawMixtureCrossing(profile, "below", p) - lawMixtureCrossing(profile, "below", p, false)));
      }
    }
    expect(worst).toBeLessThan(1e-6);
  });
});
