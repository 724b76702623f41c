import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { fractionBelow } from "../../src/risk/profile.js";
import { flushedAgainstSimulation, twoLayerRegressor } from "../helpers/flushed-against-simulation.js";
import { drawSample, expectEnergyAndTailLikeSample, expectFlushedLikeSample } from "../helpers/mixture-monte-carlo.js";

// The gradient at a leaky ReLU's input is δ·φ'(x), φ'(x) = 1 for x > 0 and the slope otherwise (its definition): with
// a zero-mean x, half the elements are scaled by the slope. At slope 0.01 that half sits 6.6 binades below the rest,
// where a Gaussian of the same rms has almost no elements, so it flushes far sooner than a Gaussian would.

const COUNT = 400_000;

// δ·φ'(√q·z) with δ, z ~ N(0, 1), seeded
function sample(slope: number, q: number, seed: number): { values: Float64Array; rms: number } {
  return drawSample(COUNT, seed, (random) => {
    const x = Math.sqrt(q) * random.normal();
    return random.normal() * (x > 0 ? 1 : slope);
  });
}

function profile(slope: number, q: number, rms: number): MagnitudeProfile {
  return { elements: 1, zeroFraction: 0, shape: "gaussian-mixture", rms, log2Spread: 0, mixture: { activation: "leaky-relu", inputVariance: q, slope } };
}

describe("the two-scale mixture of a gradient behind a leaky ReLU", () => {
  for (const [slope, seed] of [
    [0.01, 21],
    [0.2, 22],
    [-0.1, 23],
  ] as const) {
    const drawn = sample(slope, 1, seed);
    for (const a of [1e-3, 1e-2, 0.1]) {
      it(`slope ${slope}: the share flushed in e5m2 and in binary16 at ${a} of the rms agrees with a Monte Carlo`, () => {
        // the two components are exact: 2% for the Monte Carlo's own rms and 4 standard errors of the count
        expectFlushedLikeSample(drawn, a, (rms) => profile(slope, 1, rms), 0.02);
      });
    }
    it(`slope ${slope}: the energy below a twentieth of the rms agrees with the Monte Carlo`, () => {
      expectEnergyAndTailLikeSample(drawn, profile(slope, 1, drawn.rms), 0.05);
    });
  }
  it("slope 0.01 at a thousandth of the rms: the flushed share is ~35× a Gaussian's of the same rms (erf(a/√2) ≈ 0.8·a)", () => {
    const drawn = sample(0.01, 1, 24);
    let flushed = 0;
    for (const y of drawn.values) if (Math.abs(y) <= 1e-3 * drawn.rms) flushed++;
    expect(flushed / COUNT).toBeGreaterThan(20 * 0.8e-3);
    expect(fractionBelow(profile(0.01, 1, drawn.rms), 1e-3 * drawn.rms)).toBeGreaterThan(20 * 0.8e-3);
  });
});

// An invented regressor for a kiln's temperature probes, leaky ReLU as its hidden units
const KILN = twoLayerRegressor("kiln-probes", ["{ type: leaky-relu, name: leaky-1, slope: 0.01 }", "{ type: leaky-relu, name: leaky-2, slope: 0.01 }"]);

describe("check against the simulation behind a leaky ReLU", () => {
  it("predicts the e5m2 flushed share of the gradients at the leaky ReLU inputs within 25% of the measured", () => {
    for (const { id, lossScale, predicted, measured } of flushedAgainstSimulation(KILN, "kiln.yaml", [16, 128])) {
      expect(predicted / measured, `${id} at ${lossScale}: ${predicted} against ${measured}`).toBeGreaterThan(0.75);
      expect(predicted / measured, `${id} at ${lossScale}: ${predicted} against ${measured}`).toBeLessThan(1.25);
    }
  });
});
