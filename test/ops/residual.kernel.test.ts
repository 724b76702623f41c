import { describe, expect, it } from "vitest";
import { denseBackward, denseForward } from "../../src/ops/dense/kernel.js";
import { residualBackwardCombine, residualBackwardToBranch, residualForward } from "../../src/ops/residual/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("residual kernel", () => {
  it("adds the branch times the multiplier", () => {
    expect([...residualForward(Float64Array.from([1, 2]), Float64Array.from([4, 8]), 0.5)]).toEqual([3, 6]);
  });

  it("backward through skip and a dense branch matches central differences", () => {
    const rnd = testRandom(19);
    const [rows, width] = [4, 5];
    const x = randomArray(rnd, rows * width);
    const w = randomArray(rnd, width * width, 0.5);
    const r = randomArray(rnd, rows * width);
    const alpha = 0.7;
    const f = (): number => dot(residualForward(x, denseForward(x, w, null, rows, width, width), alpha), r);
    const toBranch = residualBackwardToBranch(r, alpha);
    const branch = denseBackward(x, w, toBranch, rows, width, width, false);
    const dx = residualBackwardCombine(r, branch.dx);
    expect(gradientError(f, x, dx)).toBeLessThan(1e-6);
    expect(gradientError(f, w, branch.dw)).toBeLessThan(1e-6);
  });
});
