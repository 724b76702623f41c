import { describe, expect, it } from "vitest";
import { averagePoolBackward, averagePoolForward, poolGeometry } from "../../src/ops/average-pool/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("average-pool kernel", () => {
  it("averages each window", () => {
    const x = Float64Array.from([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16]);
    expect([...averagePoolForward(x, poolGeometry(1, 4, 4, 2, 2))]).toEqual([3.5, 5.5, 11.5, 13.5]);
  });

  it.each([
    { size: 2, stride: 2 },
    { size: 3, stride: 1 },
    { size: 3, stride: 2 },
  ])("backward matches central differences (size $size, stride $stride)", ({ size, stride }) => {
    const rnd = testRandom(16);
    const g = poolGeometry(3, 7, 6, size, stride);
    const x = randomArray(rnd, 3 * 7 * 6);
    const r = randomArray(rnd, 3 * g.outHeight * g.outWidth);
    const f = (): number => dot(averagePoolForward(x, g), r);
    expect(gradientError(f, x, averagePoolBackward(r, g))).toBeLessThan(1e-6);
  });
});
