/**
 * Float64 kernels of the rms-norm family: each row of `width` features is divided by its root mean square
 * (epsilon inside the square root) and multiplied by a gain vector; no centring, no bias (Zhang & Sennrich 2019,
 * eq. 4).
 */

/** Forward: y = gain ⊙ x/√(mean(x²) + ε) per row; also returns x̂ and 1/rms per row. */
export function rmsNormForward(
  x: Float64Array,
  gain: Float64Array,
  rows: number,
  width: number,
  epsilon: number,
): { y: Float64Array; normalised: Float64Array; inverseRms: Float64Array } {
  const y = new Float64Array(rows * width);
  const normalised = new Float64Array(rows * width);
  const inverseRms = new Float64Array(rows);
  for (let r = 0; r < rows; r++) {
    const o = r * width;
    let meanSquare = 0;
    for (let j = 0; j < width; j++) meanSquare += x[o + j]! * x[o + j]!;
    meanSquare /= width;
    const inv = 1 / Math.sqrt(meanSquare + epsilon);
    inverseRms[r] = inv;
    for (let j = 0; j < width; j++) {
      const h = x[o + j]! * inv;
      normalised[o + j] = h;
      y[o + j] = gain[j]! * h;
    }
  }
  return { y, normalised, inverseRms };
}

/** Backward: dx = (1/rms)(ĝ − x̂·mean(ĝ⊙x̂)) with ĝ = gain ⊙ dy; dgain = Σ dy⊙x̂. */
export function rmsNormBackward(
  dy: Float64Array,
  normalised: Float64Array,
  inverseRms: Float64Array,
  gain: Float64Array,
  rows: number,
  width: number,
): { dx: Float64Array; dgain: Float64Array } {
  const dx = new Float64Array(rows * width);
  const dgain = new Float64Array(width);
  for (let r = 0; r < rows; r++) {
    const o = r * width;
    let meanGH = 0;
    for (let j = 0; j < width; j++) {
      meanGH += gain[j]! * dy[o + j]! * normalised[o + j]!;
      dgain[j] = dgain[j]! + dy[o + j]! * normalised[o + j]!;
    }
    meanGH /= width;
    const inv = inverseRms[r]!;
    for (let j = 0; j < width; j++) dx[o + j] = inv * (gain[j]! * dy[o + j]! - normalised[o + j]! * meanGH);
  }
  return { dx, dgain };
}
