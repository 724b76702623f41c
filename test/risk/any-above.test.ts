import fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { erfc as preciseErfc, normalPdf } from "../../src/numeric/normal.js";
import { lawMixtureCrossing, lawOverDraws, lawOverDrawsBounds, stepLawMoments } from "../../src/risk/laws.js";
import { derivativeMixture } from "../../src/numeric/derivative-mixture.js";

// The any-above draw sum by its definition: E_z[anyOf(share·above(rms·2^(spread·z), t), n)], z ~ N(0, 1) (the
// probability that at least one of n independent elements passes t, averaged over the log-normal draws of the scale),
// summed here independently of src/risk: the element laws written out again (Gaussian tail erfc(a/√2), Abramowitz &
// Stegun 26.2.29, with src/numeric's erfc, A&S 7.1.6 and its continued fraction, not the risk module's fast fit;
// uniform on ±√3·r; log-normal with log2|x| ~ N(log2 r − s²·ln 2, s²); constant magnitudes), 1 − (1 − q)^n by
// expm1/log1p, and the integral over z by the trapezoid rule at step 1/1024 on [−10, 10] (the mass beyond is
// 1.5e-23, A&S 26.2.29). The uniform and constant laws are 0 below a kink z_k; there the integral runs from the kink
// over w = z − z_k = e^τ (τ at step 1/256 from −45), which resolves a rise however steep right at the kink. The scale
// mixture of a gradient behind GELU (q = 2) is its components' Gaussian tails, Σ wᵢ·erfc(a/(cᵢ√2)).
type Law = "gaussian" | "uniform" | "log-normal" | "constant" | "mixture";
const MIXTURE = derivativeMixture("gelu", 2);
const LN2 = Math.LN2;
function tail(law: Law, ratio: number, elementSpread: number): number {
  // P(|x| ≥ t) at r = 1, t = ratio
  switch (law) {
    case "gaussian":
      return preciseErfc(ratio / Math.SQRT2);
    case "uniform":
      return Math.max(0, 1 - ratio / Math.sqrt(3));
    case "log-normal": {
      const y = (Math.log2(ratio) + elementSpread * elementSpread * LN2) / elementSpread;
      return 0.5 * preciseErfc(y / Math.SQRT2);
    }
    case "constant":
      return ratio <= 1 ? 1 : 0;
    case "mixture": {
      let sum = 0;
      for (let i = 0; i < MIXTURE.weights.length; i++) sum += (MIXTURE.weights[i] as number) * preciseErfc(ratio / ((MIXTURE.scales[i] as number) * Math.SQRT2));
      return sum;
    }
  }
}
function anyOfReference(q: number, n: number): number {
  if (!(q > 0)) return 0;
  if (q >= 1) return 1;
  return -Math.expm1(n * Math.log1p(-q));
}
function reference(law: Law, share: number, n: number, spread: number, x: number, elementSpread = 0): number {
  const g = (z: number): number => anyOfReference(share * tail(law, 2 ** (x - spread * z), elementSpread), n);
  const kink = law === "uniform" ? (x - Math.log2(Math.sqrt(3))) / spread : law === "constant" ? x / spread : -Infinity;
  if (kink > -10) {
    if (kink >= 10) return 0;
    let sum = 0;
    const step = 1 / 256;
    for (let tau = -45; ; tau += step) {
      const w = Math.exp(tau);
      if (kink + w > 10) break;
      // just above the kink (the constant law steps there)
      sum += step * w * normalPdf(kink + w) * g(kink + w * (1 + 1e-15) + 1e-300);
    }
    return sum;
  }
  const step = 1 / 1024;
  let sum = 0;
  for (let i = 0; i <= 20 * 1024; i++) {
    const z = -10 + i * step;
    sum += (i === 0 || i === 20 * 1024 ? 0.5 : 1) * step * normalPdf(z) * g(z);
  }
  return sum;
}

