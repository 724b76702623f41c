/**
 * Cache-friendly dense matrix products on Float64Array, for the float64 simulator.
 *
 * One general product, `gemm`, reads each operand through explicit row and column strides, so a transposed
 * operand is the same storage with its strides swapped. Operands are copied ("packed") block by block into
 * contiguous panels, and a 4×4 register-tiled inner kernel runs over the panels: the packing makes the inner loop
 * read memory sequentially whatever the strides, and the tiling reuses each loaded value four times. This is the
 * classic blocked layout of high-performance matrix products (Goto & van de Geijn 2008, "Anatomy of
 * high-performance matrix multiplication"), written here without any native code.
 *
 * Numeric kernels never throw on values: IEEE results (inf, NaN) propagate as they arise.
 */

/** Rounds one binary64 value to a narrower format (the accumulate format of a precision plan). */
export type RoundFunction = (x: number) => number;

/** Rows of A packed at once (the register tile's height). */
const MR = 4;
/** Columns of B packed at once (the register tile's width). */
const NR = 4;
/** Inner length per block: a KC×NR panel of B (8 KB) and an MR×KC panel of A stay in L1. */
const KC = 256;
/** Rows of A per block: an MC×KC block of A (128 KB) stays in L2. */
const MC = 64;

let packA = new Float64Array(MC * KC);
let packB = new Float64Array(KC * 256);

function ensurePackB(size: number): Float64Array {
  if (packB.length < size) packB = new Float64Array(size);
  return packB;
}

function ensurePackA(size: number): Float64Array {
  if (packA.length < size) packA = new Float64Array(size);
  return packA;
}

/**
 * General matrix product C = A·B (beta = 0) or C += A·B (beta = 1), with C row-major.
 * A is m×k, element (i, p) at a[aOffset + i·aRowStride + p·aColStride]; B is k×n, element (p, j) at
 * b[bOffset + p·bRowStride + j·bColStride]; C is m×n, element (i, j) at c[cOffset + i·cRowStride + j].
 * When `accumulate` is given, every product and every partial sum is rounded by it (a narrow accumulate format).
 * For `Math.fround` (binary32) the blocked path keeps one binary32 accumulator per output and block of 256 inner
 * terms, summed in order, then adds the block sums into C with one more rounding, as blocked hardware units do;
 * any other rounding function runs a sequential loop, one accumulator per output summed in order.
 * Cost: 2·m·n·k floating-point operations.
 */
export function gemm(
  m: number,
  n: number,
  k: number,
  a: Float64Array,
  aOffset: number,
  aRowStride: number,
  aColStride: number,
  b: Float64Array,
  bOffset: number,
  bRowStride: number,
  bColStride: number,
  c: Float64Array,
  cOffset: number,
  cRowStride: number,
  beta: 0 | 1,
  accumulate?: RoundFunction,
): void {
  if (m <= 0 || n <= 0) return;
  if (beta === 0) {
    for (let i = 0; i < m; i++) c.fill(0, cOffset + i * cRowStride, cOffset + i * cRowStride + n);
  }
  if (k <= 0) return;
  const binary32 = accumulate === Math.fround;
  if (accumulate !== undefined && !binary32) {
    gemmRounded(m, n, k, a, aOffset, aRowStride, aColStride, b, bOffset, bRowStride, bColStride, c, cOffset, cRowStride, accumulate);
    return;
  }
  const nPanels = Math.ceil(n / NR);
  for (let pc = 0; pc < k; pc += KC) {
    const kc = Math.min(KC, k - pc);
    const pb = ensurePackB(nPanels * NR * kc);
    // pack B[pc:pc+kc, :] into NR-wide column panels, each kc×NR contiguous, zero-padded at the right edge
    for (let jp = 0; jp < nPanels; jp++) {
      const j0 = jp * NR;
      const base = jp * NR * kc;
      const cols = Math.min(NR, n - j0);
      for (let p = 0; p < kc; p++) {
        const src = bOffset + (pc + p) * bRowStride + j0 * bColStride;
        const dst = base + p * NR;
        for (let jj = 0; jj < NR; jj++) pb[dst + jj] = jj < cols ? b[src + jj * bColStride]! : 0;
      }
    }
    for (let ic = 0; ic < m; ic += MC) {
      const mc = Math.min(MC, m - ic);
      const mPanels = Math.ceil(mc / MR);
      const pa = ensurePackA(mPanels * MR * kc);
      // pack A[ic:ic+mc, pc:pc+kc] into MR-tall row panels, each kc×MR contiguous, zero-padded at the bottom
      for (let ip = 0; ip < mPanels; ip++) {
        const i0 = ip * MR;
        const base = ip * MR * kc;
        const rows = Math.min(MR, mc - i0);
        for (let ii = 0; ii < MR; ii++) {
          if (ii < rows) {
            const src = aOffset + (ic + i0 + ii) * aRowStride + pc * aColStride;
            for (let p = 0; p < kc; p++) pa[base + p * MR + ii] = a[src + p * aColStride]!;
          } else {
            for (let p = 0; p < kc; p++) pa[base + p * MR + ii] = 0;
          }
        }
      }
      for (let jp = 0; jp < nPanels; jp++) {
        const j0 = jp * NR;
        const cols = Math.min(NR, n - j0);
        for (let ip = 0; ip < mPanels; ip++) {
          const i0 = ip * MR;
          const rows = Math.min(MR, mc - i0);
          const cBase = cOffset + (ic + i0) * cRowStride + j0;
          if (binary32) microKernelBinary32(kc, pa, ip * MR * kc, pb, jp * NR * kc, c, cBase, cRowStride, rows, cols);
          else microKernel(kc, pa, ip * MR * kc, pb, jp * NR * kc, c, cBase, cRowStride, rows, cols);
        }
      }
    }
  }
}

