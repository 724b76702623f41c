// The dynamic-scale model's narrowed bounds (src/scale/recommend.ts) must always contain the overflow probability
// and end exactly on it, so that the simulation draws and skips exactly as it would with the probability computed
// directly: same result, field for field. Checked against the direct product 1 − Π(1 − p_i) over the tensors
// (independent tensors; the union of independent events, common practice), evaluated tensor by tensor.
import { describe, expect, it } from "vitest";
import type { ElementShape, MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { energyBelow, limitsFor, probabilityAnyAbove } from "../../src/risk/index.js";
import { simulateDynamicScale, type DynamicScaleModel } from "../../src/scale/dynamic.js";
import { DEFAULT_WINDOW_OPTIONS } from "../../src/scale/window.js";
import { dynamicModel, profileAt } from "../../src/scale/recommend.js";
import type { PrecisionPlan } from "../../src/spec/types.js";
import { halfPlan } from "../magnitude/build-spec.js";

const plan: PrecisionPlan = { ...halfPlan, name: "test" };

// Gradients whose rms grows along the horizon by many binades at different rates (as in a deep network whose
// gradients explode), of several shapes, spreads and sizes: the model's probability runs from tiny to exactly 1.
function gradients(count: number): TensorPrediction[] {
  const shapes: ElementShape[] = ["gaussian", "half-gaussian", "uniform", "constant"];
  return Array.from({ length: count }, (_, i) => {
    const profile = (rms: number): MagnitudeProfile => ({
      elements: [256, 8192, 65_536][i % 3]!,
      zeroFraction: (i % 4) * 0.1,
      shape: shapes[i % 4]!,
      rms,
      log2Spread: [0, 0.3, 1, 2.25][(i >> 2) % 4]!,
    });
    const start = profile(2 ** (-20 + (i % 7)));
    const end = profile(2 ** (-20 + (i % 7) + 2 * (i % 13)));
    return { id: `t${i}/activation-gradient`, layer: `t${i}`, layerIndex: i, family: "dense", role: "activation-gradient", slot: "gradients", shape: [start.elements], start, end, ledger: [], source: "predicted" };
  });
}

describe("the dynamic-scale model's bounds", () => {
  const tensors = gradients(60);
  const limits = limitsFor(plan, "binary16");
  const direct = (scale: number, progress: number): number => {
    let none = 1;
    for (const t of tensors) none *= 1 - probabilityAnyAbove(profileAt(t, progress), limits.overflowLevel / scale);
    return 1 - none;
  };

  it("contain the probability at every narrowing and end on the model's own value, within the rounding of the product", () => {
    const model = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
    let checked = 0;
    // scales from the top down at each point, as the simulation visits them (each narrowing reuses the one above)
    for (const progress of [0, 0.25, 0.5, 1]) {
      for (let log2 = 24; log2 >= -4; log2 -= 2) {
        const scale = 2 ** log2;
        const exact = model.overflowProbability(scale, progress);
        // the product in another order of the same factors: equal within n + 2 roundings (Higham 2002, §3.1)
        expect(Math.abs(exact - direct(scale, progress))).toBeLessThanOrEqual(1e-13);
        const b = model.overflowBounds!(scale, progress);
        for (let step = 0; !b.exact; step++) {
          expect(b.low).toBeLessThanOrEqual(exact);
          expect(b.high).toBeGreaterThanOrEqual(exact);
          b.narrow();
          expect(step).toBeLessThan(10_000);
        }
        expect(b.low).toBe(exact);
        expect(b.high).toBe(exact);
        checked++;
      }
    }
    expect(checked).toBe(60);
  });

  it("contain the probability when each narrowing is given a goal to stop at, and still end on the model's own value", () => {
    const model = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
    let stoppedEarly = 0;
    for (const progress of [0, 0.25, 0.5, 1]) {
      for (let log2 = 24; log2 >= -4; log2 -= 2) {
        const scale = 2 ** log2;
        const exact = model.overflowProbability(scale, progress);
        const b = model.overflowBounds!(scale, progress);
        // the simulation's goals: 1 (p ≥ 1?), 0 (p > 0?), then draws near and far from the probability
        const goals = [1, 0, exact * (1 - 1e-6), Math.min(1, exact * 1.5 + 1e-9), exact * 0.25, exact];
        for (let step = 0; !b.exact; step++) {
          const goal = goals[step % goals.length]!;
          b.narrow(goal);
          expect(b.low).toBeLessThanOrEqual(exact);
          expect(b.high).toBeGreaterThanOrEqual(exact);
          if (!b.exact && (b.low > goal || b.high < goal)) stoppedEarly++;
          expect(step).toBeLessThan(10_000);
        }
        expect(b.low).toBe(exact);
        expect(b.high).toBe(exact);
      }
    }
    expect(stoppedEarly).toBeGreaterThan(0);
  });

  it("say whether any tensor flushes too much exactly as each tensor's integral does, in any order of scales", () => {
    const model = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
    // scales up and down, as a dynamic scale moves (what one scale learns is reused at the others of its point)
    const scales = [0, 6, 3, 12, 1, 9, 2, 20, 0, 5, 14, 4].map((k) => 2 ** k);
    let flushes = 0;
    for (const progress of [0, 0.5, 1]) {
      for (const scale of scales) {
        const direct = tensors.some((t) => energyBelow(profileAt(t, progress), limits.flushBound / scale) > DEFAULT_WINDOW_OPTIONS.flushTolerance);
        expect(model.flushesTooMuch(scale, progress)).toBe(direct);
        if (direct) flushes++;
      }
    }
    // both answers occur
    expect(flushes).toBeGreaterThan(0);
    expect(flushes).toBeLessThan(3 * scales.length);
  });

  it("stay exact where a few tensors at the front make an overflow certain, before the rest are bounded", () => {
    // four Gaussian tensors far above the overflow level first (each P(any above) all but 1), then many far below it:
    // the first pass's product of the lows reaches 1 after the few, and the rest keep the bounds they came with
    const many: TensorPrediction[] = gradients(120).map((t, i) => {
      if (i >= 4) return t;
      const loud: MagnitudeProfile = { elements: 65_536, zeroFraction: 0, shape: "gaussian", rms: 2 ** 20, log2Spread: 0.3 };
      return { ...t, start: loud, end: loud };
    });
    const directMany = (scale: number, progress: number): number => {
      let none = 1;
      for (const t of many) none *= 1 - probabilityAnyAbove(profileAt(t, progress), limits.overflowLevel / scale);
      return 1 - none;
    };
    const model = dynamicModel(many, limits, DEFAULT_WINDOW_OPTIONS);
    let certainEarly = 0;
    // from the top down, each narrowing starting from the one above it, which may have stopped its pass early
    for (const progress of [0, 0.5]) {
      for (let log2 = 8; log2 >= -8; log2 -= 4) {
        const scale = 2 ** log2;
        const exact = directMany(scale, progress);
        const b = model.overflowBounds!(scale, progress);
        b.narrow(1);
        if (!b.exact) b.narrow(1);
        if (b.low >= 1 && !b.exact) certainEarly++;
        for (let step = 0; !b.exact; step++) {
          expect(b.low).toBeLessThanOrEqual(exact);
          expect(b.high).toBeGreaterThanOrEqual(exact);
          b.narrow();
          expect(step).toBeLessThan(10_000);
        }
        expect(Math.abs(b.low - exact)).toBeLessThanOrEqual(1e-13);
        expect(b.low).toBe(model.overflowProbability(scale, progress));
      }
    }
    expect(certainEarly).toBeGreaterThan(0);
  });

  it("contain the probability where the sweep leaves out tensors of tiny but nonzero probability, down to every one", () => {
    // Gaussian tensors 9 to 11 binades under the overflow level at scale 1 (each P(any above) between about 1e-17 and
    // 1e-10, some above 2^−54, all under 2^−30 at scales 1 and 1/2), then with a few 3 binades under it: the sweep leaves
    // the quiet ones out of its products, and the upper bound must still cover them, and stay above 0 where they alone
    // make the probability
    const quiet = (log2Under: number): TensorPrediction => {
      const profile: MagnitudeProfile = { elements: 8192, zeroFraction: 0, shape: "gaussian", rms: limits.overflowLevel * 2 ** -log2Under, log2Spread: 1 };
      return { id: `q${log2Under}/activation-gradient`, layer: `q${log2Under}`, layerIndex: 0, family: "dense", role: "activation-gradient", slot: "gradients", shape: [8192], start: profile, end: profile, ledger: [], source: "predicted" };
    };
    const quietOnes = Array.from({ length: 40 }, (_, i) => quiet(9 + i / 20));
    for (const set of [quietOnes, [...quietOnes.slice(0, 20), quiet(3), quiet(3.5), ...quietOnes.slice(20)]]) {
      const directSet = (scale: number): number => {
        let none = 1;
        for (const t of set) none *= 1 - probabilityAnyAbove(profileAt(t, 0), limits.overflowLevel / scale);
        return 1 - none;
      };
      const model = dynamicModel(set, limits, DEFAULT_WINDOW_OPTIONS);
      for (const scale of [1, 0.5]) {
        const exact = model.overflowProbability(scale, 0);
        expect(Math.abs(exact - directSet(scale))).toBeLessThanOrEqual(1e-13);
        expect(exact).toBeGreaterThan(0);
        const b = model.overflowBounds!(scale, 0);
        for (let step = 0; !b.exact; step++) {
          expect(b.low).toBeLessThanOrEqual(exact);
          expect(b.high).toBeGreaterThanOrEqual(exact);
          b.narrow(step % 2 === 0 ? 0 : exact);
          expect(step).toBeLessThan(10_000);
        }
        expect(b.low).toBe(exact);
        expect(b.high).toBe(exact);
      }
    }
  });

  it("give a simulation identical to one with the probability computed directly", () => {
    for (const seed of [1, 2, 3]) {
      const bounded = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
      const plain = dynamicModel(tensors, limits, DEFAULT_WINDOW_OPTIONS);
      const exactOnly: DynamicScaleModel = { overflowProbability: plain.overflowProbability, flushesTooMuch: plain.flushesTooMuch };
      const options = { steps: 3000, seed, horizonPoints: 8, settings: { cleanStepsBeforeRaise: 50 } };
      const a = simulateDynamicScale(bounded, options);
      const b = simulateDynamicScale(exactOnly, options);
      expect(a).toEqual(b);
      expect(a.skippedSteps).toBeGreaterThan(0);
      expect(a.skippedSteps).toBeLessThan(3000);
    }
  });
});
