import { describe, expect, it } from "vitest";
import * as fc from "fast-check";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { erfc, normalPdf, normalSf as preciseNormalSf } from "../../src/numeric/normal.js";
import { FORMATS } from "../../src/formats/index.js";
import { energyBelow, fractionBelow, nonzeroElements, probabilityAnyAbove, profileRisk, profileStatistics, rangeLimits } from "../../src/risk/profile.js";
import { capMean, capWithin, SETTLED, settledAnyAbove, settledBelow, settledEnergyBelow, UNSETTLED } from "../../src/risk/settle.js";
import { subnormalNoise } from "../../src/risk/subnormal-noise.js";
import { riskProfile } from "../../src/risk/profile.js";
import { tensorFormatRisk, tensorStatistics } from "../../src/risk/tensor.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";
import { anyOf as ruleAnyOf, normalSf as ruleNormalSf } from "../../src/risk/_math.js";
import { overDraws } from "../../src/risk/laws.js";
import { evaluateHazard } from "../../src/risk/hazards.js";
import { context, site } from "./hazard-sites.js";
import { BINARY16, BINARY32 } from "./limits.js";
import { gaussianShapes, profilesWithThreshold } from "./random-profiles.js";

// The bounds of src/risk/settle.ts report a share or probability as 0 (or an overflow probability as 1) without its draw
// integral. The bound they are held to: within 1e-12 absolute of the integral src/risk/profile.ts takes (README: the
// shares are integrated to 1e-12 absolute below 1e-6), and of an independent fine quadrature of the exact draw integral
// written here.

// E_z[f(rms·2^(S·z))], z ~ N(0, 1): composite Simpson with step 1/64 on [−12, 12] (Abramowitz & Stegun 25.4.5), the
// mass beyond ±12 (2e-33) left out
function fineDraws(rms: number, spread: number, f: (r: number) => number): number {
  if (!(spread > 0)) return f(rms);
  const steps = 24 * 64;
  let sum = 0;
  for (let i = 0; i <= steps; i++) {
    const z = -12 + i / 64;
    const weight = i === 0 || i === steps ? 1 : i % 2 === 1 ? 4 : 2;
    sum += weight * normalPdf(z) * f(rms * 2 ** (spread * z));
  }
  return (sum / 64) / 3;
}

