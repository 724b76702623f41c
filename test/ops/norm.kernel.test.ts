import { describe, expect, it } from "vitest";
import {
  batchNormBackward,
  batchNormForward,
  layerNormBackward,
  layerNormForward,
  rmsNormBackward,
  rmsNormForward,
  type BatchNormLayout,
} from "../../src/ops/norm/kernel.js";
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

describe("batch-norm kernel (training mode)", () => {
  it("normalises each channel over batch and positions (Ioffe & Szegedy 2015, Algorithm 1)", () => {
    const rnd = testRandom(12);
    const layout: BatchNormLayout = { outer: 4, channels: 3, inner: 5 };
    const x = randomArray(rnd, 60, 4);
    const { normalised } = batchNormForward(x, new Float64Array(3).fill(1), new Float64Array(3), layout, 0);
    for (let c = 0; c < 3; c++) {
      let s = 0;
      let s2 = 0;
      for (let n = 0; n < 4; n++)
        for (let i = 0; i < 5; i++) {
          const v = normalised[(n * 3 + c) * 5 + i]!;
          s += v;
          s2 += v * v;
        }
      expect(s / 20).toBeCloseTo(0, 12);
      expect(s2 / 20).toBeCloseTo(1, 12);
    }
  });

  it.each([
    { outer: 3, channels: 4, inner: 6 },
    { outer: 8, channels: 5, inner: 1 },
  ])("backward matches central differences (layout $outer×$channels×$inner)", (layout) => {
    const rnd = testRandom(13);
    const n = layout.outer * layout.channels * layout.inner;
    const x = randomArray(rnd, n, 2);
    const gain = randomArray(rnd, layout.channels);
    const bias = randomArray(rnd, layout.channels);
    const r = randomArray(rnd, n);
    const f = (): number => dot(batchNormForward(x, gain, bias, layout, 1e-3).y, r);
    const fw = batchNormForward(x, gain, bias, layout, 1e-3);
    const g = batchNormBackward(r, fw.normalised, fw.inverseStd, gain, layout);
    expect(gradientError(f, x, g.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, gain, g.dgain)).toBeLessThan(1e-6);
    expect(gradientError(f, bias, g.dbias)).toBeLessThan(1e-6);
  });
});
