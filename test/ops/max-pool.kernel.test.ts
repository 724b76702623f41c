import { describe, expect, it } from "vitest";
import { poolGeometry } from "../../src/ops/average-pool/kernel.js";
import { maxPoolBackward, maxPoolForward } from "../../src/ops/max-pool/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("max-pool kernel", () => {
  it("takes each window's maximum", () => {
    const x = Float64Array.from([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16]);
    expect([...maxPoolForward(x, poolGeometry(1, 4, 4, 2, 2)).y]).toEqual([6, 8, 14, 16]);
  });

  it.each([
    { size: 2, stride: 2 },
    { size: 3, stride: 1 },
  ])("backward matches central differences (size $size, stride $stride)", ({ size, stride }) => {
    const rnd = testRandom(17);
    const g = poolGeometry(2, 6, 6, size, stride);
    // distinct values well apart, so a step of 1e-5 never changes which element is largest
    const x = randomArray(rnd, 72);
    const order = [...x.keys()].sort((a, b) => x[a]! - x[b]!);
    order.forEach((index, rank) => (x[index] = rank * 0.1));
    const r = randomArray(rnd, 2 * g.outHeight * g.outWidth);
    const f = (): number => dot(maxPoolForward(x, g).y, r);
    const { argmax } = maxPoolForward(x, g);
    expect(gradientError(f, x, maxPoolBackward(r, argmax, x.length))).toBeLessThan(1e-6);
  });
});
