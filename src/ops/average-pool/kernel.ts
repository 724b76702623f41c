/**
 * Float64 kernels of the average-pool family: channels-first images, square windows of `size` pixels moved by
 * `stride`, no padding (windows that would run past the edge are dropped, common practice).
 */

/** The geometry of a pooling layer. */
export interface PoolGeometry {
  /** batch × channels */
  planes: number;
  height: number;
  width: number;
  size: number;
  stride: number;
  outHeight: number;
  outWidth: number;
}

/** Output size floor((n − size)/stride) + 1 on each side. */
export function poolGeometry(planes: number, height: number, width: number, size: number, stride: number): PoolGeometry {
  return {
    planes,
    height,
    width,
    size,
    stride,
    outHeight: Math.floor((height - size) / stride) + 1,
    outWidth: Math.floor((width - size) / stride) + 1,
  };
}

/** y = mean of each window. */
export function averagePoolForward(x: Float64Array, g: PoolGeometry): Float64Array {
  const { planes, height, width, size, stride, outHeight, outWidth } = g;
  const y = new Float64Array(planes * outHeight * outWidth);
  const scale = 1 / (size * size);
  for (let p = 0; p < planes; p++) {
    for (let oy = 0; oy < outHeight; oy++) {
      for (let ox = 0; ox < outWidth; ox++) {
        let s = 0;
        for (let ky = 0; ky < size; ky++) {
          const row = (p * height + oy * stride + ky) * width + ox * stride;
          for (let kx = 0; kx < size; kx++) s += x[row + kx]!;
        }
        y[(p * outHeight + oy) * outWidth + ox] = s * scale;
      }
    }
  }
  return y;
}

/** dx: each window's gradient shared equally among its pixels (overlaps add). */
export function averagePoolBackward(dy: Float64Array, g: PoolGeometry): Float64Array {
  const { planes, height, width, size, stride, outHeight, outWidth } = g;
  const dx = new Float64Array(planes * height * width);
  const scale = 1 / (size * size);
  for (let p = 0; p < planes; p++) {
    for (let oy = 0; oy < outHeight; oy++) {
      for (let ox = 0; ox < outWidth; ox++) {
        const d = dy[(p * outHeight + oy) * outWidth + ox]! * scale;
        for (let ky = 0; ky < size; ky++) {
          const row = (p * height + oy * stride + ky) * width + ox * stride;
          for (let kx = 0; kx < size; kx++) dx[row + kx] = dx[row + kx]! + d;
        }
      }
    }
  }
  return dx;
}
