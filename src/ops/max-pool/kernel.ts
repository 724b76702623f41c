/**
 * Float64 kernels of the max-pool family: channels-first images, square windows of `size` pixels moved by
 * `stride`, no padding. The gradient goes to the first largest element of each window (common practice).
 */
import type { PoolGeometry } from "../average-pool/kernel.js";

/** y = max of each window; `argmax` holds the flat input index each output came from. */
export function maxPoolForward(x: Float64Array, g: PoolGeometry): { y: Float64Array; argmax: Int32Array } {
  const { planes, height, width, size, stride, outHeight, outWidth } = g;
  const y = new Float64Array(planes * outHeight * outWidth);
  const argmax = new Int32Array(y.length);
  for (let p = 0; p < planes; p++) {
    for (let oy = 0; oy < outHeight; oy++) {
      for (let ox = 0; ox < outWidth; ox++) {
        let best = -Infinity;
        let at = (p * height + oy * stride) * width + ox * stride;
        for (let ky = 0; ky < size; ky++) {
          const row = (p * height + oy * stride + ky) * width + ox * stride;
          for (let kx = 0; kx < size; kx++) {
            if (x[row + kx]! > best) {
              best = x[row + kx]!;
              at = row + kx;
            }
          }
        }
        const o = (p * outHeight + oy) * outWidth + ox;
        y[o] = x[at]!;
        argmax[o] = at;
      }
    }
  }
  return { y, argmax };
}

/** dx: each output's gradient added at the input element it came from. */
export function maxPoolBackward(dy: Float64Array, argmax: Int32Array, inputLength: number): Float64Array {
  const dx = new Float64Array(inputLength);
  for (let o = 0; o < dy.length; o++) dx[argmax[o]!] = dx[argmax[o]!]! + dy[o]!;
  return dx;
}
