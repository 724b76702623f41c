/**
 * Float64 kernels of the dense (fully connected) family: y = x·Wᵀ + b over the last dimension.
 * The weight is stored output-first, [out, in] row-major, as the graph lists it.
 */
import { matmul, matmulTransposeA, matmulTransposeB, type RoundFunction } from "../../numeric/matmul.js";

/** y (rows×outFeatures) = x (rows×inFeatures) · wᵀ + bias, with w stored [outFeatures, inFeatures]. */
export function denseForward(
  x: Float64Array,
  w: Float64Array,
  bias: Float64Array | null,
  rows: number,
  inFeatures: number,
  outFeatures: number,
  accumulate?: RoundFunction,
): Float64Array {
  const y = new Float64Array(rows * outFeatures);
  matmulTransposeB(x, w, y, rows, inFeatures, outFeatures, false, accumulate);
  if (bias !== null) addRowVector(y, bias, rows, outFeatures, accumulate);
  return y;
}

/** Gradients of the dense family: dx = dy·W, dW = dyᵀ·x (summed over rows), db = column sums of dy. */
export function denseBackward(
  x: Float64Array,
  w: Float64Array,
  dy: Float64Array,
  rows: number,
  inFeatures: number,
  outFeatures: number,
  hasBias: boolean,
  accumulate?: RoundFunction,
): { dx: Float64Array; dw: Float64Array; db: Float64Array | null } {
  const dx = new Float64Array(rows * inFeatures);
  matmul(dy, w, dx, rows, outFeatures, inFeatures, false, accumulate);
  const dw = new Float64Array(outFeatures * inFeatures);
  matmulTransposeA(dy, x, dw, outFeatures, rows, inFeatures, false, accumulate);
  const db = hasBias ? columnSums(dy, rows, outFeatures, accumulate) : null;
  return { dx, dw, db };
}

/** y[r, j] += v[j] for every row r. */
export function addRowVector(y: Float64Array, v: Float64Array, rows: number, width: number, round?: RoundFunction): void {
  for (let r = 0; r < rows; r++) {
    const o = r * width;
    if (round === undefined) for (let j = 0; j < width; j++) y[o + j] = y[o + j]! + v[j]!;
    else for (let j = 0; j < width; j++) y[o + j] = round(y[o + j]! + v[j]!);
  }
}

/** s[j] = Σ_r a[r, j], optionally rounding each partial sum (a narrow accumulate format). */
export function columnSums(a: Float64Array, rows: number, width: number, round?: RoundFunction): Float64Array {
  const s = new Float64Array(width);
  for (let r = 0; r < rows; r++) {
    const o = r * width;
    if (round === undefined) for (let j = 0; j < width; j++) s[j] = s[j]! + a[o + j]!;
    else for (let j = 0; j < width; j++) s[j] = round(s[j]! + a[o + j]!);
  }
  return s;
}
