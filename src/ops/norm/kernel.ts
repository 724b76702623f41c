/**
 * Float64 kernels of the norm families.
 * layer-norm: each row of `width` features is centred and scaled to unit variance (biased variance, epsilon
 * inside the square root), then multiplied by a gain vector and shifted by a bias vector (Ba, Kiros & Hinton
 * 2016, eq. 4).
 * rms-norm: each row is divided by its root mean square (epsilon inside the square root) and multiplied by a
 * gain vector; no centring, no bias (Zhang & Sennrich 2019, eq. 4).
 * batch-norm (training mode): each channel is centred and scaled by the mean and (biased) variance over the batch
 * and every position of that channel, then multiplied by a gain and shifted by a bias (Ioffe & Szegedy 2015,
 * Algorithm 1). The tensor is viewed as [outer, channels, inner]: images are [batch, channels, height·width];
 * feature rows are [batch·positions, features, 1].
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


/** The layout of a batch-norm input. */
export interface BatchNormLayout {
  outer: number;
  channels: number;
  inner: number;
}

/** Forward: y = gain_c·(x − μ_c)/√(σ_c² + ε) + bias_c; also returns x̂ and 1/√(σ_c²+ε) per channel. */
export function batchNormForward(
  x: Float64Array,
  gain: Float64Array,
  bias: Float64Array,
  layout: BatchNormLayout,
  epsilon: number,
): { y: Float64Array; normalised: Float64Array; inverseStd: Float64Array } {
  const { outer, channels, inner } = layout;
  const count = outer * inner;
  const y = new Float64Array(x.length);
  const normalised = new Float64Array(x.length);
  const inverseStd = new Float64Array(channels);
  for (let c = 0; c < channels; c++) {
    let mean = 0;
    for (let n = 0; n < outer; n++) {
      const o = (n * channels + c) * inner;
      for (let i = 0; i < inner; i++) mean += x[o + i]!;
    }
    mean /= count;
    let variance = 0;
    for (let n = 0; n < outer; n++) {
      const o = (n * channels + c) * inner;
      for (let i = 0; i < inner; i++) variance += (x[o + i]! - mean) ** 2;
    }
    variance /= count;
    const inv = 1 / Math.sqrt(variance + epsilon);
    inverseStd[c] = inv;
    for (let n = 0; n < outer; n++) {
      const o = (n * channels + c) * inner;
      for (let i = 0; i < inner; i++) {
        const h = (x[o + i]! - mean) * inv;
        normalised[o + i] = h;
        y[o + i] = gain[c]! * h + bias[c]!;
      }
    }
  }
  return { y, normalised, inverseStd };
}

/** Backward (Ioffe & Szegedy 2015, §3): dx = (gain/σ)(dy − mean(dy) − x̂·mean(dy⊙x̂)) per channel. */
export function batchNormBackward(
  dy: Float64Array,
  normalised: Float64Array,
  inverseStd: Float64Array,
  gain: Float64Array,
  layout: BatchNormLayout,
): { dx: Float64Array; dgain: Float64Array; dbias: Float64Array } {
  const { outer, channels, inner } = layout;
  const count = outer * inner;
  const dx = new Float64Array(dy.length);
  const dgain = new Float64Array(channels);
  const dbias = new Float64Array(channels);
  for (let c = 0; c < channels; c++) {
    let sumDy = 0;
    let sumDyH = 0;
    for (let n = 0; n < outer; n++) {
      const o = (n * channels + c) * inner;
      for (let i = 0; i < inner; i++) {
        sumDy += dy[o + i]!;
        sumDyH += dy[o + i]! * normalised[o + i]!;
      }
    }
    dgain[c] = sumDyH;
    dbias[c] = sumDy;
    const meanDy = sumDy / count;
    const meanDyH = sumDyH / count;
    const scale = gain[c]! * inverseStd[c]!;
    for (let n = 0; n < outer; n++) {
      const o = (n * channels + c) * inner;
      for (let i = 0; i < inner; i++) dx[o + i] = scale * (dy[o + i]! - meanDy - normalised[o + i]! * meanDyH);
    }
  }
  return { dx, dgain, dbias };
}
