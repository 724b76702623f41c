/**
 * Cache-friendly dense matrix products on Float64Array, for the float64 simulator.
 *
 * One general product, `gemm`, reads each operand through explicit row and column strides, so a transposed
 * operand (A·Bᵀ, Aᵀ·B) is the same storage with its strides swapped and is never copied whole. Operands are
 * copied ("packed") block by block into contiguous panels in one reused workspace, and a 4×4 register-tiled
 * inner kernel (simd.ts, WebAssembly SIMD) runs over the panels: the packing makes the inner loop read memory
 * sequentially whatever the strides, and the tiling reuses each loaded value four times. This is the classic
 * blocked layout of high-performance matrix products (Goto & van de Geijn 2008, "Anatomy of high-performance
 * matrix multiplication"). No call allocates once the workspace has grown to the largest block.
 *
 * Numeric kernels never throw on values: IEEE results (inf, NaN) propagate as they arise.
 */
import { TILE, computeTiles, tileWorkspace } from "./simd.js";

/** Rounds one binary64 value to a narrower format (the accumulate format of a precision plan). */
export type RoundFunction = (x: number) => number;

/** Inner length per block: a KC×TILE panel of B and a TILE×KC panel of A (8 KB each) stay in L1. */
const KC = 256;
/** Rows of A per block: an MC×KC block of A (128 KB) stays in L2. */
const MC = 64;
/** Columns of B per block: a KC×NC block of B (1 MB) stays in the outer caches, and bounds the workspace. */
const NC = 512;

const roundUp = (x: number, multiple: number): number => Math.ceil(x / multiple) * multiple;

/**
 * General matrix product C = A·B (beta = 0) or C += A·B (beta = 1), with C row-major.
 * A is m×k, element (i, p) at a[aOffset + i·aRowStride + p·aColStride]; B is k×n, element (p, j) at
 * b[bOffset + p·bRowStride + j·bColStride]; C is m×n, element (i, j) at c[cOffset + i·cRowStride + j].
 * Each output is summed over blocks of 256 inner terms: within a block the products are added in order to a sum
 * starting at 0, and each block's sum is then added to C. For k ≤ 256 that is the plain sequential sum.
 * When `accumulate` is given, every product and every partial sum is rounded by it (a narrow accumulate format).
 * For `Math.fround` (binary32) the blocked path keeps one binary32 accumulator per output and block of 256 inner
 * terms, summed in order, then adds the block sums into C with one more rounding, as blocked hardware units do;
 * any other rounding function runs a sequential loop, one accumulator per output summed in order.
 * Results depend only on the inputs (deterministic). Cost: 2·m·n·k floating-point operations.
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
  const binary32 = accumulate === Math.fround;
  if (k <= 0 || (accumulate !== undefined && !binary32)) {
    if (beta === 0) for (let i = 0; i < m; i++) c.fill(0, cOffset + i * cRowStride, cOffset + i * cRowStride + n);
    if (k > 0) gemmRounded(m, n, k, a, aOffset, aRowStride, aColStride, b, bOffset, bRowStride, bColStride, c, cOffset, cRowStride, accumulate!);
    return;
  }
  // workspace: packed B block, packed A block, then the block's output tiles
  const kcMax = Math.min(KC, k);
  const ncMax = roundUp(Math.min(NC, n), TILE);
  const mcMax = roundUp(Math.min(MC, m), TILE);
  const aAt = ncMax * kcMax;
  const tilesAt = aAt + mcMax * kcMax;
  const w = tileWorkspace(tilesAt + mcMax * ncMax);
  for (let jc = 0; jc < n; jc += NC) {
    const nc = Math.min(NC, n - jc);
    const nPanels = Math.ceil(nc / TILE);
    for (let pc = 0; pc < k; pc += KC) {
      const kc = Math.min(KC, k - pc);
      packPanels(w, 0, nc, kc, b, bOffset + pc * bRowStride + jc * bColStride, bColStride, bRowStride);
      for (let ic = 0; ic < m; ic += MC) {
        const mc = Math.min(MC, m - ic);
        const mPanels = Math.ceil(mc / TILE);
        packPanels(w, aAt, mc, kc, a, aOffset + ic * aRowStride + pc * aColStride, aRowStride, aColStride);
        computeTiles(binary32, mPanels, nPanels, kc, aAt, 0, tilesAt, nPanels * TILE);
        addTiles(w, tilesAt, nPanels * TILE, mc, nc, c, cOffset + ic * cRowStride + jc, cRowStride, beta === 0 && pc === 0, binary32);
      }
    }
  }
}

/**
 * Copy `lines` lines of length kc (line l, step p at src[from + l·lineStride + p·stepStride]) into panels of
 * TILE lines interleaved step by step (panel q, step p, line r at w[at + q·TILE·kc + p·TILE + r]), the last
 * panel padded with zeros: the A panels (lines = rows of A) and the B panels (lines = columns of B).
 */