// The goal: 1e-6 relative, or 1e-12 absolute for tiny values
function miss(actual: number, expected: number): number {
  const difference = Math.abs(actual - expected);
  return Math.min(difference / expected, difference / 1e-6);
}

interface Case {
  law: Law;
  shape: MagnitudeProfile["shape"];
  positiveOnly: boolean;
  share: number;
  elementSpread: number;
}
const CASES: Case[] = [
  { law: "gaussian", shape: "gaussian", positiveOnly: false, share: 1, elementSpread: 0 },
  { law: "gaussian", shape: "gaussian", positiveOnly: true, share: 0.5, elementSpread: 0 },
  { law: "gaussian", shape: "half-gaussian", positiveOnly: true, share: 1, elementSpread: 0 },
  { law: "gaussian", shape: "bounded", positiveOnly: false, share: 1, elementSpread: 0 },
  { law: "uniform", shape: "uniform", positiveOnly: false, share: 1, elementSpread: 0 },
  { law: "uniform", shape: "uniform", positiveOnly: true, share: 0.5, elementSpread: 0 },
  { law: "log-normal", shape: "log-normal", positiveOnly: false, share: 1, elementSpread: 0.3 },
  { law: "log-normal", shape: "log-normal", positiveOnly: true, share: 0.5, elementSpread: 1.3 },
  { law: "constant", shape: "constant", positiveOnly: false, share: 1, elementSpread: 0 },
];
function profileOf(c: Case, n: number, spread: number, rms: number): MagnitudeProfile {
  const profile: MagnitudeProfile = { elements: 2 * n, zeroFraction: 0.5, shape: c.shape, rms, log2Spread: spread };
  if (c.shape === "log-normal") profile.elementLog2Spread = c.elementSpread;
  if (c.shape === "gaussian-mixture") profile.mixture = { activation: "gelu", inputVariance: 2 };
  // far above every threshold of the sweep: the law below it is the Gaussian's
  if (c.shape === "bounded") profile.bound = rms * 2 ** 40;
  return profile;
}

