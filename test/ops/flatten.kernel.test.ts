import { describe, expect, it } from "vitest";
import { flattenBackward, flattenForward } from "../../src/ops/flatten/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("flatten kernel", () => {
  it("copies values unchanged into a new array", () => {
    const x = Float64Array.from([1, 2, 3]);
    const y = flattenForward(x);
    expect([...y]).toEqual([1, 2, 3]);
    expect(y).not.toBe(x);
  });

  it("backward matches central differences", () => {
    const rnd = testRandom(18);
    const x = randomArray(rnd, 24);
    const r = randomArray(rnd, 24);
    expect(gradientError(() => dot(flattenForward(x), r), x, flattenBackward(r))).toBeLessThan(1e-6);
  });
});
