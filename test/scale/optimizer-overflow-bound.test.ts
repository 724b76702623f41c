/**
 * The optimizer check reports a second moment's overflow risk as 0 where a cheap bound puts it below 1e-15, without
 * running the draw integral: the bound must lie above the probability itself, and the 0 reported within 1e-12 of what
 * the integral gives.
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { erfc as preciseErfc } from "../../src/numeric/normal.js";
import { probabilityAnyAbove } from "../../src/risk/index.js";
import { anyAboveBound, checkOptimizer } from "../../src/scale/optimizer.js";
import { act, dense, features, he, makeSpec, mse } from "../magnitude/build-spec.js";

// P(some of n elements ≥ t) over draws by its definition, independently of src/risk and of the bound: the Gaussian
// tail P(|x| ≥ t | r) = erfc(t/(r√2)) (Abramowitz & Stegun 26.2.29, src/numeric's erfc, A&S 7.1.6 and its continued
// fraction), 1 − (1 − q)^n by expm1/log1p, log2 r ~ N(log2 rms, s²), the integral over z by the trapezoid rule at step
// 1/256 on [−12, 12] (the mass beyond is 3.6e-33, A&S 26.2.29)
function reference(profile: MagnitudeProfile, t: number): number {
  const n = profile.elements * (1 - profile.zeroFraction);
  const h = 1 / 256;
  let sum = 0;
  for (let z = -12; z <= 12; z += h) {
    const r = profile.rms * 2 ** (profile.log2Spread * z);
    const q = preciseErfc(t / (r * Math.SQRT2));
    const any = q >= 1 ? 1 : -Math.expm1(n * Math.log1p(-q));
    sum += (Math.exp(-0.5 * z * z) / Math.sqrt(2 * Math.PI)) * any * h;
  }
  return sum;
}

const profiles = fc.record({
  shape: fc.constantFrom("gaussian" as const, "half-gaussian" as const),
  rmsLog2: fc.double({ min: -40, max: 20, noNaN: true }),
  log2Spread: fc.oneof(fc.constant(0), fc.double({ min: 0, max: 4, noNaN: true })),
  elementsLog2: fc.integer({ min: 0, max: 31 }),
  zeroFraction: fc.oneof(fc.constant(0), fc.double({ min: 0, max: 0.99, noNaN: true })),
  // the threshold's distance above the rms, in binades
  above: fc.integer({ min: 0, max: 1200 }).map((k) => k / 10),
});

function made(p: { shape: "gaussian" | "half-gaussian"; rmsLog2: number; log2Spread: number; elementsLog2: number; zeroFraction: number }): MagnitudeProfile {
  return { elements: 2 ** p.elementsLog2, zeroFraction: p.zeroFraction, shape: p.shape, rms: 2 ** p.rmsLog2, log2Spread: p.log2Spread };
}

describe("the overflow bound of a Gaussian tensor (union bound over the draws, Mills' ratio tails)", () => {
  it("lies above the probability summed by its definition, and where it is below 1e-15 the draw integral is within 1e-12 of 0", () => {
    let decided = 0;
    let runs = 0;
    fc.assert(
      fc.property(profiles, (p) => {
        runs++;
        const profile = made(p);
        const t = profile.rms * 2 ** p.above;
        const bound = anyAboveBound(profile, t);
        const exact = reference(profile, t);
        // the bound is an upper bound (a relative margin for the reference's own rounding)
        expect(bound).toBeGreaterThanOrEqual(exact * (1 - 1e-9));
        if (bound < 1e-15) {
          decided++;
          expect(probabilityAnyAbove(profile, t)).toBeLessThanOrEqual(1e-12);
        }
      }),
      { numRuns: 300 },
    );
    // thresholds up to 120 binades above the rms: many are decided by the bound, so the fast path is tested too
    expect(decided).toBeGreaterThan(runs / 10);
  });

  it("does not apply to other element laws or to a bounded tensor", () => {
    const base: MagnitudeProfile = { elements: 100, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0.5 };
    expect(anyAboveBound(base, 2 ** 60)).toBeLessThan(1e-15);
    expect(anyAboveBound({ ...base, shape: "log-normal", elementLog2Spread: 3 }, 2 ** 60)).toBe(Infinity);
    expect(anyAboveBound({ ...base, shape: "uniform" }, 2 ** 60)).toBe(Infinity);
    expect(anyAboveBound({ ...base, bound: 2 ** 70 }, 2 ** 60)).toBe(Infinity);
    expect(anyAboveBound({ ...base, rms: 0 }, 2 ** 60)).toBe(Infinity);
  });
});

describe("the optimizer check's second-moment overflow risk", () => {
  it("is the draw integral where the bound does not settle it, and 0 within 1e-12 of it where it does", () => {
    const layers = [];
    for (let i = 0; i < 12; i++) layers.push(dense(`d${i}`, 64, he), act(`a${i}`, "relu"));
    const seen = { bound: 0, integral: 0 };
    for (const scale of [1, 2 ** 40]) {
      const spec = makeSpec(layers, { input: features(64, 1, scale), loss: mse() });
      const built = buildGraph(spec);
      if (!built.ok) throw new Error("graph");
      const prediction = predict(built.graph, spec);
      const result = checkOptimizer({ ...spec.training.optimizer, kind: "adam" }, { ...spec.precision, optimizerStates: "binary16" }, prediction);
      const overflow = 65504;
      for (const t of result.tensors) {
        const gradient = prediction.tensors.find((x) => x.id === t.gradient) as (typeof prediction.tensors)[number];
        const integral = probabilityAnyAbove(gradient.start, Math.sqrt(overflow));
        if (anyAboveBound(gradient.start, Math.sqrt(overflow)) < 1e-15) {
          seen.bound++;
          expect(t.secondMomentOverflowRisk).toBe(0);
          expect(integral).toBeLessThanOrEqual(1e-12);
        } else {
          seen.integral++;
          expect(t.secondMomentOverflowRisk, t.weight).toBe(integral);
        }
      }
    }
    // the input scale 2^40 makes gradients that reach the overflow level: both ways are met
    expect(seen.bound).toBeGreaterThan(0);
    expect(seen.integral).toBeGreaterThan(0);
  });
});
