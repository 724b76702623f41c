import { describe, expect, it } from "vitest";
import { crossEntropy, meanSquaredError } from "../../src/ops/loss/kernel.js";
import { gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("loss kernels", () => {
  it("cross-entropy of uniform logits is ln(classes) (SCIENCE.md §2.1: p ≈ 1/C at initialisation)", () => {
    const { loss, gradient } = crossEntropy(new Float64Array(2 * 10), [3, 7], 2, 10, "mean");
    expect(loss).toBeCloseTo(Math.log(10), 14);
    // (p − y)/batch: 0.1/2 for wrong classes, (0.1 − 1)/2 for the right one
    expect(gradient[0]).toBeCloseTo(0.05, 15);
    expect(gradient[3]).toBeCloseTo(-0.45, 15);
  });

  it("cross-entropy stays finite for logits far beyond exp's range", () => {
    const { loss } = crossEntropy(Float64Array.from([1000, 0]), [1], 1, 2, "sum");
    expect(loss).toBeCloseTo(1000, 10);
  });

  it.each(["mean", "sum"] as const)("cross-entropy gradient matches central differences (%s)", (reduction) => {
    const rnd = testRandom(25);
    const logits = randomArray(rnd, 6 * 5, 2);
    const targets = [0, 4, 2, 2, 1, 3];
    const f = (): number => crossEntropy(logits, targets, 6, 5, reduction).loss;
    expect(gradientError(f, logits, crossEntropy(logits, targets, 6, 5, reduction).gradient)).toBeLessThan(1e-6);
  });

  it.each(["mean", "sum"] as const)("mean squared error gradient matches central differences (%s)", (reduction) => {
    const rnd = testRandom(26);
    const y = randomArray(rnd, 12);
    const t = randomArray(rnd, 12);
    const f = (): number => meanSquaredError(y, t, reduction).loss;
    expect(gradientError(f, y, meanSquaredError(y, t, reduction).gradient)).toBeLessThan(1e-6);
  });
});