describe("any-above draw sums", () => {
  it("stay within 1e-6 (relative, or 1e-12 absolute) of the definition's integral over laws, spreads, counts and thresholds", () => {
    let worst = 0;
    let worstCase: unknown = null;
    let compared = 0;
    for (const c of CASES) {
      for (const n of [1, 3, 97.5, 46012.4, 3.3e6, 1e9, 1e12]) {
        for (const spread of [0.05, 0.4, 1.3, 3]) {
          for (const x of [-2, 0, 0.7, 1.5, 2, 2.4, 3.5, 5, 8]) {
            const expected = reference(c.law, c.share, n, spread, x, c.elementSpread);
            const rms = 0.37;
            const actual = lawOverDraws(profileOf(c, n, spread, rms), "any-above", rms * 2 ** x, c.positiveOnly);
            const m = expected > 0 ? miss(actual, expected) : Math.abs(actual) / 1e-6;
            compared++;
            if (m > worst) {
              worst = m;
              worstCase = { ...c, n, spread, x, expected, actual };
            }
          }
        }
      }
    }
    expect(compared).toBeGreaterThan(1500);
    if (worst >= 1e-6) console.log(JSON.stringify(worstCase));
    expect(worst).toBeLessThan(1e-6);
  });

  it("stay within 1e-6 of the definition's integral for the scale mixture of a gradient behind GELU", () => {
    const c: Case = { law: "mixture", shape: "gaussian-mixture", positiveOnly: false, share: 1, elementSpread: 0 };
    let worst = 0;
    let worstCase: unknown = null;
    for (const n of [97.5, 3.3e6]) {
      for (const spread of [0.05, 0.4, 1.3]) {
        for (const x of [0, 2.4, 5, 8]) {
          const expected = reference(c.law, c.share, n, spread, x, c.elementSpread);
          const rms = 0.37;
          const actual = lawOverDraws(profileOf(c, n, spread, rms), "any-above", rms * 2 ** x, c.positiveOnly);
          const m = expected > 0 ? miss(actual, expected) : Math.abs(actual) / 1e-6;
          if (m > worst) {
            worst = m;
            worstCase = { n, spread, x, expected, actual };
          }
        }
      }
    }
    if (worst >= 1e-6) console.log(JSON.stringify(worstCase));
    expect(worst).toBeLessThan(1e-6);
  }, 300_000);

  // The level search solves the same sums: the probability at the returned level is p (the consistency the predicted
  // max needs; its accuracy then is the sums' own, above). The search itself (viaRows false): the Gaussian laws' table
  // of its levels stays within 1e-6 binade of it (test/risk/share-tables.test.ts)
  it("levels of lawMixtureCrossing's search give back p within 1e-8 relative (or bracket it between neighbouring doubles)", () => {
    let worst = 0;
    for (const c of CASES) {
      if (c.positiveOnly || c.law === "constant") continue;
      for (const n of [1, 7, 2304, 46012.4, 1e9, 1e12]) {
        // spreads near 0 too, where g's own step is as wide as the draws or wider
        for (const spread of [1e-12, 0.01, 0.2, 0.9, 2.25, 3]) {
          const profile = profileOf(c, n, spread, 1);
          delete profile.bound;
          // a log-normal law of nearly constant elements
          if (c.law === "log-normal" && spread === 0.01) profile.elementLog2Spread = 1e-7;
          for (const p of [0.3, 1e-3, 1e-9]) {
            const level = lawMixtureCrossing(profile, "any-above", p, false);
            const back = lawOverDraws(profile, "any-above", 2 ** level);
            // where the sum moves by more than that between neighbouring doubles (a spread of 1e-12 over a steep
            // step), p lies between the sums at the level's neighbours
            const ulp = 4 * Number.EPSILON * Math.max(1, Math.abs(level));
            const below = lawOverDraws(profile, "any-above", 2 ** (level - ulp));
            const above = lawOverDraws(profile, "any-above", 2 ** (level + ulp));
            worst = Math.max(worst, below >= p && above <= p ? Math.min(1e-9, Math.abs(back - p) / p) : Math.abs(back - p) / p);
          }
        }
      }
    }
    expect(worst).toBeLessThan(1e-8);
  });

  // Thresholds far below the scale (2^−39 of it in the 1,000-layer check) are reached in every draw but the lowest,
  // and the sum answers the limit A = anyOf(share, n) from a lower bound without summing: wherever a sum answers A, the
  // definition's integral must be within 1e-13 of it for 100 elements and more (a bound taken too close to the step
  // would answer A where the integral is visibly less).
  it("answer their limit only where the definition's integral is that limit to 1e-13 (property over laws, counts, spreads, thresholds)", () => {
    let answeredLimit = 0;
    fc.assert(
      fc.property(
        fc.constantFrom(...CASES),
        // on even grids (fc.double favours the ends of its range and 0): counts 10^(k/16) to 10^12, spreads 1/32 to
        // 8.5, thresholds in eighths of a binade from 2^−80 of the scale to 2^4
        fc.integer({ min: 0, max: 192 }),
        fc.integer({ min: 1, max: 272 }),
        fc.integer({ min: -640, max: 32 }),
        (c, k, j, eighths) => {
          const n = 10 ** (k / 16);
          const spread = j / 32;
          const x = eighths / 8;
          const rms = 0.37;
          const actual = lawOverDraws(profileOf(c, n, spread, rms), "any-above", rms * 2 ** x, c.positiveOnly);
          const limit = anyOfReference(c.share, n);
          if (actual !== limit) return;
          answeredLimit++;
          const expected = reference(c.law, c.share, n, spread, x, c.elementSpread);
          // a few elements: the rules answer A where g is A to the erfc fit's 1.2e-7 (_math.ts), within the 1e-6 goal
          expect(Math.abs(actual - expected) / expected).toBeLessThan(n >= 100 ? 1e-13 : 1e-6);
        },
      ),
      { numRuns: 200, seed: 20261203 },
    );
    // many thresholds of the sweep lie far enough below the scale
    expect(answeredLimit).toBeGreaterThan(50);
  });

  it("fall as the threshold rises, stay in [0, 1] and within their extreme-draw bounds (property)", () => {
    const shapes = ["gaussian", "half-gaussian", "uniform", "log-normal", "constant"] as const;
    fc.assert(
      fc.property(
        fc.constantFrom(...shapes),
        fc.double({ min: 0, max: 12, noNaN: true }),
        fc.double({ min: 0.001, max: 3, noNaN: true }),
        fc.double({ min: -4, max: 10, noNaN: true }),
        fc.double({ min: 0.01, max: 2, noNaN: true }),
        fc.boolean(),
        (shape, log10n, spread, x, step, positiveOnly) => {
          const profile: MagnitudeProfile = { elements: 10 ** log10n, zeroFraction: 0, shape, rms: 1.7, log2Spread: spread };
          if (shape === "log-normal") profile.elementLog2Spread = 0.8;
          const t = 1.7 * 2 ** x;
          const lower = lawOverDraws(profile, "any-above", t, positiveOnly);
          const upper = lawOverDraws(profile, "any-above", t * 2 ** step, positiveOnly);
          expect(lower).toBeGreaterThanOrEqual(0);
          expect(lower).toBeLessThanOrEqual(1);
          // monotone up to the sums' own accuracy
          expect(upper).toBeLessThanOrEqual(lower * (1 + 1e-6) + 1e-12);
          if (!positiveOnly) {
            const [low, high] = lawOverDrawsBounds(profile, "any-above", t, false);
            expect(lower).toBeGreaterThanOrEqual(low * (1 - 1e-6));
            expect(lower).toBeLessThanOrEqual(high * (1 + 1e-6) + 1e-18);
          }
        },
      ),
      { numRuns: 300 },
    );
  });
});

