import { describe, expect, it } from "vitest";
import { simulateDynamicScale, type DynamicScaleModel } from "../../src/scale/dynamic.js";

/** Gradients whose scaled maximum overflows exactly from `edge` upward (a constant gradient scale). */
function hardEdge(edge: number): DynamicScaleModel {
  return {
    overflowProbability: (scale) => (scale >= edge ? 1 : 0),
    flushesTooMuch: () => false,
  };
}

describe("simulateDynamicScale", () => {
  // Derived by hand (SCIENCE.md §3.2 [X]): from 2^20 with the edge at 2^10 the scale is cut 10 times
  // (2^20 … 2^11 all overflow) to 2^10, which overflows too, then 2^9. After that each cycle is
  // N clean steps at 2^9, one raise to 2^10, one skipped step: one skip per N + 1 steps.
  it("settles one factor below the overflow edge and skips one step per run of clean steps", () => {
    const N = 100;
    const steps = 10_000;
    const result = simulateDynamicScale(hardEdge(2 ** 10), {
      steps,
      seed: 7,
      settings: { startingScale: 2 ** 20, cleanStepsBeforeRaise: N, raiseFactor: 2, cutFactor: 2 },
    });
    expect(result.firstSkippedStep).toBe(0);
    const initialSkips = 11; // 2^20 down to 2^10, each overflowing
    const cycles = Math.floor((steps - initialSkips) / (N + 1));
    expect(result.skippedSteps).toBe(initialSkips + cycles); // a partial last cycle ends before its skip
    expect(result.settledLowest).toBe(2 ** 9);
    expect(result.settledHighest).toBe(2 ** 10);
    expect(result.settledSkipRate).toBeCloseTo(1 / (N + 1), 3);
  });

  it("is deterministic for a seed and differs across seeds when overflow is random", () => {
    const model: DynamicScaleModel = {
      overflowProbability: (scale) => Math.min(1, scale / 2 ** 14),
      flushesTooMuch: (scale) => scale < 2 ** 4,
    };
    const a = simulateDynamicScale(model, { steps: 5000, seed: 42, settings: { cleanStepsBeforeRaise: 50 } });
    const b = simulateDynamicScale(model, { steps: 5000, seed: 42, settings: { cleanStepsBeforeRaise: 50 } });
    const c = simulateDynamicScale(model, { steps: 5000, seed: 43, settings: { cleanStepsBeforeRaise: 50 } });
    expect(b).toEqual(a);
    expect(c.trajectory).not.toEqual(a.trajectory);
    expect(a.skippedSteps).toBeGreaterThan(0);
  });

  it("counts steps taken while flushing too much, and respects the lowest scale", () => {
    const model: DynamicScaleModel = {
      overflowProbability: () => 1, // every step overflows: the scale falls to its floor and stays
      flushesTooMuch: () => true,
    };
    const r = simulateDynamicScale(model, { steps: 100, seed: 1, settings: { startingScale: 2 ** 8, lowestScale: 4 } });
    expect(r.finalScale).toBe(4);
    expect(r.skippedSteps).toBe(100);
    expect(r.stepsFlushingTooMuch).toBe(0); // skipped steps take no update
  });

  it("thins the trajectory but keeps its ends", () => {
    const r = simulateDynamicScale(hardEdge(2 ** 10), {
      steps: 20_000,
      seed: 3,
      maxPoints: 50,
      settings: { startingScale: 2 ** 9, cleanStepsBeforeRaise: 10 },
    });
    expect(r.trajectory.length).toBe(50);
    expect(r.trajectory[0]).toEqual({ step: 0, scale: 2 ** 9 });
    expect(r.trajectory.at(-1)!.step).toBe(20_000);
  });

  it("rejects settings that cannot work", () => {
    expect(() => simulateDynamicScale(hardEdge(2), { steps: 10, seed: 1, settings: { raiseFactor: 1 } })).toThrow(RangeError);
    expect(() => simulateDynamicScale(hardEdge(2), { steps: 0, seed: 1 })).toThrow(/steps/);
  });
});
