/**
 * Float64 kernels of the pool families (average-pool, max-pool): windows moved over planes of height × width
 * values, no padding (windows that would run past the edge are dropped, common practice). Images pool square
 * windows over their pixels; feature rows [positions, features] pool windows of positions (size × 1).
 * Max-pool sends each gradient to the first largest element of its window (common practice).
 */

/** The geometry of a pooling layer. */
export interface PoolGeometry {
  /** independent planes: batch × channels for images, batch for feature rows */
  planes: number;
  height: number;
  width: number;
  sizeY: number;
  sizeX: number;
  strideY: number;
  strideX: number;
  outHeight: number;
  outWidth: number;
}

/** Square windows over an image: output floor((n − size)/stride) + 1 on each side. */
export function poolGeometry(planes: number, height: number, width: number, size: number, stride: number): PoolGeometry {
  return windowGeometry(planes, height, width, size, size, stride, stride);
}

/** Windows of `size` positions over feature rows [positions, features], each feature pooled on its own. */
export function positionPoolGeometry(batch: number, positions: number, features: number, size: number, stride: number): PoolGeometry {
  return windowGeometry(batch, positions, features, size, 1, stride, 1);
}

function windowGeometry(planes: number, height: number, width: number, sizeY: number, sizeX: number, strideY: number, strideX: number): PoolGeometry {
  return {
    planes,
    height,
    width,
    sizeY,
    sizeX,
    strideY,
    strideX,
    outHeight: Math.floor((height - sizeY) / strideY) + 1,
    outWidth: Math.floor((width - sizeX) / strideX) + 1,
  };
}

/** y = mean of each window. */
export function averagePoolForward(x: Float64Array, g: PoolGeometry): Float64Array {
  const { planes, height, width, sizeY, sizeX, strideY, strideX, outHeight, outWidth } = g;
  const y = new Float64Array(planes * outHeight * outWidth);
  const scale = 1 / (sizeY * sizeX);
  for (let p = 0; p < planes; p++) {
    for (let oy = 0; oy < outHeight; oy++) {
      for (let ox = 0; ox < outWidth; ox++) {
        let s = 0;
        for (let ky = 0; ky < sizeY; ky++) {
          const row = (p * height + oy * strideY + ky) * width + ox * strideX;
          for (let kx = 0; kx < sizeX; kx++) s += x[row + kx]!;
        }
        y[(p * outHeight + oy) * outWidth + ox] = s * scale;
      }
    }
  }
  return y;
}

/** dx: each window's gradient shared equally among its elements (overlaps add). */
export function averagePoolBackward(dy: Float64Array, g: PoolGeometry): Float64Array {
  const { planes, height, width, sizeY, sizeX, strideY, strideX, outHeight, outWidth } = g;
  const dx = new Float64Array(planes * height * width);
  const scale = 1 / (sizeY * sizeX);
  for (let p = 0; p < planes; p++) {
    for (let oy = 0; oy < outHeight; oy++) {
      for (let ox = 0; ox < outWidth; ox++) {
        const d = dy[(p * outHeight + oy) * outWidth + ox]! * scale;
        for (let ky = 0; ky < sizeY; ky++) {
          const row = (p * height + oy * strideY + ky) * width + ox * strideX;
          for (let kx = 0; kx < sizeX; kx++) dx[row + kx] = dx[row + kx]! + d;
        }
      }
    }
  }
  return dx;
}

/** y = max of each window; `argmax` holds the flat input index each output came from. */
export function maxPoolForward(x: Float64Array, g: PoolGeometry): { y: Float64Array; argmax: Int32Array } {
  const { planes, height, width, sizeY, sizeX, strideY, strideX, outHeight, outWidth } = g;
  const y = new Float64Array(planes * outHeight * outWidth);
  const argmax = new Int32Array(y.length);
  for (let p = 0; p < planes; p++) {
    for (let oy = 0; oy < outHeight; oy++) {
      for (let ox = 0; ox < outWidth; ox++) {
        let at = (p * height + oy * strideY) * width + ox * strideX;
        let best = x[at]!;
        for (let ky = 0; ky < sizeY; ky++) {
          const row = (p * height + oy * strideY + ky) * width + ox * strideX;
          for (let kx = 0; kx < sizeX; kx++) {
            // NaN wins, so a NaN in a window propagates as it would on hardware comparing with max()
            if (x[row + kx]! > best || Number.isNaN(x[row + kx]!)) {
              best = x[row + kx]!;
              at = row + kx;
              if (Number.isNaN(best)) break;
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
