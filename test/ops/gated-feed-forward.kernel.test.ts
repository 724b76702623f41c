import { describe, expect, it } from "vitest";
import { activate } from "../../src/ops/activation/kernel.js";
import { gatedBackward, gatedForward, type GatedWeights } from "../../src/ops/gated-feed-forward/kernel.js";
import type { ActivationName } from "../../src/spec/types.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("gated feed-forward kernel", () => {
  it("computes (φ(x·Wgᵀ) ⊙ x·Wuᵀ)·Wdᵀ (Shazeer 2020, eq. 6)", () => {
    const x = Float64Array.from([1, -2]);
    const w: GatedWeights = { gate: Float64Array.from([1, 0.25]), up: Float64Array.from([1, 1]), down: Float64Array.from([2, 3]) };
    const { y } = gatedForward(x, w, 1, 2, 1, "silu", 0);
    // gate pre-activation 1 − 0.5 = 0.5, up 1 − 2 = −1
    const h = activate("silu", 0.5, 0) * -1;
    expect(y[0]).toBeCloseTo(2 * h, 15);
    expect(y[1]).toBeCloseTo(3 * h, 15);
  });

  it.each(["silu", "gelu", "relu", "sigmoid", "softmax"] as ActivationName[])("backward matches central differences (%s)", (act) => {
    const rnd = testRandom(24);
    const [rows, width, hidden] = [5, 4, 6];
    const x = randomArray(rnd, rows * width);
    const w: GatedWeights = {
      gate: randomArray(rnd, hidden * width, 0.5),
      up: randomArray(rnd, hidden * width, 0.5),
      down: randomArray(rnd, width * hidden, 0.5),
    };
    const r = randomArray(rnd, rows * width);
    const f = (): number => dot(gatedForward(x, w, rows, width, hidden, act, 0).y, r);
    const { saved } = gatedForward(x, w, rows, width, hidden, act, 0);
    const g = gatedBackward(r, w, saved, rows, width, hidden, act, 0);
    expect(gradientError(f, x, g.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, w.gate, g.dweights.gate)).toBeLessThan(1e-6);
    expect(gradientError(f, w.up, g.dweights.up)).toBeLessThan(1e-6);
    expect(gradientError(f, w.down, g.dweights.down)).toBeLessThan(1e-6);
  });
});
