import { describe, expect, it } from "vitest";
import { layerNormBackward, layerNormForward } from "../../src/ops/layer-norm/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("layer-norm kernel", () => {
  it("normalises each row to mean 0 and variance 1/(1 + ε/σ²) (Ba, Kiros & Hinton 2016, eq. 4)", () => {
    const rnd = testRandom(8);
    const x = randomArray(rnd, 3 * 16, 5);
    const { normalised } = layerNormForward(x, new Float64Array(16).fill(1), new Float64Array(16), 3, 16, 0);
    for (let r = 0; r < 3; r++) {
      const row = normalised.subarray(r * 16, r * 16 + 16);
      expect(row.reduce((a, b) => a + b, 0) / 16).toBeCloseTo(0, 12);
      expect(row.reduce((a, b) => a + b * b, 0) / 16).toBeCloseTo(1, 12);
    }
  });

  it("backward matches central differences for input, gain and bias", () => {
    const rnd = testRandom(9);
    const [rows, width] = [4, 7];
    const x = randomArray(rnd, rows * width, 2);
    const gain = randomArray(rnd, width);
    const bias = randomArray(rnd, width);
    const r = randomArray(rnd, rows * width);
    const f = (): number => dot(layerNormForward(x, gain, bias, rows, width, 1e-3).y, r);
    const fw = layerNormForward(x, gain, bias, rows, width, 1e-3);
    const g = layerNormBackward(r, fw.normalised, fw.inverseStd, gain, rows, width);
    expect(gradientError(f, x, g.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, gain, g.dgain)).toBeLessThan(1e-6);
    expect(gradientError(f, bias, g.dbias)).toBeLessThan(1e-6);
  });
});
