import { describe, expect, it } from "vitest";
import { f16round } from "@petamoriken/float16";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { createRandom } from "../../src/numeric/random.js";
import { energyBelow, fractionBelow } from "../../src/risk/profile.js";
import { flushedAgainstSimulation, twoLayerRegressor } from "../helpers/flushed-against-simulation.js";

// The gradient at a leaky ReLU's input is δ·φ'(x), φ'(x) = 1 for x > 0 and the slope otherwise (its definition): with
// a zero-mean x, half the elements are scaled by the slope. At slope 0.01 that half sits 6.6 binades below the rest,
// where a Gaussian of the same rms has almost no elements, so it flushes far sooner than a Gaussian would.

// e5m2 rounds |x| ≤ 2^−17 (half its smallest subnormal 2^−16) to zero (OCP 8-bit floating point spec, 2023, Table 1);
// binary16 by @petamoriken/float16's f16round (IEEE 754-2019 binary16, round to nearest even)
const E5M2_FLUSH = 2 ** -17;
const flushesE5m2 = (y: number): boolean => Math.abs(y) <= E5M2_FLUSH;
const flushesBinary16 = (y: number): boolean => f16round(y) === 0;

const COUNT = 400_000;

// δ·φ'(√q·z) with δ, z ~ N(0, 1), seeded
function sample(slope: number, q: number, seed: number): { values: Float64Array; rms: number } {
  const random = createRandom(seed);
  const values = new Float64Array(COUNT);
  let square = 0;
  for (let i = 0; i < COUNT; i++) {
    const x = Math.sqrt(q) * random.normal();
    const y = random.normal() * (x > 0 ? 1 : slope);
    values[i] = y;
    square += y * y;
  }
  return { values, rms: Math.sqrt(square / COUNT) };
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
        for (const [bound, flushes] of [
          [E5M2_FLUSH, flushesE5m2],
          [2 ** -25, flushesBinary16],
        ] as const) {
          const factor = bound / a / drawn.rms;
          let flushed = 0;
          for (const y of drawn.values) if (flushes(y * factor)) flushed++;
          const measured = flushed / COUNT;
          const predicted = fractionBelow(profile(slope, 1, drawn.rms * factor), bound);
          // the two components are exact: 2% for the Monte Carlo's own rms and 4 standard errors of the count
          expect(Math.abs(predicted - measured), `${bound}: ${predicted} against ${measured}`).toBeLessThan(0.02 * measured + 4 * Math.sqrt(measured / COUNT));
        }
      });
    }
    it(`slope ${slope}: the energy below a twentieth of the rms agrees with the Monte Carlo`, () => {
      let square = 0;
      let below = 0;
      const low = 0.05 * drawn.rms;
      for (const y of drawn.values) {
        square += y * y;
        if (Math.abs(y) <= low) below += y * y;
      }
      const energy = below / square;
      expect(Math.abs(energyBelow(profile(slope, 1, drawn.rms), low) - energy) / energy).toBeLessThan(0.05);
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
