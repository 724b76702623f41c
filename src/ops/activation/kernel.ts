/**
 * Float64 kernels of the activation family: elementwise functions and their derivatives, and softmax over the
 * last dimension. Forward takes the pre-activation z; backward takes z, the output y and the upstream dy.
 */
import type { ActivationName } from "../../spec/types.js";
import { erf } from "./moments.js";

/** Activations applied element by element (softmax works on rows). */
export type ElementwiseActivation = Exclude<ActivationName, "softmax">;

const INV_SQRT_2PI = 0.3989422804014327;
const SQRT1_2 = Math.SQRT1_2;

function sigmoid(z: number): number {
  // written two ways so exp never overflows (common practice)
  if (z >= 0) return 1 / (1 + Math.exp(-z));
  const e = Math.exp(z);
  return e / (1 + e);
}

/** φ(z) for one element. */
export function activate(name: ElementwiseActivation, z: number, slope: number): number {
  switch (name) {
    case "relu":
      // NaN passes, as IEEE 754-2019 §9.6 maximum(0, NaN) does: a run whose values went bad must not read as zeros
      return z <= 0 ? 0 : z;
    case "leaky-relu":
      return z <= 0 ? slope * z : z;
    case "gelu":
      // the exact (erf) form z·Φ(z) (Hendrycks & Gimpel 2016, eq. 1)
      return 0.5 * z * (1 + erf(z * SQRT1_2));
    case "silu":
      // z·σ(z) (Elfwing, Uchibe & Doya 2018; Ramachandran et al. 2017)
      return z * sigmoid(z);
    case "tanh":
      return Math.tanh(z);
    case "sigmoid":
      return sigmoid(z);
    case "softplus":
      // ln(1 + e^z) = max(z, 0) + ln(1 + e^{−|z|}), stable for large |z| (common practice)
      return Math.max(z, 0) + Math.log1p(Math.exp(-Math.abs(z)));
    case "identity":
      return z;
  }
}

/** φ'(z) for one element. */
export function activateDerivative(name: ElementwiseActivation, z: number, slope: number): number {
  switch (name) {
    case "relu":
      return z > 0 ? 1 : 0;
    case "leaky-relu":
      return z > 0 ? 1 : slope;
    case "gelu":
      return 0.5 * (1 + erf(z * SQRT1_2)) + z * INV_SQRT_2PI * Math.exp(-0.5 * z * z);
    case "silu": {
      const s = sigmoid(z);
      return s * (1 + z * (1 - s));
    }
    case "tanh": {
      const t = Math.tanh(z);
      return 1 - t * t;
    }
    case "sigmoid": {
      const s = sigmoid(z);
      return s * (1 - s);
    }
    case "softplus":
      return sigmoid(z);
    case "identity":
      return 1;
  }
}

/** y = φ(z) element by element. */
export function activationForward(name: ElementwiseActivation, z: Float64Array, slope: number): Float64Array {
  const y = new Float64Array(z.length);
  for (let i = 0; i < z.length; i++) y[i] = activate(name, z[i]!, slope);
  return y;
}

/** dz = φ'(z)·dy element by element. */
export function activationBackward(
  name: ElementwiseActivation,
  z: Float64Array,
  dy: Float64Array,
  slope: number,
): Float64Array {
  const dz = new Float64Array(z.length);
  for (let i = 0; i < z.length; i++) dz[i] = activateDerivative(name, z[i]!, slope) * dy[i]!;
  return dz;
}

/**
 * Softmax over each row of `rowLength` elements. With `subtractMax` the row maximum is subtracted before exp, so
 * exp never overflows (common practice); without it exp(z) is taken as is, overflowing where it would.
 * `masked(row, column)` (optional) excludes an element: it gets probability exactly 0 (a causal mask).
 */
export function softmaxForward(
  z: Float64Array,
  rows: number,
  rowLength: number,
  subtractMax = true,
  masked?: (row: number, column: number) => boolean,
): Float64Array {
  const y = new Float64Array(rows * rowLength);
  for (let r = 0; r < rows; r++) {
    const o = r * rowLength;
    let max = -Infinity;
    if (subtractMax) {
      for (let j = 0; j < rowLength; j++) {
        if (masked !== undefined && masked(r, j)) continue;
        if (z[o + j]! > max) max = z[o + j]!;
      }
    }
    const shift = subtractMax ? max : 0;
    let sum = 0;
    for (let j = 0; j < rowLength; j++) {
      const e = masked !== undefined && masked(r, j) ? 0 : Math.exp(z[o + j]! - shift);
      y[o + j] = e;
      sum += e;
    }
    for (let j = 0; j < rowLength; j++) y[o + j] = y[o + j]! / sum;
  }
  return y;
}

/** dz = y ⊙ (dy − Σ_j dy_j·y_j) per row: the softmax Jacobian applied to dy. */
export function softmaxBackward(y: Float64Array, dy: Float64Array, rows: number, rowLength: number): Float64Array {
  const dz = new Float64Array(rows * rowLength);
  for (let r = 0; r < rows; r++) {
    const o = r * rowLength;
    let dot = 0;
    for (let j = 0; j < rowLength; j++) dot += dy[o + j]! * y[o + j]!;
    for (let j = 0; j < rowLength; j++) dz[o + j] = y[o + j]! * (dy[o + j]! - dot);
  }
  return dz;
}