// The level search starts from the quantile of V + s·Z (V the level, in binades from the scale, of the largest of the n
// elements at the median draw) by the first four cumulants of V read off the remainder rows. Held here to V's law by
// its definition, P(V > v) = anyOf(share·above(1, 2^v), n)/A, summed independently (src/numeric's erfc, the
// trapezoid rule on v at 256 points per standard deviation, E[(V − c)^k] = ∫ k(v − c)^{k−1}(P(V > v) − [v < c]) dv by parts),
// and for one Gaussian element to the closed form: V = log2|Z| = (ln 2 + ln G)/(2 ln 2), G ~ Gamma(1/2), whose
// cumulants are ψ(1/2) and ψ^(k−1)(1/2) (the log-gamma law; ψ(1/2) = −γ − 2 ln 2, A&S 6.3.3; ψ^(m)(1/2) =
// (−1)^(m+1)·m!·(2^(m+1) − 1)·ζ(m + 1), A&S 6.4.4: π²/2, −14ζ(3), π⁴).
function momentsOf(law: Law, share: number, n: number, elementSpread: number): [number, number, number, number] {
  const limit = anyOfReference(share, n);
  const survival = (v: number): number => anyOfReference(share * tail(law, 2 ** v, elementSpread), n) / limit;
  // E[(V − c)^k] on nodes v = c + i·step, i = −below … above (P(V > v) − [v < c] is 0 to rounding past them); at the
  // node v = c the step [v < c] takes its middle value, as the trapezoid rule needs at a jump
  const trapezoid = (c: number, step: number, below: number, above: number, k: number): number => {
    let sum = 0;
    for (let i = -below; i <= above; i++) {
      const v = c + i * step;
      const term = k * (v - c) ** (k - 1) * (survival(v) - (i < 0 ? 1 : i === 0 ? 0.5 : 0));
      sum += (i === -below || i === above ? 0.5 : 1) * step * term;
    }
    return sum;
  };
  // (v − c)^(k−1) times the step has a kink at c (k = 2) or a jump (k = 1): the trapezoid sums on each side converge
  // as step², which Richardson's step removes (halving the step)
  const about = (c: number, step: number, below: number, above: number, k: number): number =>
    (4 * trapezoid(c, step / 2, 2 * below, 2 * above, k) - trapezoid(c, step, below, above, k)) / 3;
  // a first pass at step 1/64 over [−120, 12] finds the mean and spread; the second sums 256 points per standard
  // deviation from 60 below (the lower tail of few elements falls by half per binade) to 30 above
  const coarse = about(0, 1 / 64, 120 * 64, 12 * 64, 1);
  const spread = Math.sqrt(about(coarse, 1 / 64, 120 * 64, 12 * 64, 2));
  const step = spread / 256;
  const mean = coarse + about(coarse, step, 60 * 256, 30 * 256, 1);
  return [mean, about(mean, step, 60 * 256, 30 * 256, 2), about(mean, step, 60 * 256, 30 * 256, 3), about(mean, step, 60 * 256, 30 * 256, 4)];
}

