import { describe, expect, it } from "vitest";
import type { HazardSite, MagnitudeProfile } from "../../src/magnitude/types.js";
import { normalCdf, normalPdf, normalSf } from "../../src/numeric/normal.js";
import { evaluateHazard } from "../../src/risk/hazards.js";
import { lawOverDraws, overDraws } from "../../src/risk/laws.js";

// Draw sums whose integrand over z is a step or has a kink. The references come from the definition
// E_z[f(rms·2^(spread·z))], z ~ N(0, 1), independently of src/risk: a step at z_c integrates to Φ or Q at z_c exactly
// (Abramowitz & Stegun 26.2.2, with src/numeric's erfc), and a kink by the trapezoid rule at step 1/2^14 on [−12, 12].
function fine(f: (z: number) => number): number {
  const n = 24 * 2 ** 14;
  const h = 24 / n;
  let sum = 0;
  for (let i = 0; i <= n; i++) {
    const z = -12 + i * h;
    sum += (i === 0 || i === n ? 0.5 : 1) * h * normalPdf(z) * f(z);
  }
  return sum;
}
const relative = (a: number, b: number): number => Math.abs(a - b) / Math.abs(b);

describe("a step in the draws", () => {
  // P(r ≥ t) over log2 r ~ N(0, s²) is Q(log2(t)/s): the Simpson sum at step 1/8 put the step on a node and was off
  // by up to a few percent (1.75e-2 at z_c = 0.0625, s = 0.5)
  it.each([0.0625, 0.03, 1.06, -2.01, 3.3, -6.7])("an indicator stepping at z = %s integrates to Q(z) within 1e-9", (zc) => {
    for (const s of [0.05, 0.5, 2.6]) {
      const t = 2 ** (s * zc);
      expect(relative(overDraws(1, s, (r) => (r >= t ? 1 : 0)), normalSf(zc))).toBeLessThan(1e-9);
      expect(relative(overDraws(1, s, (r) => (r <= t ? 1 : 0)), normalCdf(zc))).toBeLessThan(1e-9);
    }
  });

  it("the constant law (every element the drawn scale): its share below t is Φ(log2(t/rms)/spread)", () => {
    for (const zc of [-3.1, -0.4, 0.0625, 1.9]) {
      const profile: MagnitudeProfile = { elements: 1000, zeroFraction: 0, shape: "constant", rms: 0.3, log2Spread: 0.7 };
      const t = profile.rms * 2 ** (0.7 * zc);
      expect(relative(lawOverDraws(profile, "below", t), normalCdf(zc))).toBeLessThan(1e-9);
      expect(relative(lawOverDraws(profile, "energy-below", t), normalCdf(zc))).toBeLessThan(1e-9);
    }
  });

  it("the constant law's any-above is anyOf(share, n)·Q(x/s) whatever sum came before it", () => {
    // a half-Gaussian sum with a positive-only share leaves its own fitted limit behind; the constant law must not read it
    const before: MagnitudeProfile = { elements: 10, zeroFraction: 0, shape: "gaussian", rms: 0.25, log2Spread: 0.3 };
    lawOverDraws(before, "any-above", 0.5, true);
    const constant: MagnitudeProfile = { elements: 10, zeroFraction: 0, shape: "constant", rms: 0.25, log2Spread: 0.3 };
    // every element equals the scale, so some element passes t exactly when the drawn scale does: z ≥ log2(t/rms)/s
    expect(lawOverDraws(constant, "any-above", 0.25 / 8)).toBe(1);
    expect(relative(lawOverDraws(constant, "any-above", 0.25 * 2 ** 0.15), normalSf(0.5))).toBeLessThan(1e-7);
  });

  it("a coherent accumulation overflows exactly when terms·r passes the level: the draw integral of that indicator", () => {
    // binary32 accumulator (overflow from 2^128 by IEEE 754-2019 Table 3.5 and round to nearest: max + half an ulp);
    // positive terms add coherently (the hazard's reflection-free case)
    const level = 2 ** 128 - 2 ** 103;
    const terms = 4096;
    const spread = 0.8;
    const rms = (level / terms) * 2 ** (-spread * 1.37);
    const input: MagnitudeProfile = { elements: 4096 * 64, zeroFraction: 0, shape: "half-gaussian", rms, log2Spread: spread };
    const site = { kind: "accumulation", layer: "dense-0", terms, input } as HazardSite;
    const limits = { format: "binary32", maxFinite: 2 ** 128 - 2 ** 104, overflowLevel: level, saturates: false, flushBound: 2 ** -150, minNormal: 2 ** -126, smallest: 2 ** -149, unitRoundoff: 2 ** -24 } as const;
    const thresholds = { overflowAtRisk: 1e-4, overflowFails: 1e-2, energyAtRisk: 1e-3, energyFails: 1e-2, flushedAtRisk: 0.01, flushedFails: 0.1, subnormalAtRisk: 0.25, headroomAtRisk: 1, accumulationAtRisk: 1e-2, accumulationFails: 1e-1, maxQuantile: 1e-3, lowQuantile: 1e-3 };
    const context = { activations: limits, weights: limits, gradients: limits, optimizerStates: limits, accumulate: limits, thresholds, lossScale: 1, workers: 1, workerGradients: "sum", beta2: 0.999 };
    const check = evaluateHazard(site, context as never);
    const overflow = check.evaluations.find((e) => e.measure === "overflow-risk")!;
    // the definition's integral, E_z[terms·rms·2^(spread·z) ≥ level]: the indicator's step found by bisection on the
    // indicator itself, then the normal mass above it
    const passes = (z: number): boolean => terms * rms * 2 ** (spread * z) >= level;
    let below = -12;
    let above = 12;
    while (above - below > 1e-13) {
      const middle = 0.5 * (below + above);
      if (passes(middle)) above = middle;
      else below = middle;
    }
    expect(relative(overflow.value, normalSf(above))).toBeLessThan(1e-9);
  });
});

describe("a kink in the draws", () => {
  // within 1e-8: where the kink lies far out in the draws the coarse rules agree (to 1e-10) and their sum is taken
  it("the uniform law's share below t, min(1, t/(r√3)), within 1e-8 of the trapezoid at step 1/2^14", () => {
    for (const [s, x] of [[0.7, 0.3], [0.7, 1.1], [0.2, 0.8], [2.4, -1.5]] as const) {
      const profile: MagnitudeProfile = { elements: 1000, zeroFraction: 0, shape: "uniform", rms: 1, log2Spread: s };
      const expected = fine((z) => Math.min(1, 2 ** x / (2 ** (s * z) * Math.sqrt(3))));
      expect(relative(lawOverDraws(profile, "below", 2 ** x), expected)).toBeLessThan(1e-8);
      // E[x²; |x| ≤ t]/E[x²] = (t/A)³ with A = r√3 (the uniform law's own moments)
      const energy = fine((z) => Math.min(1, 2 ** x / (2 ** (s * z) * Math.sqrt(3))) ** 3);
      expect(relative(lawOverDraws(profile, "energy-below", 2 ** x), energy)).toBeLessThan(1e-8);
    }
  });
});