/** C[0:rows, 0:cols] += (packed A panel)·(packed B panel), a 4×4 tile held in sixteen locals. */
function microKernel(
  kc: number,
  pa: Float64Array,
  aBase: number,
  pb: Float64Array,
  bBase: number,
  c: Float64Array,
  cBase: number,
  ldc: number,
  rows: number,
  cols: number,
): void {
  let c00 = 0, c01 = 0, c02 = 0, c03 = 0;
  let c10 = 0, c11 = 0, c12 = 0, c13 = 0;
  let c20 = 0, c21 = 0, c22 = 0, c23 = 0;
  let c30 = 0, c31 = 0, c32 = 0, c33 = 0;
  let ai = aBase;
  let bi = bBase;
  for (let p = 0; p < kc; p++) {
    const a0 = pa[ai]!, a1 = pa[ai + 1]!, a2 = pa[ai + 2]!, a3 = pa[ai + 3]!;
    const b0 = pb[bi]!, b1 = pb[bi + 1]!, b2 = pb[bi + 2]!, b3 = pb[bi + 3]!;
    c00 += a0 * b0; c01 += a0 * b1; c02 += a0 * b2; c03 += a0 * b3;
    c10 += a1 * b0; c11 += a1 * b1; c12 += a1 * b2; c13 += a1 * b3;
    c20 += a2 * b0; c21 += a2 * b1; c22 += a2 * b2; c23 += a2 * b3;
    c30 += a3 * b0; c31 += a3 * b1; c32 += a3 * b2; c33 += a3 * b3;
    ai += MR;
    bi += NR;
  }
  if (rows === MR && cols === NR) {
    let r = cBase;
    c[r] = c[r]! + c00; c[r + 1] = c[r + 1]! + c01; c[r + 2] = c[r + 2]! + c02; c[r + 3] = c[r + 3]! + c03;
    r += ldc;
    c[r] = c[r]! + c10; c[r + 1] = c[r + 1]! + c11; c[r + 2] = c[r + 2]! + c12; c[r + 3] = c[r + 3]! + c13;
    r += ldc;
    c[r] = c[r]! + c20; c[r + 1] = c[r + 1]! + c21; c[r + 2] = c[r + 2]! + c22; c[r + 3] = c[r + 3]! + c23;
    r += ldc;
    c[r] = c[r]! + c30; c[r + 1] = c[r + 1]! + c31; c[r + 2] = c[r + 2]! + c32; c[r + 3] = c[r + 3]! + c33;
    return;
  }
  const tile = [c00, c01, c02, c03, c10, c11, c12, c13, c20, c21, c22, c23, c30, c31, c32, c33];
  for (let ii = 0; ii < rows; ii++) {
    for (let jj = 0; jj < cols; jj++) c[cBase + ii * ldc + jj] = c[cBase + ii * ldc + jj]! + tile[ii * NR + jj]!;
  }
}

