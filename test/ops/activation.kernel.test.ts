import { describe, expect, it } from "vitest";
import {
  activationBackward,
  activationForward,
  activate,
  softmaxBackward,
  softmaxForward,
  type ElementwiseActivation,
} from "../../src/ops/activation/kernel.js";
import { erf } from "../../src/ops/activation/moments.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

const NAMES: ElementwiseActivation[] = ["relu", "leaky-relu", "gelu", "silu", "tanh", "sigmoid", "softplus", "identity"];

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("activation kernel", () => {
  it("erf (used by the GELU kernel) matches tabulated values (Abramowitz & Stegun 1964, Table 7.1)", () => {
    expect(erf(0.5)).toBeCloseTo(0.5204998778, 10);
    expect(erf(1)).toBeCloseTo(0.8427007929, 10);
    expect(erf(2)).toBeCloseTo(0.9953222650, 10);
    expect(erf(-3)).toBeCloseTo(-0.9999779095, 10);
  });

  it("values at chosen points match their definitions", () => {
    // sigmoid'(4) = 0.0176627062 (SCIENCE.md check value 35, computed); GELU(1) = Φ(1) = 0.8413447461 (normal table)
    expect(activate("gelu", 1, 0)).toBeCloseTo(0.8413447461, 9);
    expect(activate("silu", 2, 0)).toBeCloseTo(2 / (1 + Math.exp(-2)), 14);
    expect(activate("softplus", 800, 0)).toBe(800);
    expect(activate("leaky-relu", -2, 0.2)).toBeCloseTo(-0.4, 15);
    const s = activate("sigmoid", 4, 0);
    expect(s * (1 - s)).toBeCloseTo(0.0176627062, 9);
  });

  it.each(NAMES)("%s backward matches central differences", (name) => {
    const rnd = testRandom(6);
    const z = randomArray(rnd, 40, 2);
    // keep clear of the kinks of relu and leaky-relu, where the derivative jumps
    for (let i = 0; i < z.length; i++) if (Math.abs(z[i]!) < 0.01) z[i] = 0.5;
    const r = randomArray(rnd, 40);
    const f = (): number => dot(activationForward(name, z, 0.1), r);
    expect(gradientError(f, z, activationBackward(name, z, r, 0.1))).toBeLessThan(1e-6);
  });

  it.each([true, false])("softmax rows sum to 1 and backward matches central differences (subtract max %s)", (sub) => {
    const rnd = testRandom(7);
    const z = randomArray(rnd, 4 * 6, 3);
    const y = softmaxForward(z, 4, 6, sub);
    for (let r = 0; r < 4; r++) expect(y.subarray(r * 6, r * 6 + 6).reduce((a, b) => a + b, 0)).toBeCloseTo(1, 14);
    const rr = randomArray(rnd, 24);
    const f = (): number => dot(softmaxForward(z, 4, 6, sub), rr);
    expect(gradientError(f, z, softmaxBackward(y, rr, 4, 6))).toBeLessThan(1e-6);
  });

  it("ReLU and leaky ReLU pass NaN and infinities on, as IEEE 754-2019 §9.6 maximum(0, x) does, so a run's bad values are not read as zeros", () => {
    expect(activate("relu", NaN, 0)).toBeNaN();
    expect(activate("leaky-relu", NaN, 0.1)).toBeNaN();
    expect(activate("relu", Infinity, 0)).toBe(Infinity);
    expect(activate("relu", -Infinity, 0)).toBe(0);
    expect(activate("leaky-relu", -Infinity, 0.1)).toBe(-Infinity);
    // −0 maps to +0 or −0: both are zero
    expect(activate("relu", -0, 0) === 0).toBe(true);
  });

  it("softmax without the max subtraction overflows where exp does; with it, it does not", () => {
    // exp(710) overflows binary64 (largest finite ≈ 1.797e308, ln of it ≈ 709.78: IEEE 754-2019 binary64)
    const z = Float64Array.from([710, 0]);
    expect(softmaxForward(z, 1, 2, true)[0]).toBe(1);
    expect(Number.isNaN(softmaxForward(z, 1, 2, false)[0])).toBe(true);
  });

  it("softmax gives masked elements exactly zero probability", () => {
    const y = softmaxForward(Float64Array.from([1, 2, 3]), 1, 3, true, (_r, c) => c === 2);
    expect(y[2]).toBe(0);
    expect(y[0]! + y[1]!).toBeCloseTo(1, 15);
  });
});
