import { describe, expect, it } from "vitest";
import { batchNormBackward, batchNormForward, type BatchNormLayout } from "../../src/ops/batch-norm/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
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
