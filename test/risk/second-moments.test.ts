import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import type { Prediction } from "../../src/magnitude/types.js";
import { networkZeroSecondMoments, networkZeroSecondMomentsAt, weightGradientsOf } from "../../src/risk/second-moments.js";

// Φ(x) by Abramowitz & Stegun 26.2.17 (|error| < 7.5e-8), independent of the engine's own normal functions
function normalCdf(x: number): number {
  const t = 1 / (1 + 0.2316419 * x);
  const poly = t * (0.31938153 + t * (-0.356563782 + t * (1.781477937 + t * (-1.821255978 + t * 1.330274429))));
  return 1 - (Math.exp((-x * x) / 2) / Math.sqrt(2 * Math.PI)) * poly;
}

function gradient(id: string, start: MagnitudeProfile, end: MagnitudeProfile = start): TensorPrediction {
  return { id, layer: id.split("/")[0] as string, layerIndex: 0, family: "dense", role: "weight-gradient", slot: "gradients", shape: [start.elements], start, end, ledger: [], source: "predicted" };
}

const gaussian = (elements: number, rms: number, zeroFraction = 0): MagnitudeProfile => ({ elements, zeroFraction, shape: "gaussian", rms, log2Spread: 0 });

describe("zero second moments per step, summed over every weight gradient", () => {
  // (1 − β2)·g² flushes in binary16 (flush bound 2^-25, IEEE 754-2019 smallest subnormal 2^-24, round to nearest)
  // for |g| ≤ √(2^-25/(1 − 0.999)) (DESIGN.md §5 item 5); for a Gaussian gradient of rms σ the share below is
  // P(|Z| ≤ bound/σ) = 2Φ(bound/σ) − 1
  const flushBound = 2 ** -25;
  const beta2 = 0.999;
  const bound = Math.sqrt(flushBound / (1 - beta2));
  const below = (rms: number): number => 2 * normalCdf(bound / rms) - 1;

  it("adds the exact zeros and flushed moments of each tensor, and names the one giving most", () => {
    // a 640-element weight gradient and a 10-element bias gradient, the bias with 2% exact zeros
    // (the engine integrates its Gaussian law numerically: held to 1e-4 relative)
    const weight = gradient("dense/weight-gradient", gaussian(640, 4));
    const bias = gradient("dense/bias-gradient", gaussian(10, 0.1, 0.02));
    const expected = 640 * below(4) + (10 * 0.02 + 10 * 0.98 * below(0.1));
    const count = networkZeroSecondMomentsAt([bias, weight], "start", flushBound, beta2);
    expect(Math.abs(count.perStep / expected - 1)).toBeLessThan(1e-4);
    expect(count.perStep).toBeGreaterThan(1);
    expect(count.top).toBe("dense/weight-gradient");
    expect(Math.abs(count.topCount / (640 * below(4)) - 1)).toBeLessThan(1e-4);
    // neither tensor alone reaches one expected zero per step
    expect(640 * below(4)).toBeLessThan(1);
    expect(10 * 0.02 + 10 * 0.98 * below(0.1)).toBeLessThan(1);
  });

  it("takes the worse of the start and end of the horizon, each summed at one time", () => {
    const a = gradient("a/weight-gradient", gaussian(1000, 2), gaussian(1000, 0.5));
    const b = gradient("b/weight-gradient", gaussian(1000, 0.4), gaussian(1000, 4));
    const start = 1000 * below(2) + 1000 * below(0.4);
    const end = 1000 * below(0.5) + 1000 * below(4);
    const worse = networkZeroSecondMoments([a, b], flushBound, beta2);
    expect(worse.at).toBe(start > end ? "start" : "end");
    expect(Math.abs(worse.perStep / Math.max(start, end) - 1)).toBeLessThan(1e-4);
    expect(worse.top).toBe(start > end ? "b/weight-gradient" : "a/weight-gradient");
  });

  it("follows a prediction adjusted in place: no count is remembered from an earlier call", () => {
    const networkZeroSecondMomentSides = (list: readonly TensorPrediction[], bound: number, b2: number) => ({
      start: networkZeroSecondMomentsAt(list, "start", bound, b2),
      end: networkZeroSecondMomentsAt(list, "end", bound, b2),
    });
    const a = gradient("a/weight-gradient", gaussian(1000, 2), gaussian(1000, 0.5));
    const b = gradient("b/weight-gradient", gaussian(1000, 0.4), gaussian(1000, 4));
    const activation: TensorPrediction = { ...a, id: "a/output", role: "activation", slot: "activations" };
    const prediction: Prediction = { specName: "two layers", tensors: [activation, a, b], hazards: [], assumptions: [] };
    expect(weightGradientsOf(prediction)).toEqual([a, b]);
    const before = networkZeroSecondMomentSides(weightGradientsOf(prediction), flushBound, beta2);
    expect(before.start).toEqual(networkZeroSecondMomentsAt([a, b], "start", flushBound, beta2));
    expect(before.end).toEqual(networkZeroSecondMomentsAt([a, b], "end", flushBound, beta2));
    // a caller shrinks b's start gradients in place: its elements' second moments flush more often
    (b.start as { rms: number }).rms = 0.01 * flushBound;
    const after = networkZeroSecondMomentSides(weightGradientsOf(prediction), flushBound, beta2);
    expect(after.start.perStep).toBeGreaterThan(before.start.perStep);
    expect(after.start.top).toBe("b/weight-gradient");
    // and a tensor added to the prediction counts too
    prediction.tensors.push(gradient("c/weight-gradient", gaussian(1000, 0.001 * flushBound), gaussian(1000, 0.001 * flushBound)));
    expect(networkZeroSecondMomentSides(weightGradientsOf(prediction), flushBound, beta2).end.perStep).toBeGreaterThan(after.end.perStep);
    // another flush bound or β2 is another count
    expect(networkZeroSecondMomentSides([a], 2 ** -24, beta2).end.perStep).toBeGreaterThan(networkZeroSecondMomentSides([a], flushBound, beta2).end.perStep);
  });

  it("is 0 with no weight gradients", () => {
    expect(networkZeroSecondMoments([], flushBound, beta2)).toEqual({ perStep: 0, at: "start", top: "", topLayer: "", topProfile: undefined, topCount: 0 });
  });
});