// The Gaussian magnitude law (SCIENCE.md §4 of the team's notes; P(|Z| ≤ a) = erf(a/√2), A&S 7.1.1 and 26.2.29) with
// src/numeric's erfc (Cody's rational approximations, W. J. Cody 1969), accurate relative to its size in the tail
const below = (r: number, t: number): number => 1 - erfc(t / (r * Math.SQRT2));
const above = (r: number, t: number): number => erfc(t / (r * Math.SQRT2));
// E[Z²; |Z| ≤ a] = erf(a/√2) − 2aφ(a) (integration by parts), by its series below a = 1 to keep the digits of a tiny share
function energy(r: number, t: number): number {
  const a = t / r;
  if (a >= 1) return below(r, t) - 2 * a * normalPdf(a);
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
// 1 − (1 − p)^n without cancellation
const anyOf = (p: number, n: number): number => (p >= 1 ? 1 : -Math.expm1(n * Math.log1p(-p)));

// the threshold far from the rms in both directions, where the bounds settle
const profiles = profilesWithThreshold({ log2Rms: 60, log2Count: 24, log2Ratio: 45, bounds: true });

describe("settled shares and probabilities (src/risk/settle.ts)", () => {
  it("are within 1e-12 of the draw integrals of src/risk/profile.ts, and settle a good share of far thresholds", () => {
    let settled = 0;
    let ones = 0;
    fc.assert(
      fc.property(profiles, ({ profile, t }) => {
        const n = nonzeroElements(profile);
        if (!(n > 0)) return;
        const share = settledBelow(profile, t);
        if (share !== UNSETTLED) {
          settled++;
          expect(share).toBe(0);
          expect(fractionBelow(profile, t)).toBeLessThanOrEqual(1e-12);
        }
        const energyShare = settledEnergyBelow(profile, t);
        if (energyShare !== UNSETTLED) {
          settled++;
          expect(energyShare).toBe(0);
          expect(energyBelow(profile, t)).toBeLessThanOrEqual(1e-12);
        }
        const overflow = settledAnyAbove(profile, t, n);
        if (overflow !== UNSETTLED) {
          settled++;
          if (overflow === 1) ones++;
          expect(Math.abs(probabilityAnyAbove(profile, t) - overflow)).toBeLessThanOrEqual(1e-12);
        }
      }),
      { numRuns: 4000 },
    );
    // not a vacuous property: a good part of the far thresholds are settled, the certain overflows too
    expect(settled).toBeGreaterThan(300);
    expect(ones).toBeGreaterThan(50);
  });

  it("are within SETTLED of an independent fine quadrature of the exact draw integral", () => {
    let settled = 0;
    fc.assert(
      fc.property(profiles, ({ profile, t }) => {
        const n = nonzeroElements(profile);
        const bound = profile.bound;
        if (!(n > 0) || (bound !== undefined && t >= bound)) return;
        const { rms, log2Spread } = profile;
        if (settledBelow(profile, t) === 0) {
          settled++;
          expect(fineDraws(rms, log2Spread, (r) => below(r, t))).toBeLessThan(SETTLED);
        }
        if (settledEnergyBelow(profile, t) === 0) {
          settled++;
          expect(fineDraws(rms, log2Spread, (r) => energy(r, t))).toBeLessThan(SETTLED);
        }
        const overflow = settledAnyAbove(profile, t, n);
        if (overflow !== UNSETTLED) {
          settled++;
          expect(Math.abs(fineDraws(rms, log2Spread, (r) => anyOf(above(r, t), n)) - overflow)).toBeLessThan(SETTLED);
        }
      }),
      { numRuns: 400 },
    );
    expect(settled).toBeGreaterThan(30);
  });

  it("settle nothing for the laws they do not bound, nor at or past a bound", () => {
    const base = { elements: 4096, zeroFraction: 0, rms: 1, log2Spread: 1 };
    const far = [2 ** -60, 2 ** 60];
    for (const t of far) {
      for (const profile of [
        { ...base, shape: "uniform" },
        { ...base, shape: "constant" },
        { ...base, shape: "log-normal", elementLog2Spread: 2 },
        { ...base, shape: "log-normal" },
      ] as MagnitudeProfile[]) {
        expect(settledBelow(profile, t)).toBe(UNSETTLED);
        expect(settledEnergyBelow(profile, t)).toBe(UNSETTLED);
        expect(settledAnyAbove(profile, t, 4096)).toBe(UNSETTLED);
      }
      const capped: MagnitudeProfile = { ...base, shape: "gaussian", bound: t };
      expect(settledBelow(capped, t)).toBe(UNSETTLED);
      expect(settledEnergyBelow(capped, t)).toBe(UNSETTLED);
    }
    // far from the rms a Gaussian is settled at once: the check that the cases above are refused, not missed
    const gaussian: MagnitudeProfile = { ...base, shape: "gaussian" };
    expect(settledBelow(gaussian, 2 ** -60)).toBe(0);
    expect(settledAnyAbove(gaussian, 2 ** 60, 4096)).toBe(0);
    expect(settledAnyAbove(gaussian, 2 ** -60, 4096)).toBe(1);
  });
});

describe("settled shares next to SETTLED (the cap mean's tails, src/risk/settle.ts capSettled)", () => {
  // Thresholds placed so that the bound E_z[min(1, c·e^{−m·z})] lies around SETTLED, its crossing z* = ln(c)/m just past
  // the far draw 7.65, where the tails are computed or bounded in closed form: what is settled there is held to the
  // independent fine quadrature above, and both sides of SETTLED are met (the property is not vacuous)
  const DENSITY = Math.sqrt(2 / Math.PI);
  const nearSettled = fc.record({
    shape: fc.constantFrom(...gaussianShapes),
    log2Rms: fc.double({ min: -40, max: 40, noNaN: true }),
    spread: fc.double({ min: 2, max: 4.5, noNaN: true }),
    crossing: fc.double({ min: -16, max: -7.66, noNaN: true }),
  });

  it("settle a share only where the fine quadrature of the exact integral is below SETTLED", () => {
    let settled = 0;
    let refused = 0;
    fc.assert(
      fc.property(nearSettled, ({ shape, log2Rms, spread, crossing }) => {
        const rms = 2 ** log2Rms;
        const profile: MagnitudeProfile = { elements: 4096, zeroFraction: 0, shape, rms, log2Spread: spread };
        const m = spread * Math.LN2;
        // the share below t: c = √(2/π)·t/rms at rate m; the energy below t: c = √(2/π)·(t/rms)³/3 at rate 3m
        const tBelow = (rms * Math.exp(crossing * m)) / DENSITY;
        const tEnergy = rms * Math.cbrt((3 * Math.exp(crossing * 3 * m)) / DENSITY);
        if (settledBelow(profile, tBelow) === 0) {
          settled++;
          expect(fineDraws(rms, spread, (r) => below(r, tBelow))).toBeLessThan(SETTLED);
        } else refused++;
        if (settledEnergyBelow(profile, tEnergy) === 0) {
          settled++;
          expect(fineDraws(rms, spread, (r) => energy(r, tEnergy))).toBeLessThan(SETTLED);
        } else refused++;
      }),
      { numRuns: 300 },
    );
    expect(settled).toBeGreaterThan(50);
    expect(refused).toBeGreaterThan(50);
  });
});

describe("the cap mean against a target told by its tails' bounds (src/risk/settle.ts capWithin)", () => {
  // capWithin as it was before the Mills-ratio bounds: the mean without the cap, then capMean's own number
  function direct(c: number, m: number, target: number): boolean {
    if (!(c > 0)) return true;
    if (!(m > 0)) return Math.min(1, c) <= target;
    return c * Math.exp((m * m) / 2) <= target || capMean(Math.log(c), m) <= target;
  }
  const cases = fc.record({
    // the crossing z* = ln(c)/m and the rate m; the target as a factor of the cap mean, often within a few per cent
    crossing: fc.double({ min: -40, max: 3, noNaN: true }),
    m: fc.double({ min: 1e-3, max: 16, noNaN: true }),
    log10Factor: fc.oneof(
      fc.integer({ min: -3000, max: 3000 }).map((k) => k / 1000),
      fc.integer({ min: -2000, max: 2000 }).map((k) => k / 100_000),
      fc.constant(0),
    ),
  });

  it("gives capMean's answer for any rate, crossing and target, both answers met near the target", () => {
    let within = 0;
    let over = 0;
    fc.assert(
      fc.property(cases, ({ crossing, m, log10Factor }) => {
        // (c and the mean normal doubles: ln c at least −640)
        const c = Math.exp(crossing * m);
        const mean = capMean(Math.log(c), m);
        if (!(mean > 1e-300)) return true;
        const target = mean * 10 ** log10Factor;
        const answer = capWithin(c, m, target);
        if (answer) within++;
        else over++;
        return answer === direct(c, m, target);
      }),
      { numRuns: 20_000 },
    );
    expect(within).toBeGreaterThan(1000);
    expect(over).toBeGreaterThan(1000);
  });

  it("at a target equal to capMean's number, and one ulp either side of it", () => {
    for (const m of [0.05, 0.7, 2.2, 6.4, 15]) {
      for (const crossing of [-30, -8, -4.6, -1, -0.01, 0, 0.4]) {
        const c = Math.exp(crossing * m);
        const mean = capMean(Math.log(c), m);
        for (const target of [mean, mean * (1 + 2 ** -52), mean * (1 - 2 ** -53), 0.5, 0.5 * (1 - 1e-9)]) {
          expect(capWithin(c, m, target)).toBe(direct(c, m, target));
        }
      }
    }
  });

  // the bounds themselves, Birnbaum 1942 below and Sampford 1953 above, against Q(x)/φ(x) from the precise tail
  // (src/numeric/normal.ts, Cody 1969) where both are normal doubles
  it("Mills ratio between 2/(x + √(x² + 4)) and 4/(3x + √(x² + 8)) for 0 ≤ x ≤ 36", () => {
    for (let x = 0; x <= 36; x += 1 / 512) {
      const ratio = preciseNormalSf(x) / normalPdf(x);
      expect(ratio).toBeLessThanOrEqual((4 / (3 * x + Math.sqrt(x * x + 8))) * (1 + 1e-10));
      expect(ratio).toBeGreaterThanOrEqual((2 / (x + Math.sqrt(x * x + 4))) * (1 - 1e-10));
    }
  });
});

describe("a tensor's risk numbers with the settled shares", () => {
  // what tensorFormatRisk gave before the bounds: profileRisk's integrals, and the subnormal noise where the share is nonzero
  function reference(profile: MagnitudeProfile, format: "binary16" | "bfloat16" | "e5m2") {
    const limits = rangeLimits(FORMATS[format], { saturate: false, flushSubnormals: false });
    const risk = profileRisk(profile, limits, profileStatistics(profile, DEFAULT_THRESHOLDS));
    return { limits, risk, noise: risk.subnormalFraction === 0 ? 0 : subnormalNoise(profile, limits) };
  }
  const close = (actual: number, expected: number): boolean =>
    Math.abs(actual - expected) <= 1e-12 || Math.abs(actual - expected) <= 1e-6 * Math.abs(expected);

  it("keep every number within 1e-12 absolute (1e-6 relative) of the integrals, in binary16, bfloat16 and e5m2", () => {
    // tensors whose numbers the bounds settled (not bit for bit the integrals'): the fast path was taken
    let settled = 0;
    fc.assert(
      fc.property(
        profiles,
        fc.constantFrom("binary16" as const, "bfloat16" as const, "e5m2" as const),
        fc.double({ min: -30, max: 30, noNaN: true }),
        ({ profile }, format, shift) => {
          const start = riskProfile(profile, 2 ** shift);
          const tensor = { id: "t", role: "activation", start, end: start } as unknown as TensorPrediction;
          const statistics = tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS);
          const { limits, risk, noise } = reference(start, format);
          const judged = tensorFormatRisk(tensor, limits, statistics, {
            judged: true,
            perTensorScaling: false,
            thresholds: DEFAULT_THRESHOLDS,
          }).start;
          expect(close(judged.flushedFraction, risk.flushedFraction)).toBe(true);
          expect(close(judged.subnormalFraction, risk.subnormalFraction)).toBe(true);
          expect(close(judged.flushedEnergy, risk.flushedEnergy)).toBe(true);
          expect(close(judged.overflowRisk, risk.overflowRisk)).toBe(true);
          expect(close(judged.subnormalNoise, noise)).toBe(true);
          expect(judged.headroom).toBe(risk.headroom);
          expect(judged.footroom).toBe(risk.footroom);
          if (judged.flushedFraction !== risk.flushedFraction || judged.flushedEnergy !== risk.flushedEnergy || judged.overflowRisk !== risk.overflowRisk) settled++;
        },
      ),
      { numRuns: 1500 },
    );
    expect(settled).toBeGreaterThan(100);
  });
});

