import { describe, expect, it } from "vitest";
import { dropoutBackward, dropoutForward, dropoutMask } from "../../src/ops/dropout/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("dropout kernel", () => {
  it("the same seed gives the same mask; the kept share is near 1 − rate and kept values are scaled by 1/(1 − rate)", () => {
    const a = dropoutMask(20000, 0.25, testRandom(14).next);
    const b = dropoutMask(20000, 0.25, testRandom(14).next);
    expect([...a]).toEqual([...b]);
    const kept = a.filter((v) => v !== 0);
    // binomial standard deviation √(n·p·(1−p)) ≈ 61 elements: 5 of them is 0.0153
    expect(Math.abs(kept.length / 20000 - 0.75)).toBeLessThan(0.0153);
    expect(new Set(kept).size).toBe(1);
    expect(kept[0]).toBeCloseTo(4 / 3, 15);
  });

  it("backward matches central differences for a fixed mask", () => {
    const rnd = testRandom(15);
    const mask = dropoutMask(30, 0.5, rnd.next);
    const x = randomArray(rnd, 30);
    const r = randomArray(rnd, 30);
    const f = (): number => dot(dropoutForward(x, mask), r);
    expect(gradientError(f, x, dropoutBackward(r, mask))).toBeLessThan(1e-6);
  });
});
