import { describe, expect, it } from "vitest";
import { rmsNormBackward, rmsNormForward } from "../../src/ops/rms-norm/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("rms-norm kernel", () => {
  it("scales each row to unit mean square with ε = 0 (Zhang & Sennrich 2019, eq. 4)", () => {
    const rnd = testRandom(10);
    const x = randomArray(rnd, 2 * 32, 0.01);
    const { y } = rmsNormForward(x, new Float64Array(32).fill(3), 2, 32, 0);
    for (let r = 0; r < 2; r++) expect(y.subarray(r * 32, r * 32 + 32).reduce((a, b) => a + b * b, 0) / 32).toBeCloseTo(9, 10);
  });

  it("backward matches central differences for input and gain", () => {
    const rnd = testRandom(11);
    const [rows, width] = [5, 6];
    const x = randomArray(rnd, rows * width, 2);
    const gain = randomArray(rnd, width);
    const r = randomArray(rnd, rows * width);
    const f = (): number => dot(rmsNormForward(x, gain, rows, width, 1e-4).y, r);
    const fw = rmsNormForward(x, gain, rows, width, 1e-4);
    const g = rmsNormBackward(r, fw.normalised, fw.inverseRms, gain, rows, width);
    expect(gradientError(f, x, g.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, gain, g.dgain)).toBeLessThan(1e-6);
  });
});
