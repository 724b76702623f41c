/**
 * Float64 kernels of the conv2d family: channels-first images [batch, channels, height, width], weight
 * [outChannels, inChannels, k, k], by im2col (each output pixel's receptive field unrolled into a column) and a
 * matrix product, the usual lowering of a convolution to a product (Chellapilla, Puri & Simard 2006).
 */
import { matmul, matmulTransposeA, matmulTransposeB, type RoundFunction } from "../../numeric/matmul.js";

/** The geometry of one convolution. */
export interface Conv2dGeometry {
  batch: number;
  inChannels: number;
  height: number;
  width: number;
  outChannels: number;
  kernel: number;
  stride: number;
  /** zero rows added above and columns added to the left (the rest of the padding goes below/right) */
  padTop: number;
  padLeft: number;
  outHeight: number;
  outWidth: number;
}

/**
 * Resolve a padding rule into a geometry. "same" gives ceil(size/stride) outputs with the padding split as
 * evenly as possible, the extra pixel going below/right; "valid" pads nothing; a number pads that many pixels
 * on every side (common practice).
 */
export function conv2dGeometry(
  batch: number,
  inChannels: number,
  height: number,
  width: number,
  outChannels: number,
  kernel: number,
  stride: number,
  padding: "same" | "valid" | number,
): Conv2dGeometry {
  const side = (size: number): { out: number; before: number } => {
    if (padding === "same") {
      const out = Math.ceil(size / stride);
      const total = Math.max((out - 1) * stride + kernel - size, 0);
      return { out, before: Math.floor(total / 2) };
    }
    const pad = padding === "valid" ? 0 : padding;
    return { out: Math.floor((size + 2 * pad - kernel) / stride) + 1, before: pad };
  };
  const v = side(height);
  const h = side(width);
  return {
    batch,
    inChannels,
    height,
    width,
    outChannels,
    kernel,
    stride,
    padTop: v.before,
    padLeft: h.before,
    outHeight: v.out,
    outWidth: h.out,
  };
}

/** Unroll one image into columns: cols[(c·k + ky)·k + kx, oy·outWidth + ox]; padding reads as zero. */
function im2col(x: Float64Array, offset: number, g: Conv2dGeometry, cols: Float64Array): void {
  const { inChannels, height, width, kernel, stride, padTop, padLeft, outHeight, outWidth } = g;
  const pixels = outHeight * outWidth;
  for (let c = 0; c < inChannels; c++) {
    for (let ky = 0; ky < kernel; ky++) {
      for (let kx = 0; kx < kernel; kx++) {
        const row = ((c * kernel + ky) * kernel + kx) * pixels;
        for (let oy = 0; oy < outHeight; oy++) {
          const iy = oy * stride + ky - padTop;
          const dst = row + oy * outWidth;
          if (iy < 0 || iy >= height) {
            cols.fill(0, dst, dst + outWidth);
            continue;
          }
          const src = offset + (c * height + iy) * width;
          for (let ox = 0; ox < outWidth; ox++) {
            const ix = ox * stride + kx - padLeft;
            cols[dst + ox] = ix >= 0 && ix < width ? x[src + ix]! : 0;
          }
        }
      }
    }
  }
}

/** Fold columns back into an image, adding overlapping contributions (the adjoint of im2col). */
function col2im(cols: Float64Array, g: Conv2dGeometry, dx: Float64Array, offset: number): void {
  const { inChannels, height, width, kernel, stride, padTop, padLeft, outHeight, outWidth } = g;
  const pixels = outHeight * outWidth;
  for (let c = 0; c < inChannels; c++) {
    for (let ky = 0; ky < kernel; ky++) {
      for (let kx = 0; kx < kernel; kx++) {
        const row = ((c * kernel + ky) * kernel + kx) * pixels;
        for (let oy = 0; oy < outHeight; oy++) {
          const iy = oy * stride + ky - padTop;
          if (iy < 0 || iy >= height) continue;
          const dst = offset + (c * height + iy) * width;
          const src = row + oy * outWidth;
          for (let ox = 0; ox < outWidth; ox++) {
            const ix = ox * stride + kx - padLeft;
            if (ix >= 0 && ix < width) dx[dst + ix] = dx[dst + ix]! + cols[src + ox]!;
          }
        }
      }
    }
  }
}

/** y [batch, outChannels, outHeight, outWidth] = w ⋆ x + bias. */
export function conv2dForward(
  x: Float64Array,
  w: Float64Array,
  bias: Float64Array | null,
  g: Conv2dGeometry,
  accumulate?: RoundFunction,
): Float64Array {
  const patch = g.inChannels * g.kernel * g.kernel;
  const pixels = g.outHeight * g.outWidth;
  const cols = new Float64Array(patch * pixels);
  const y = new Float64Array(g.batch * g.outChannels * pixels);
  const inSize = g.inChannels * g.height * g.width;
  const outSize = g.outChannels * pixels;
  const yImage = new Float64Array(outSize);
  for (let n = 0; n < g.batch; n++) {
    im2col(x, n * inSize, g, cols);
    matmul(w, cols, yImage, g.outChannels, patch, pixels, false, accumulate);
    if (bias !== null) {
      for (let o = 0; o < g.outChannels; o++) {
        const b = bias[o]!;
        for (let p = 0; p < pixels; p++) {
          const i = o * pixels + p;
          yImage[i] = accumulate === undefined ? yImage[i]! + b : accumulate(yImage[i]! + b);
        }
      }
    }
    y.set(yImage, n * outSize);
  }
  return y;
}

/** Gradients of conv2d: dx (col2im of Wᵀ·dy), dW = Σ_images dy·colsᵀ, db = Σ over images and pixels of dy. */
export function conv2dBackward(
  x: Float64Array,
  w: Float64Array,
  dy: Float64Array,
  g: Conv2dGeometry,
  hasBias: boolean,
  accumulate?: RoundFunction,
): { dx: Float64Array; dw: Float64Array; db: Float64Array | null } {
  const patch = g.inChannels * g.kernel * g.kernel;
  const pixels = g.outHeight * g.outWidth;
  const inSize = g.inChannels * g.height * g.width;
  const outSize = g.outChannels * pixels;
  const cols = new Float64Array(patch * pixels);
  const dcols = new Float64Array(patch * pixels);
  const dx = new Float64Array(g.batch * inSize);
  const dw = new Float64Array(g.outChannels * patch);
  const db = hasBias ? new Float64Array(g.outChannels) : null;
  for (let n = 0; n < g.batch; n++) {
    const dyImage = dy.subarray(n * outSize, (n + 1) * outSize);
    im2col(x, n * inSize, g, cols);
    // dW += dy_image (outC×pixels) · colsᵀ (pixels×patch)
    matmulTransposeB(dyImage, cols, dw, g.outChannels, pixels, patch, true, accumulate);
    // dcols (patch×pixels) = Wᵀ (patch×outC) · dy_image (outC×pixels)
    matmulTransposeA(w, dyImage, dcols, patch, g.outChannels, pixels, false, accumulate);
    col2im(dcols, g, dx, n * inSize);
    if (db !== null) {
      for (let o = 0; o < g.outChannels; o++) {
        let s = db[o]!;
        for (let p = 0; p < pixels; p++) s = accumulate === undefined ? s + dyImage[o * pixels + p]! : accumulate(s + dyImage[o * pixels + p]!);
        db[o] = s;
      }
    }
  }
  return { dx, dw, db };
}
