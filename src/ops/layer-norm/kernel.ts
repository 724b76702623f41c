/**
 * Float64 kernels of the layer-norm family: each row of `width` features is centred and scaled to unit variance
 * (biased variance, epsilon inside the square root), then multiplied by a gain vector and shifted by a bias
 * vector (Ba, Kiros & Hinton 2016, eq. 4).
 */

/** Forward: y = gain ⊙ (x − μ)/√(σ² + ε) + bias per row; also returns the normalised rows and 1/√(σ²+ε). */
export function layerNormForward(
  x: Float64Array,
  gain: Float64Array,
  bias: Float64Array,
  rows: number,
  width: number,
  epsilon: number,
): { y: Float64Array; normalised: Float64Array; inverseStd: Float64Array } {
  const y = new Float64Array(rows * width);
  const normalised = new Float64Array(rows * width);
  const inverseStd = new Float64Array(rows);
  for (let r = 0; r < rows; r++) {
    const o = r * width;
    let mean = 0;
    for (let j = 0; j < width; j++) mean += x[o + j]!;
    mean /= width;
    let variance = 0;
    for (let j = 0; j < width; j++) variance += (x[o + j]! - mean) ** 2;
    variance /= width;
    const inv = 1 / Math.sqrt(variance + epsilon);
    inverseStd[r] = inv;
    for (let j = 0; j < width; j++) {
      const h = (x[o + j]! - mean) * inv;
      normalised[o + j] = h;
      y[o + j] = gain[j]! * h + bias[j]!;
    }
  }
  return { y, normalised, inverseStd };
}

/** Backward: dx = (1/σ)(ĝ − mean(ĝ) − x̂·mean(ĝ⊙x̂)) with ĝ = gain ⊙ dy; dgain = Σ dy⊙x̂, dbias = Σ dy. */
export function layerNormBackward(
  dy: Float64Array,
  normalised: Float64Array,
  inverseStd: Float64Array,
  gain: Float64Array,
  rows: number,
  width: number,
): { dx: Float64Array; dgain: Float64Array; dbias: Float64Array } {
  const dx = new Float64Array(rows * width);
  const dgain = new Float64Array(width);
  const dbias = new Float64Array(width);
  for (let r = 0; r < rows; r++) {
    const o = r * width;
    let meanG = 0;
    let meanGH = 0;
    for (let j = 0; j < width; j++) {
      const g = gain[j]! * dy[o + j]!;
      meanG += g;
      meanGH += g * normalised[o + j]!;
      dgain[j] = dgain[j]! + dy[o + j]! * normalised[o + j]!;
      dbias[j] = dbias[j]! + dy[o + j]!;
    }
    meanG /= width;
    meanGH /= width;
    const inv = inverseStd[r]!;
    for (let j = 0; j < width; j++) {
      dx[o + j] = inv * (gain[j]! * dy[o + j]! - meanG - normalised[o + j]! * meanGH);
    }
  }
  return { dx, dgain, dbias };
}