describe("the moments of the largest element's level that start the level search", () => {
  // One element's level has a long lower tail (P(V < v) halves per binade), where the risk module's erfc fit (error
  // 1.2e-7, see _math.ts) weighted by w^(k−1) out to |w| = 41 fitted widths moves the higher moments: measured 3.6e-6,
  // 1.1e-4 and 1.8e-3 of the powers of the spread for the variance, third and fourth moments
  it("match the log-gamma cumulants for one Gaussian element", () => {
    const profile: MagnitudeProfile = { elements: 2, zeroFraction: 0.5, shape: "gaussian", rms: 1, log2Spread: 1 };
    const [mean, variance, third, fourth] = stepLawMoments(profile)!;
    const zeta3 = 1.2020569031595942; // Apéry's constant ζ(3), from memory
    const gamma = 0.5772156649015329; // the Euler–Mascheroni constant γ, from memory
    const l = LN2;
    const expectedVariance = Math.PI ** 2 / 8 / l ** 2;
    const sd = Math.sqrt(expectedVariance);
    expect(Math.abs(mean - (-gamma - l) / (2 * l)) / sd).toBeLessThan(1e-6);
    expect(Math.abs(variance - expectedVariance) / sd ** 2).toBeLessThan(1e-5);
    expect(Math.abs(third - (-14 * zeta3) / 8 / l ** 3) / sd ** 3).toBeLessThan(3e-4);
    expect(Math.abs(fourth - 3 * expectedVariance ** 2 - Math.PI ** 4 / 16 / l ** 4) / sd ** 4).toBeLessThan(3e-3);
  });

  // measured: within 1.3e-6 (the fourth moment of 3 Gaussian elements); the start needs about 1e-5 of log I
  it("match V's law by its definition over laws and element counts (within 1e-5 of the matching power of its spread)", () => {
    let worst = 0;
    let worstCase: unknown = null;
    for (const c of CASES) {
      // the uniform law's level is found by its own rule (its step, narrower than the reference's grid, needs no start)
      if (c.law === "constant" || c.law === "uniform") continue;
      for (const n of [3, 97.5, 2304, 46012.4, 3.3e6, 1e12]) {
        const profile = profileOf(c, n, 1, 1);
        const actual = c.positiveOnly ? null : stepLawMoments(profile);
        if (actual === null) continue;
        const expected = momentsOf(c.law, 1, n, c.elementSpread);
        const sd = Math.sqrt(expected[1]);
        for (let k = 0; k < 4; k++) {
          const d = Math.abs((actual[k] as number) - (expected[k] as number)) / sd ** (k + 1);
          if (d > worst) {
            worst = d;
            worstCase = { law: c.law, n, k, actual: actual[k], expected: expected[k] };
          }
        }
      }
    }
    if (worst >= 1e-5) console.log(JSON.stringify(worstCase));
    expect(worst).toBeLessThan(1e-5);
  });
});
