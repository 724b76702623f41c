/**
 * The pair moment of src/numeric/softmax.ts skips expm1(−y) for y > 39, taking it as exactly −1: fdlibm's expm1,
 * which V8's Math.expm1 follows, returns −1 for every argument below −56·ln 2 ≈ −38.8 (fdlibm s_expm1.c, from
 * memory), since e^(−y) is then below half an ulp of 1 (IEEE 754-2019 round to nearest). Checked over a fine sweep.
 */
import { describe, expect, it } from "vitest";
import { gaussianSoftmaxMoments, gaussianSoftmaxPairMoment } from "../../src/numeric/index.js";

describe("softmax quadrature tables", () => {
  it("expm1(−y) is exactly −1 for every y above 39 (so skipping the call changes no double)", () => {
    const notMinusOne: number[] = [];
    for (let y = 39; y < 800; y += 0.0137) if (Math.expm1(-y) !== -1) notMinusOne.push(y);
    expect(notMinusOne).toEqual([]);
    // and e^(−39) is indeed below half an ulp of 1 (2^−53)
    expect(Math.exp(-39)).toBeLessThan(Math.pow(2, -53));
  });

  it("the pair moment still lies between 1/C² (c = 0) and E[p²] (c = 1) and rises with c", () => {
    for (const [variance, classes] of [[0.35, 12], [1.76, 10], [1.15, 50000]] as const) {
      const second = gaussianSoftmaxMoments(variance, classes).second;
      let previous = 1 / (classes * classes);
      for (const c of [0.1, 0.3, 0.5, 0.7, 0.9]) {
        const pair = gaussianSoftmaxPairMoment(variance, c, classes);
        expect(pair).toBeGreaterThan(previous);
        expect(pair).toBeLessThan(second * (1 + 1e-9));
        previous = pair;
      }
    }
  });
});
