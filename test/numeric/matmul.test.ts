import { describe, expect, it } from "vitest";
import fc from "fast-check";
import { gemm, matmul, matmulTransposeA, matmulTransposeB } from "../../src/numeric/matmul.js";
import { randomArray, testRandom } from "../simulate/gradcheck.js";

/** The definition of the product, one dot product per element, for reference. */
function reference(a: (i: number, p: number) => number, b: (p: number, j: number) => number, m: number, k: number, n: number): Float64Array {
  const c = new Float64Array(m * n);
  for (let i = 0; i < m; i++)
    for (let j = 0; j < n; j++) {
      let s = 0;
      for (let p = 0; p < k; p++) s += a(i, p) * b(p, j);
      c[i * n + j] = s;
    }
  return c;
}

function expectClose(actual: Float64Array, expected: Float64Array): void {
  expect(actual.length).toBe(expected.length);
  for (let i = 0; i < actual.length; i++) expect(Math.abs(actual[i]! - expected[i]!)).toBeLessThanOrEqual(1e-12 * (1 + Math.abs(expected[i]!)));
}

describe("blocked matrix products", () => {
  // sizes that cross the 4×4 tile, the 64-row block and the 256-long inner block, with ragged edges
  it.each([
    [1, 1, 1],
    [3, 5, 2],
    [70, 300, 9],
    [64, 256, 256],
    [5, 513, 67],
  ])("A·B, A·Bᵀ and Aᵀ·B equal the definition for m=%i, k=%i, n=%i", (m, k, n) => {
    const rnd = testRandom(m * 1000 + k + n);
    const a = randomArray(rnd, m * k);
    const b = randomArray(rnd, k * n);
    const c = new Float64Array(m * n);
    const ab = reference((i, p) => a[i * k + p]!, (p, j) => b[p * n + j]!, m, k, n);
    matmul(a, b, c, m, k, n);
    expectClose(c, ab);
    // the same storage read as Bᵀ (n×k) and as Aᵀ (k×m)
    const bt = new Float64Array(n * k);
    for (let p = 0; p < k; p++) for (let j = 0; j < n; j++) bt[j * k + p] = b[p * n + j]!;
    matmulTransposeB(a, bt, c, m, k, n);
    expectClose(c, ab);
    const at = new Float64Array(k * m);
    for (let i = 0; i < m; i++) for (let p = 0; p < k; p++) at[p * m + i] = a[i * k + p]!;
    matmulTransposeA(at, b, c, m, k, n);
    expectClose(c, ab);
  });

  it("adds into C when asked, and reads operands through offsets and strides", () => {
    const rnd = testRandom(31);
    const a = randomArray(rnd, 100);
    const b = randomArray(rnd, 100);
    const c = randomArray(rnd, 60);
    const before = Float64Array.from(c);
    // A = 3×4 block of a starting at 5 with row stride 10; B = 4×2 read column-major from b at 7 (row stride 1, col stride 9)
    gemm(3, 2, 4, a, 5, 10, 1, b, 7, 1, 9, c, 11, 20, 1);
    const expected = reference((i, p) => a[5 + i * 10 + p]!, (p, j) => b[7 + p + j * 9]!, 3, 4, 2);
    for (let i = 0; i < 3; i++)
      for (let j = 0; j < 2; j++) expect(c[11 + i * 20 + j]).toBeCloseTo(before[11 + i * 20 + j]! + expected[i * 2 + j]!, 12);
    // untouched elements stay as they were
    expect(c[10]).toBe(before[10]);
    expect(c[13]).toBe(before[13]);
  });

  it("with binary32 accumulation (Math.fround, IEEE 754-2019 binary32) equals a sequential sum rounded after every step, for inner lengths within one block", () => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 9 }), fc.integer({ min: 1, max: 40 }), fc.integer({ min: 1, max: 9 }), fc.integer(), (m, k, n, seed) => {
        const rnd = testRandom(seed);
        const a = randomArray(rnd, m * k);
        const b = randomArray(rnd, k * n);
        const c = new Float64Array(m * n);
        matmul(a, b, c, m, k, n, false, Math.fround);
        for (let i = 0; i < m; i++)
          for (let j = 0; j < n; j++) {
            let s = 0;
            for (let p = 0; p < k; p++) s = Math.fround(s + Math.fround(a[i * k + p]! * b[p * n + j]!));
            if (c[i * n + j] !== s) return false;
          }
        return true;
      }),
      { numRuns: 50 },
    );
  });

  it("with another rounding function accumulates sequentially, rounding every product and partial sum", () => {
    // a coarse grid (multiples of 1/4) makes the rounding visible: 0.3·1 → 0.25, 0.25 + 0.3 → 0.5 (nearest)
    const quarter = (x: number): number => Math.round(x * 4) / 4;
    const c = new Float64Array(1);
    matmul(Float64Array.from([0.3, 0.3, 0.3]), Float64Array.from([1, 1, 1]), c, 1, 3, 1, false, quarter);
    expect(c[0]).toBe(0.75);
    matmul(Float64Array.from([0.3, 0.3, 0.3]), Float64Array.from([1, 1, 1]), c, 1, 3, 1);
    expect(c[0]).toBeCloseTo(0.9, 15);
  });

  it("propagates IEEE specials instead of throwing", () => {
    const c = new Float64Array(1);
    matmul(Float64Array.from([Infinity, 1]), Float64Array.from([0, 1]), c, 1, 2, 1);
    expect(Number.isNaN(c[0])).toBe(true);
  });
});