/** The tile kernel with binary32 accumulators: each product and each partial sum rounded by Math.fround. */
function microKernelBinary32(
  kc: number,
  pa: Float64Array,
  aBase: number,
  pb: Float64Array,
  bBase: number,
  c: Float64Array,
  cBase: number,
  ldc: number,
  rows: number,
  cols: number,
): void {
  const f = Math.fround;
  let c00 = 0, c01 = 0, c02 = 0, c03 = 0;
  let c10 = 0, c11 = 0, c12 = 0, c13 = 0;
  let c20 = 0, c21 = 0, c22 = 0, c23 = 0;
  let c30 = 0, c31 = 0, c32 = 0, c33 = 0;
  let ai = aBase;
  let bi = bBase;
  for (let p = 0; p < kc; p++) {
    const a0 = pa[ai]!, a1 = pa[ai + 1]!, a2 = pa[ai + 2]!, a3 = pa[ai + 3]!;
    const b0 = pb[bi]!, b1 = pb[bi + 1]!, b2 = pb[bi + 2]!, b3 = pb[bi + 3]!;
    c00 = f(c00 + f(a0 * b0)); c01 = f(c01 + f(a0 * b1)); c02 = f(c02 + f(a0 * b2)); c03 = f(c03 + f(a0 * b3));
    c10 = f(c10 + f(a1 * b0)); c11 = f(c11 + f(a1 * b1)); c12 = f(c12 + f(a1 * b2)); c13 = f(c13 + f(a1 * b3));
    c20 = f(c20 + f(a2 * b0)); c21 = f(c21 + f(a2 * b1)); c22 = f(c22 + f(a2 * b2)); c23 = f(c23 + f(a2 * b3));
    c30 = f(c30 + f(a3 * b0)); c31 = f(c31 + f(a3 * b1)); c32 = f(c32 + f(a3 * b2)); c33 = f(c33 + f(a3 * b3));
    ai += MR;
    bi += NR;
  }
  const tile = [c00, c01, c02, c03, c10, c11, c12, c13, c20, c21, c22, c23, c30, c31, c32, c33];
  for (let ii = 0; ii < rows; ii++) {
    for (let jj = 0; jj < cols; jj++) {
      const at = cBase + ii * ldc + jj;
      c[at] = f(c[at]! + tile[ii * NR + jj]!);
    }
  }
}

/**
 * The product with a rounded accumulator: each partial sum s ← round(s + round(a·b)) in sequence, as a
 * multiply-accumulate unit holding its sum in the accumulate format would (Micikevicius et al. 2018 §3.3 on
 * why the accumulate format matters). Slower than the blocked path; used only when the plan asks for it.
 */
function gemmRounded(
  m: number,
  n: number,
  k: number,
  a: Float64Array,
  aOffset: number,
  aRowStride: number,
  aColStride: number,
  b: Float64Array,
  bOffset: number,
  bRowStride: number,
  bColStride: number,
  c: Float64Array,
  cOffset: number,
  cRowStride: number,
  round: RoundFunction,
): void {
  // pack B transposed so that each column is contiguous
  const bt = new Float64Array(n * k);
  for (let p = 0; p < k; p++) {
    for (let j = 0; j < n; j++) bt[j * k + p] = b[bOffset + p * bRowStride + j * bColStride]!;
  }
  const row = new Float64Array(k);
  for (let i = 0; i < m; i++) {
    for (let p = 0; p < k; p++) row[p] = a[aOffset + i * aRowStride + p * aColStride]!;
    const ci = cOffset + i * cRowStride;
    for (let j = 0; j < n; j++) {
      let s = c[ci + j]!;
      const bj = j * k;
      for (let p = 0; p < k; p++) s = round(s + round(row[p]! * bt[bj + p]!));
      c[ci + j] = s;
    }
  }
}

/** C (m×n) = A (m×k) · B (k×n), all row-major and contiguous; with `add`, C += A·B. */
export function matmul(
  a: Float64Array,
  b: Float64Array,
  c: Float64Array,
  m: number,
  k: number,
  n: number,
  add = false,
  accumulate?: RoundFunction,
): void {
  gemm(m, n, k, a, 0, k, 1, b, 0, n, 1, c, 0, n, add ? 1 : 0, accumulate);
}

/** C (m×n) = A (m×k) · Bᵀ, with B stored row-major as n×k; with `add`, C += A·Bᵀ. */
export function matmulTransposeB(
  a: Float64Array,
  b: Float64Array,
  c: Float64Array,
  m: number,
  k: number,
  n: number,
  add = false,
  accumulate?: RoundFunction,
): void {
  gemm(m, n, k, a, 0, k, 1, b, 0, 1, k, c, 0, n, add ? 1 : 0, accumulate);
}

/** C (m×n) = Aᵀ · B, with A stored row-major as k×m and B as k×n; with `add`, C += Aᵀ·B. */
export function matmulTransposeA(
  a: Float64Array,
  b: Float64Array,
  c: Float64Array,
  m: number,
  k: number,
  n: number,
  add = false,
  accumulate?: RoundFunction,
): void {
  gemm(m, n, k, a, 0, 1, m, b, 0, n, 1, c, 0, n, add ? 1 : 0, accumulate);
}
