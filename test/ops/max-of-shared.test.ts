import { describe, expect, test } from "vitest";
import { createRandom } from "../../src/numeric/index.js";
import { maxOfNormals, maxOfShared } from "../../src/ops/pool/analytic.js";

// Two overlapping pooling windows of k independent standard normals that share s of them: the moments of their maxima
// by quadrature (src/ops/pool) against their definition, sampled with the project's seeded generator.
function sampled(k: number, shared: number, rectified: boolean, n: number, slope = 0): { mean: number; cross: number } {
  const random = createRandom(20261202);
  let mean = 0;
  let cross = 0;
  for (let t = 0; t < n; t++) {
    let u = -Infinity;
    for (let i = 0; i < shared; i++) u = Math.max(u, random.normal());
    let a = u;
    let b = u;
    for (let i = 0; i < k - shared; i++) a = Math.max(a, random.normal());
    for (let i = 0; i < k - shared; i++) b = Math.max(b, random.normal());
    if (rectified) {
      a = a > 0 ? a : slope * a;
      b = b > 0 ? b : slope * b;
    }
    mean += a;
    cross += a * b;
  }
  return { mean: mean / n, cross: cross / n };
}

describe("maxima of two overlapping windows", () => {
  test("windows sharing every element are one window: E[M_A·M_B] = E[M²] (definition)", () => {
    expect(maxOfShared(9, 9, false).cross).toBeCloseTo(maxOfNormals(9).m2, 9);
    expect(maxOfShared(9, 9, false).mean).toBeCloseTo(maxOfNormals(9).m1, 9);
    // and the rectified maximum: E[max(M, 0)] and E[max(M, 0)²]
    expect(maxOfShared(9, 9, true).mean).toBeCloseTo(maxOfNormals(9).m1Positive, 9);
    expect(maxOfShared(9, 9, true).cross).toBeCloseTo(maxOfNormals(9).m2Positive, 9);
  });

  test("3 × 3 windows at stride 2 (3 shared) and ReLU'd 2 × 2 windows at stride 1 (2 shared) against 200,000 sampled pairs", () => {
    for (const [k, shared, rectified] of [
      [9, 3, false],
      [9, 1, false],
      [4, 2, true],
    ] as const) {
      const exact = maxOfShared(k, shared, rectified);
      const seen = sampled(k, shared, rectified, 200_000);
      // the sampled covariance's standard error is ~0.003 here
      expect(Math.abs(exact.cross - exact.mean * exact.mean - (seen.cross - seen.mean * seen.mean)), `${k}/${shared}`).toBeLessThan(0.01);
      expect(Math.abs(exact.mean - seen.mean)).toBeLessThan(0.01);
    }
  });

  test("leaky-ReLU'd windows of 2 at stride 1 (1 shared) and 3 × 3 at stride 2 (3 shared), slope 0.2, against 200,000 sampled pairs", () => {
    // a pair of 2 is below zero a quarter of the time, where the slope moves the mean by 0.023 (ReLU'd: 0.681, 0.658 here)
    for (const [k, shared] of [
      [2, 1],
      [9, 3],
    ] as const) {
      const exact = maxOfShared(k, shared, true, 0.2);
      const seen = sampled(k, shared, true, 200_000, 0.2);
      expect(Math.abs(exact.cross - exact.mean * exact.mean - (seen.cross - seen.mean * seen.mean)), `${k}/${shared}`).toBeLessThan(0.01);
      expect(Math.abs(exact.mean - seen.mean), `${k}/${shared}`).toBeLessThan(0.01);
    }
  });
});
