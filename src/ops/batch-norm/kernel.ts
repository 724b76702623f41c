/**
 * Float64 kernels of the batch-norm family in training mode: each channel is centred and scaled by the mean and
 * (biased) variance over the batch and every position of that channel, then multiplied by a gain and shifted by a
 * bias (Ioffe & Szegedy 2015, Algorithm 1). The tensor is viewed as [outer, channels, inner]: images are
 * [batch, channels, height·width]; feature rows are [batch·positions, features, 1].
 */

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
