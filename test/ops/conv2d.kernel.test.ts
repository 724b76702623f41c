import { describe, expect, it } from "vitest";
import { conv2dBackward, conv2dForward, conv2dGeometry } from "../../src/ops/conv2d/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("conv2d kernel", () => {
  it("'same' padding keeps the size at stride 1 and gives ceil(n/stride) at stride 2 (common practice)", () => {
    expect(conv2dGeometry(1, 1, 7, 6, 1, 3, 1, "same")).toMatchObject({ outHeight: 7, outWidth: 6, padTop: 1, padLeft: 1 });
    expect(conv2dGeometry(1, 1, 7, 6, 1, 3, 2, "same")).toMatchObject({ outHeight: 4, outWidth: 3 });
    expect(conv2dGeometry(1, 1, 7, 6, 1, 3, 1, "valid")).toMatchObject({ outHeight: 5, outWidth: 4, padTop: 0 });
    expect(conv2dGeometry(1, 1, 7, 6, 1, 3, 2, 1)).toMatchObject({ outHeight: 4, outWidth: 3, padTop: 1 });
  });

  it("forward matches a direct sliding-window sum", () => {
    const rnd = testRandom(3);
    const g = conv2dGeometry(2, 3, 5, 4, 2, 3, 2, 1);
    const x = randomArray(rnd, 2 * 3 * 5 * 4);
    const w = randomArray(rnd, 2 * 3 * 9);
    const b = randomArray(rnd, 2);
    const y = conv2dForward(x, w, b, g);
    for (let n = 0; n < 2; n++)
      for (let o = 0; o < 2; o++)
        for (let oy = 0; oy < g.outHeight; oy++)
          for (let ox = 0; ox < g.outWidth; ox++) {
            let s = b[o]!;
            for (let c = 0; c < 3; c++)
              for (let ky = 0; ky < 3; ky++)
                for (let kx = 0; kx < 3; kx++) {
                  const iy = oy * 2 + ky - 1;
                  const ix = ox * 2 + kx - 1;
                  if (iy < 0 || iy >= 5 || ix < 0 || ix >= 4) continue;
                  s += w[((o * 3 + c) * 3 + ky) * 3 + kx]! * x[((n * 3 + c) * 5 + iy) * 4 + ix]!;
                }
            expect(y[((n * 2 + o) * g.outHeight + oy) * g.outWidth + ox]).toBeCloseTo(s, 12);
          }
  });

  it.each([
    { stride: 1, padding: "same" as const, bias: true },
    { stride: 2, padding: "same" as const, bias: false },
    { stride: 2, padding: 1, bias: true },
    { stride: 1, padding: "valid" as const, bias: true },
  ])("backward matches central differences (stride $stride, padding $padding)", ({ stride, padding, bias }) => {
    const rnd = testRandom(4);
    const g = conv2dGeometry(2, 3, 6, 5, 4, 3, stride, padding);
    const x = randomArray(rnd, 2 * 3 * 6 * 5);
    const w = randomArray(rnd, 4 * 3 * 9, 0.3);
    const b = randomArray(rnd, 4);
    const r = randomArray(rnd, 2 * 4 * g.outHeight * g.outWidth);
    const f = (): number => dot(conv2dForward(x, w, bias ? b : null, g), r);
    const grads = conv2dBackward(x, w, r, g, bias);
    expect(gradientError(f, x, grads.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, w, grads.dw)).toBeLessThan(1e-6);
    if (bias) expect(gradientError(f, b, grads.db!)).toBeLessThan(1e-6);
  });
});
