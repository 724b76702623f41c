// The dynamic-scale simulation's faster bounds (src/scale/recommend.ts dynamicModel, src/scale/overflow-enclosure.ts)
// must leave every result as the exact path gives it: the simulation with the bounds draws and skips exactly as one
// with the overflow probability 1 − Π(1 − p_i) over the tensors (independent tensors; the union of independent events,
// common practice) computed directly, for generated models (property); the moment bounds from plain numbers are
// anyAboveEnclosure's bit for bit; and the shifted tails' shortcut leaves the lower bound the two-tail formula gives.
import * as fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { ElementShape, MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { energyBelow, limitsFor, probabilityAnyAbove } from "../../src/risk/index.js";
import { normalSf } from "../../src/numeric/normal.js";
import { simulateDynamicScale, type DynamicScaleModel } from "../../src/scale/dynamic.js";
import { anyAboveEnclosure, enclosureApplies, enclosureMoments, enclosureQuick, enclosureWith, shiftBounds, shiftBoundsGridded, shiftBoundsTabled, shiftLevels, SHIFT_GRID_ORIGIN, SHIFT_GRID_STEPS, SHIFT_LEVELS_LENGTH } from "../../src/scale/overflow-enclosure.js";
import { dynamicModel, profileAt } from "../../src/scale/recommend.js";
import { DEFAULT_WINDOW_OPTIONS } from "../../src/scale/window.js";
import type { PrecisionPlan } from "../../src/spec/types.js";
import { halfPlan } from "../magnitude/build-spec.js";

const plan: PrecisionPlan = { ...halfPlan, name: "test" };
const limits = limitsFor(plan, "binary16");

interface GradientDraft {
  shape: ElementShape;
  elements: number;
  zeroFraction: number;
  spreadStart: number;
  spreadEnd: number;
  log2RmsStart: number;
  growth: number;
}

function tensorsOf(drafts: readonly GradientDraft[]): TensorPrediction[] {
  return drafts.map((d, i) => {
    const profile = (log2Rms: number, spread: number): MagnitudeProfile => ({
      elements: d.elements,
      zeroFraction: d.zeroFraction,
      shape: d.shape,
      rms: 2 ** log2Rms,
      log2Spread: spread,
      ...(d.shape === "bounded" ? { bound: 2 ** (log2Rms + 3) } : {}),
    });
    const start = profile(d.log2RmsStart, d.spreadStart);
    const end = profile(d.log2RmsStart + d.growth, d.spreadEnd);
    return { id: `g${i}/activation-gradient`, layer: `g${i}`, layerIndex: i, family: "dense", role: "activation-gradient", slot: "gradients", shape: [d.elements], start, end, ledger: [], source: "predicted" };
  });
}

// gradients near binary16's overflow for scales 1 … 2^16, mostly Gaussian laws (the ones with moment and shifted-tail
// bounds), some growing over the horizon as far as overflowing at every scale
const draft = fc.record({
  shape: fc.constantFrom<ElementShape>("gaussian", "gaussian", "half-gaussian", "bounded", "uniform"),
  elements: fc.constantFrom(8, 241, 4096, 8192, 65_536),
  zeroFraction: fc.constantFrom(0, 0.3, 0.5),
  spreadStart: fc.oneof(fc.constantFrom(0, 0.3, 1, 2.25), fc.double({ min: 0.5, max: 3, noNaN: true })),
  spreadEnd: fc.oneof(fc.constantFrom(0, 0.3, 1, 2.25), fc.double({ min: 0.5, max: 3, noNaN: true })),
  log2RmsStart: fc.double({ min: -20, max: -8, noNaN: true }),
  growth: fc.double({ min: -2, max: 14, noNaN: true }),
});

describe("the dynamic-scale simulation with bounds", () => {
  it("gives the result of the simulation with the probability computed directly, for generated gradients (property)", () => {
    let skipping = 0;
    fc.assert(
      fc.property(fc.array(draft, { minLength: 1, maxLength: 24 }), fc.integer({ min: 1, max: 1000 }), fc.constantFrom(5, 40, 2000), (drafts, seed, clean) => {
        const tensors = tensorsOf(drafts);
        const bounded = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
        const plain = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
        const exactOnly: DynamicScaleModel = { overflowProbability: plain.overflowProbability, flushesTooMuch: plain.flushesTooMuch };
        const options = { steps: 600, seed, horizonPoints: 8, settings: { cleanStepsBeforeRaise: clean } };
        const a = simulateDynamicScale(bounded, options);
        const b = simulateDynamicScale(exactOnly, options);
        expect(a).toEqual(b);
        if (a.skippedSteps > 0 && a.skippedSteps < 600) skipping++;
      }),
      { numRuns: 40 },
    );
    // the property met draws strictly inside (0, 1), where the bounds decide
    expect(skipping).toBeGreaterThan(5);
  });
});

describe("the dynamic-scale model's narrowed bounds", () => {
  it("contain the model's exact probability at every narrowing and end on it, for generated gradients (property)", () => {
    fc.assert(
      fc.property(fc.array(draft, { minLength: 1, maxLength: 60 }), fc.constantFrom(0, 0.25, 1), (drafts, progress) => {
        const tensors = tensorsOf(drafts);
        const model = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
        const exactModel = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
        // from the top down, as the simulation cuts the scale (each narrowing takes the bounds of the one above)
        for (let log2 = 16; log2 >= 0; log2--) {
          const exact = exactModel.overflowProbability(2 ** log2, progress);
          const b = model.overflowBounds!(2 ** log2, progress);
          for (let step = 0; !b.exact; step++) {
            expect(b.low).toBeLessThanOrEqual(exact);
            expect(b.high).toBeGreaterThanOrEqual(exact);
            b.narrow();
            expect(step).toBeLessThan(10_000);
          }
          expect(b.low).toBe(exact);
          expect(b.high).toBe(exact);
        }
      }),
      { numRuns: 40 },
    );
  });
});

describe("enclosureWith", () => {
  it("gives anyAboveEnclosure's bounds bit for bit from the count's moments, the spread and x = log2(t/rms) (property)", () => {
    const into = new Float64Array(2);
    fc.assert(
      fc.property(
        fc.double({ min: 16, max: 1e9, noNaN: true }),
        fc.double({ min: 0.01, max: 5, noNaN: true }),
        fc.double({ min: -30, max: 30, noNaN: true }),
        fc.double({ min: -12, max: 80, noNaN: true }),
        (elements, spread, log2Rms, above) => {
          const rms = 2 ** log2Rms;
          const t = rms * 2 ** above;
          const want = anyAboveEnclosure({ elements, zeroFraction: 0, shape: "gaussian", rms, log2Spread: spread }, t)!;
          const [a, b] = enclosureMoments(elements);
          expect(enclosureWith(a, b, spread, Math.log2(t) - Math.log2(rms), into, 0)).toBe(true);
          expect(into[0]).toBe(want[0]);
          expect(into[1]).toBe(want[1]);
        },
      ),
      { numRuns: 500 },
    );
  });
});

describe("enclosureQuick", () => {
  it("contains the computed probability, at most 3e-7 wider than enclosureWith's from 8,192 elements and a spread of 3 binades (property)", () => {
    const into = new Float64Array(2);
    const full = new Float64Array(2);
    fc.assert(
      fc.property(
        fc.oneof(fc.double({ min: 16, max: 1e9, noNaN: true }), fc.double({ min: 8192, max: 1e7, noNaN: true })),
        fc.oneof(fc.double({ min: 0.01, max: 5, noNaN: true }), fc.double({ min: 3, max: 5, noNaN: true })),
        fc.double({ min: -30, max: 30, noNaN: true }),
        fc.double({ min: -12, max: 80, noNaN: true }),
        (elements, spread, log2Rms, above) => {
          const rms = 2 ** log2Rms;
          const t = rms * 2 ** above;
          const value = probabilityAnyAbove({ elements, zeroFraction: 0, shape: "gaussian", rms, log2Spread: spread }, t);
          const [a, b] = enclosureMoments(elements);
          const x = Math.log2(t) - Math.log2(rms);
          expect(enclosureQuick(a, b, spread, x, into, 0)).toBe(true);
          expect(into[0]).toBeLessThanOrEqual(value);
          expect(into[1]).toBeGreaterThanOrEqual(value);
          // the remainder at its peak, E(V − μ)⁴·0.55/(24s⁴), both ways: 2.5e-7 measured at 8,192 elements and 3 binades
          // when written, less with more elements or spread (V's spread narrows as the count grows)
          if (elements >= 8192 && spread >= 3) {
            enclosureWith(a, b, spread, x, full, 0);
            expect(into[1]! - into[0]!).toBeLessThanOrEqual(full[1]! - full[0]! + 3e-7);
          }
        },
      ),
      { numRuns: 2000 },
    );
  });
});

describe("shiftBounds", () => {
  it("leaves the lower bound of the two-tail formula where it skips the second tail (property)", () => {
    // the formula of src/scale/overflow-enclosure.ts: lower = P(V ≥ c_lo)·Q((x − c_lo)/s), 0 under 1e-15, taken 1e-4
    // low; Q here the precise tail of src/numeric (Cody 1969), within the fast tail's 1.2e-7 of it
    const into = new Float64Array(2);
    const levels = new Float64Array(SHIFT_LEVELS_LENGTH);
    let skipped = 0;
    fc.assert(
      fc.property(
        fc.double({ min: 16, max: 1e9, noNaN: true }),
        // spreads and x (through the upper level's tail, in its own standard units) evenly over their ranges
        fc.integer({ min: 0, max: 1000 }).map((j) => 0.01 + (5 * j) / 1000),
        fc.integer({ min: 0, max: 1000 }).map((j) => -5 + (17 * j) / 1000),
        (n, s, u) => {
          shiftLevels(n, levels, 0);
          const x = levels[0]! + s * u;
          shiftBounds(x, s, levels[0]!, levels[1]!, levels[2]!, levels[3]!, levels[4]!, into, 0);
          const lower = levels[2]! * normalSf((x - levels[1]!) / s);
          // where the upper bound's own tail is under 1e-15 the second tail is skipped
          if (normalSf((x - levels[0]!) / s) < 1e-15) skipped++;
          if (lower < 1e-15 * (1 - 1e-6)) expect(into[0]).toBe(0);
          else if (lower > 1e-15 * (1 + 1e-6)) expect(into[0]! / (lower * (1 - 1e-4))).toBeCloseTo(1, 6);
        },
      ),
      { numRuns: 2000 },
    );
    expect(skipped).toBeGreaterThan(40);
  });
});

describe("shiftBoundsTabled", () => {
  it("contains the computed probability and shiftBounds' own bounds, at most e^{(u + 1)/256} looser on each tail (property)", () => {
    // Q(u) is bounded by its values on the grid about u (Q falls); the two-tail bounds of src/scale/overflow-enclosure.ts
    // with those in place of Q: within the grid step's factor of them
    const tabled = new Float64Array(2);
    const plain = new Float64Array(2);
    const levels = new Float64Array(SHIFT_LEVELS_LENGTH);
    fc.assert(
      fc.property(
        fc.constantFrom("gaussian", "half-gaussian", "bounded"),
        fc.double({ min: 16, max: 1e9, noNaN: true }),
        fc.integer({ min: 0, max: 1000 }).map((j) => 0.01 + (5 * j) / 1000),
        fc.integer({ min: 0, max: 1000 }).map((j) => -12 + (60 * j) / 1000),
        (shape, n, s, above) => {
          const p: MagnitudeProfile = { elements: n, zeroFraction: 0, shape, rms: 1, log2Spread: s, ...(shape === "bounded" ? { bound: 2 ** (above + 2) } : {}) };
          const t = 2 ** above;
          expect(enclosureApplies(p, t)).toBe(true);
          shiftLevels(n, levels, 0);
          shiftBoundsTabled(above, s, levels[0]!, levels[1]!, levels[2]!, levels[3]!, levels[4]!, tabled, 0);
          shiftBounds(above, s, levels[0]!, levels[1]!, levels[2]!, levels[3]!, levels[4]!, plain, 0);
          const value = probabilityAnyAbove(p, t);
          expect(tabled[0]).toBeLessThanOrEqual(value);
          expect(tabled[1]).toBeGreaterThanOrEqual(value);
          // shiftBounds' own, to the fast tail's 1.2e-7 each way (the grid's values are the same fast tail)
          expect(tabled[0]).toBeLessThanOrEqual(plain[0]! * (1 + 3e-7));
          expect(tabled[1]).toBeGreaterThanOrEqual(plain[1]! * (1 - 3e-7));
          // the upper bound's tails at c_hi and at the middle level c_mid < c_hi (the larger argument)
          const uMiddle = (above - levels[3]!) / s;
          const uLow = (above - levels[1]!) / s;
          // ln Q falls at the rate φ(u)/Q(u) ≤ max(0, u) + 1 (the inverse Mills ratio, from memory): a grid step of 1/256
          // moves Q by at most that factor
          expect(tabled[1]).toBeLessThanOrEqual(Math.min(1, plain[1]! * Math.exp((Math.max(0, uMiddle) + 1) / 256 + 1e-6)));
          if (plain[0]! > 0 && uLow < 38) expect(tabled[0]).toBeGreaterThanOrEqual(plain[0]! * Math.exp(-(Math.max(0, uLow + 1 / 256) + 1) / 256 - 1e-6));
        },
      ),
      { numRuns: 3000 },
    );
  });
});

describe("shiftBoundsGridded", () => {
  it("contains the computed probability from its arguments as affine functions of log2 t, at any rms (property)", () => {
    // the simulation's sweep keeps up = log2 t·(256/s) + a constant per tensor; the bounds must still hold about
    // the integral of src/risk/profile.ts, whatever the rounding of that form
    const gridded = new Float64Array(2);
    const levels = new Float64Array(SHIFT_LEVELS_LENGTH);
    fc.assert(
      fc.property(
        fc.constantFrom("gaussian", "half-gaussian"),
        fc.double({ min: 16, max: 1e9, noNaN: true }),
        fc.integer({ min: 0, max: 1000 }).map((j) => 0.01 + (5 * j) / 1000),
        fc.integer({ min: 0, max: 1000 }).map((j) => -12 + (60 * j) / 1000),
        fc.integer({ min: -40, max: 40 }),
        (shape, n, s, above, rmsLog2) => {
          const p: MagnitudeProfile = { elements: n, zeroFraction: 0, shape, rms: 2 ** rmsLog2, log2Spread: s };
          const tLog2 = above + rmsLog2;
          shiftLevels(n, levels, 0);
          const slope = SHIFT_GRID_STEPS / s;
          const up = SHIFT_GRID_ORIGIN - (rmsLog2 + levels[0]!) * slope;
          const down = SHIFT_GRID_ORIGIN - (rmsLog2 + levels[1]!) * slope;
          const middle = SHIFT_GRID_ORIGIN - (rmsLog2 + levels[3]!) * slope;
          expect(shiftBoundsGridded(tLog2 * slope + up, tLog2 * slope + middle, levels[4]!, tLog2 * slope + down, levels[2]!, gridded, 0)).toBe(true);
          const value = probabilityAnyAbove(p, 2 ** tLog2);
          expect(gridded[0]).toBeLessThanOrEqual(value);
          expect(gridded[1]).toBeGreaterThanOrEqual(value);
        },
      ),
      { numRuns: 2000 },
    );
  });

  it("declines an argument that is not a number", () => {
    expect(shiftBoundsGridded(NaN, NaN, 0.01, NaN, 1, new Float64Array(2), 0)).toBe(false);
  });
});

describe("the dynamic-scale model's flushing", () => {
  it("says whether any tensor flushes too much exactly as each tensor's integral does, inside the horizon and at its ends (property)", () => {
    let both = 0;
    fc.assert(
      fc.property(
        // gradients about the flush threshold (2^−25 here) over the scales asked, one to a few
        fc.array(draft.map((d) => ({ ...d, log2RmsStart: d.log2RmsStart * 1.5 })), { minLength: 1, maxLength: 4 }),
        fc.oneof(fc.constantFrom(0, 1), fc.double({ min: 0.01, max: 0.99, noNaN: true })),
        fc.constantFrom(1e-3, 0.05, 0.3),
        fc.constantFrom(1, 2 ** 4),
        (drafts, progress, flushTolerance, lowestScale) => {
          const tensors = tensorsOf(drafts);
          const options = { ...DEFAULT_WINDOW_OPTIONS, flushTolerance };
          const model = dynamicModel(tensors, limits, options, lowestScale);
          const answers = new Set<boolean>();
          // scales from the lowest up and back down, as a dynamic scale moves
          for (const k of [0, 3, 8, 14, 20, 6, 1]) {
            const scale = lowestScale * 2 ** k;
            const direct = tensors.some((t) => energyBelow(profileAt(t, progress), limits.flushBound / scale) > flushTolerance);
            expect(model.flushesTooMuch(scale, progress)).toBe(direct);
            answers.add(direct);
          }
          if (answers.size === 2) both++;
        },
      ),
      { numRuns: 150 },
    );
    // the property met models that flush too much at some scales and not at others
    expect(both).toBeGreaterThan(10);
  });
});
