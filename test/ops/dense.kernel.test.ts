import { describe, expect, it } from "vitest";
import { denseBackward, denseForward } from "../../src/ops/dense/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("dense kernel", () => {
  it("forward matches the definition y = x·Wᵀ + b element by element", () => {
    const rnd = testRandom(1);
    const [rows, nIn, nOut] = [3, 5, 4];
    const x = randomArray(rnd, rows * nIn);
    const w = randomArray(rnd, nOut * nIn);
    const b = randomArray(rnd, nOut);
    const y = denseForward(x, w, b, rows, nIn, nOut);
    for (let r = 0; r < rows; r++) {
      for (let o = 0; o < nOut; o++) {
        let s = b[o]!;
        for (let i = 0; i < nIn; i++) s += x[r * nIn + i]! * w[o * nIn + i]!;
        expect(y[r * nOut + o]).toBeCloseTo(s, 12);
      }
    }
  });

  it.each([true, false])("backward matches central differences (bias %s)", (hasBias) => {
    const rnd = testRandom(2);
    const [rows, nIn, nOut] = [6, 7, 5];
    const x = randomArray(rnd, rows * nIn);
    const w = randomArray(rnd, nOut * nIn, 0.4);
    const b = randomArray(rnd, nOut);
    const r = randomArray(rnd, rows * nOut);
    const f = (): number => dot(denseForward(x, w, hasBias ? b : null, rows, nIn, nOut), r);
    const g = denseBackward(x, w, r, rows, nIn, nOut, hasBias);
    expect(gradientError(f, x, g.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, w, g.dw)).toBeLessThan(1e-6);
    if (hasBias) expect(gradientError(f, b, g.db!)).toBeLessThan(1e-6);
    else expect(g.db).toBeNull();
  });
});