describe("an accumulation far below its overflow level", () => {
  // the partial sums' overflow as src/risk/hazards.ts integrates it (reflection principle: 4·Q(level/(√n·r)) per output,
  // any of the outputs), by the draw rule itself: the shortcut for sums far below the level must give it bit for bit
  function integrated(rms: number, spread: number, elements: number, terms: number, level: number): number {
    const outputs = Math.max(1, elements / terms);
    return overDraws(rms, spread, (r) => ruleAnyOf(Math.min(1, 4 * ruleNormalSf(level / (Math.sqrt(terms) * r))), outputs));
  }

  it("is the draw sum's value exactly, in binary32 and binary16, and is 0 for most sums far from the level", () => {
    let zeros = 0;
    fc.assert(
      fc.property(
        fc.double({ min: -40, max: 140, noNaN: true }),
        fc.oneof(fc.constant(0), fc.double({ min: 1e-3, max: 4, noNaN: true })),
        fc.integer({ min: 1, max: 1 << 16 }),
        fc.integer({ min: 1, max: 64 }),
        fc.constantFrom(BINARY16, BINARY32),
        (log2Rms, spread, terms, outputs, accumulate) => {
          const rms = 2 ** log2Rms;
          const input = { elements: terms * outputs, zeroFraction: 0, shape: "gaussian" as const, rms, log2Spread: spread };
          const check = evaluateHazard(site({ kind: "accumulation", terms, input }), context({ accumulate }));
          const overflow = check.evaluations.find((e) => e.measure === "overflow-risk");
          const expected = integrated(rms, spread, terms * outputs, terms, accumulate.overflowLevel);
          expect(overflow?.value).toBe(expected);
          if (expected === 0) zeros++;
        },
      ),
      { numRuns: 600 },
    );
    expect(zeros).toBeGreaterThan(100);
  });
});