function packPanels(w: Float64Array, at: number, lines: number, kc: number, src: Float64Array, from: number, lineStride: number, stepStride: number): void {
  const full = Math.floor(lines / TILE);
  const panel = TILE * kc;
  // each loop body copies one step of a panel, TILE (= 4) lines; the outer loop runs along the longer stride,
  // so that the source is read in storage order
  if (lineStride >= stepStride) {
    for (let q = 0; q < full; q++) {
      let s = from + q * TILE * lineStride;
      let d = at + q * panel;
      for (let p = 0; p < kc; p++, s += stepStride, d += TILE) {
        w[d] = src[s]!;
        w[d + 1] = src[s + lineStride]!;
        w[d + 2] = src[s + 2 * lineStride]!;
        w[d + 3] = src[s + 3 * lineStride]!;
      }
    }
  } else {
    for (let p = 0; p < kc; p++) {
      let s = from + p * stepStride;
      let d = at + p * TILE;
      for (let q = 0; q < full; q++, s += TILE * lineStride, d += panel) {
        w[d] = src[s]!;
        w[d + 1] = src[s + lineStride]!;
        w[d + 2] = src[s + 2 * lineStride]!;
        w[d + 3] = src[s + 3 * lineStride]!;
      }
    }
  }
  const rest = lines - full * TILE;
  if (rest === 0) return;
  const s = from + full * TILE * lineStride;
  let d = at + full * panel;
  for (let p = 0; p < kc; p++) for (let r = 0; r < TILE; r++) w[d++] = r < rest ? src[s + r * lineStride + p * stepStride]! : 0;
}

/**
 * C[0:rows, 0:cols] += the tiles (row pitch `ldt`), each sum rounded to binary32 when asked; with `overwrite`
 * (the first inner block of C = A·B) C = the tiles, which is the same as 0 + tile since a sum started at +0 is
 * never −0 (IEEE 754-2019 §6.3).
 */
function addTiles(w: Float64Array, at: number, ldt: number, rows: number, cols: number, c: Float64Array, cAt: number, ldc: number, overwrite: boolean, binary32: boolean): void {
  for (let i = 0; i < rows; i++) {
    const t = at + i * ldt;
    const o = cAt + i * ldc;
    if (overwrite) for (let j = 0; j < cols; j++) c[o + j] = w[t + j]!;
    else if (binary32) for (let j = 0; j < cols; j++) c[o + j] = Math.fround(c[o + j]! + w[t + j]!);
    else for (let j = 0; j < cols; j++) c[o + j] = c[o + j]! + w[t + j]!;
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
  // C itself holds the running sums: each output still adds its terms in order of p, and nothing is allocated
  for (let i = 0; i < m; i++) {
    const ci = cOffset + i * cRowStride;
    for (let p = 0; p < k; p++) {
      const aip = a[aOffset + i * aRowStride + p * aColStride]!;
      const bp = bOffset + p * bRowStride;
      for (let j = 0; j < n; j++) c[ci + j] = round(c[ci + j]! + round(aip * b[bp + j * bColStride]!));
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
