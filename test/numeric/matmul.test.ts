import { describe, expect, it } from "vitest";
import fc from "fast-check";
import { gemm, matmul, matmulTransposeA, matmulTransposeB } from "../../src/numeric/matmul.js";
import { computeTiles, TILE, tileWorkspace } from "../../src/numeric/simd.js";
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
  // sizes that cross the 4×4 tile, the 64-row block, the 256-long inner block and the 512-column block, with ragged edges
  it.each([
    [1, 1, 1],
    [3, 5, 2],
    [70, 300, 9],
    [64, 256, 256],
    [5, 513, 67],
    [3, 40, 530],
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

  // The blocked kernels against a plain triple loop over the stored layouts, for every transpose variant and
  // sizes that are odd, ragged against the 4×4 tile and the 64-row, 256-long and 512-column blocks, 1×n and n×1.
  // Tolerance 1e-12 relative to Σ|a·b| per output: summing in another order moves a dot product by at most a
  // few ulps of that sum (common practice; the inner-product error bound of Higham 2002 §3.1, from memory).
  const dims = fc.oneof(fc.integer({ min: 1, max: 9 }), fc.integer({ min: 1, max: 80 }), fc.constantFrom(1, 63, 64, 65, 255, 256, 257));
  // at most about 10⁶ multiply-adds per case, so that the reference loop stays quick
  const sizes = fc
    .tuple(dims, fc.oneof(dims, fc.integer({ min: 250, max: 600 })), dims)
    .map(([m, k, n]) => [m, Math.max(1, Math.min(k, Math.floor(1e6 / (m * n)))), n] as const);
  it.each(["A·B", "A·Bᵀ", "Aᵀ·B"] as const)("%s equals a plain triple loop within 1e-12 relative, with and without adding into C", (variant) => {
    fc.assert(
      fc.property(sizes, fc.boolean(), fc.integer(), ([m, k, n], add, seed) => {
        const rnd = testRandom(seed);
        const a = randomArray(rnd, m * k);
        const b = randomArray(rnd, k * n);
        const c = randomArray(rnd, m * n);
        const expected = Float64Array.from(c);
        const scale = new Float64Array(m * n);
        // strides of element (i, p) of A and (p, j) of B in the layout each variant stores them in
        const [aRow, aStep] = variant === "Aᵀ·B" ? [1, m] : [k, 1];
        const [bStep, bColumn] = variant === "A·Bᵀ" ? [1, k] : [n, 1];
        for (let i = 0; i < m; i++)
          for (let j = 0; j < n; j++) {
            let s = 0;
            let size = 0;
            for (let p = 0; p < k; p++) {
              const term = a[i * aRow + p * aStep]! * b[p * bStep + j * bColumn]!;
              s += term;
              size += Math.abs(term);
            }
            expected[i * n + j] = add ? expected[i * n + j]! + s : s;
            scale[i * n + j] = size + (add ? Math.abs(c[i * n + j]!) : 0);
          }
        const product = variant === "A·B" ? matmul : variant === "A·Bᵀ" ? matmulTransposeB : matmulTransposeA;
        product(a, b, c, m, k, n, add);
        for (let i = 0; i < c.length; i++) if (!(Math.abs(c[i]! - expected[i]!) <= 1e-12 * scale[i]!)) return false;
        return true;
      }),
      { numRuns: 60 },
    );
  });

  it("gives the same bits on every run, whatever was computed before (deterministic)", () => {
    const rnd = testRandom(77);
    const [m, k, n] = [37, 700, 530];
    const a = randomArray(rnd, m * k);
    const b = randomArray(rnd, k * n);
    const first = new Float64Array(m * n);
    matmulTransposeB(a, b, first, m, k, n);
    const other = new Float64Array(5 * 3);
    matmul(randomArray(rnd, 5 * 9), randomArray(rnd, 9 * 3), other, 5, 9, 3);
    const second = new Float64Array(m * n);
    matmulTransposeB(a, b, second, m, k, n);
    for (let i = 0; i < first.length; i++) expect(Object.is(first[i], second[i])).toBe(true);
  });

  it("computes the tiles the same after the workspace has grown", () => {
    // one 4×4 tile from packed panels (kc = 3), before and after growing the kernel's memory past its start size
    const kc = 3;
    const run = (w: Float64Array): number[] => {
      for (let p = 0; p < kc; p++)
        for (let r = 0; r < TILE; r++) {
          w[p * TILE + r] = p + r; // A panel: row r, step p
          w[16 + p * TILE + r] = p - r; // B panel: column r, step p
        }
      computeTiles(false, 1, 1, kc, 0, 16, 32, TILE);
      return Array.from(w.subarray(32, 32 + TILE * TILE));
    };
    const before = run(tileWorkspace(64));
    const grown = tileWorkspace(tileWorkspace(64).length + 1);
    expect(grown.length).toBeGreaterThan(64);
    const after = run(grown);
    // tile (i, j) = Σ_p (p + i)(p − j), the definition of the product
    const expected = Array.from({ length: TILE * TILE }, (_, t) => {
      const [i, j] = [Math.floor(t / TILE), t % TILE];
      let s = 0;
      for (let p = 0; p < kc; p++) s += (p + i) * (p - j);
      return s;
    });
    expect(before).toEqual(expected);
    expect(after).toEqual(expected);
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

  // within one inner block each output is one accumulator summed in order: in binary64 the lanes of the SIMD
  // kernel are plain IEEE 754-2019 binary64 operations, and with binary32 accumulation (Math.fround, IEEE 754-2019
  // binary32) every product and partial sum is rounded
  it.each([
    ["binary64", undefined, (sum: number, product: number) => sum + product],
    ["binary32 (Math.fround)", Math.fround, (sum: number, product: number) => Math.fround(sum + Math.fround(product))],
  ] as const)("with %s accumulation equals a sequential sum bit for bit, for inner lengths within one block", (_name, accumulate, add) => {
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 9 }), fc.integer({ min: 1, max: 256 }), fc.integer({ min: 1, max: 9 }), fc.integer(), (m, k, n, seed) => {
        const rnd = testRandom(seed);
        const a = randomArray(rnd, m * k);
        const b = randomArray(rnd, k * n);
        const c = new Float64Array(m * n);
        matmul(a, b, c, m, k, n, false, accumulate);
        for (let i = 0; i < m; i++)
          for (let j = 0; j < n; j++) {
            let s = 0;
            for (let p = 0; p < k; p++) s = add(s, a[i * k + p]! * b[p * n + j]!);
            if (!Object.is(c[i * n + j], s)) return false;
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
