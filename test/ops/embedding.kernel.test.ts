import { describe, expect, it } from "vitest";
import { embeddingBackward, embeddingForward } from "../../src/ops/embedding/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("embedding kernel", () => {
  it("looks up rows and multiplies them", () => {
    const table = Float64Array.from([1, 2, 3, 4, 5, 6]);
    expect([...embeddingForward([2, 0], table, 2, 3, 2, 0.5)]).toEqual([2.5, 3, 0.5, 1]);
  });

  it("gives NaN rows for ids outside the vocabulary instead of throwing", () => {
    const y = embeddingForward([3, -1], new Float64Array(6), 2, 3, 2, 1);
    expect([...y].every(Number.isNaN)).toBe(true);
  });

  it("backward matches central differences, with repeated ids", () => {
    const rnd = testRandom(5);
    const ids = [0, 3, 3, 1, 0, 4];
    const table = randomArray(rnd, 6 * 4);
    const r = randomArray(rnd, ids.length * 4);
    const f = (): number => dot(embeddingForward(ids, table, ids.length, 6, 4, 2.5), r);
    const d = embeddingBackward(ids, r, ids.length, 6, 4, 2.5);
    expect(gradientError(f, table, d)).toBeLessThan(1e-6);
    // rows never looked up get exactly zero gradient
    expect([...d.subarray(2 * 4, 3 * 4)]).toEqual([0, 0, 0, 0]);
  });
});
