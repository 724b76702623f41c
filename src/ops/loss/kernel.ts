/**
 * Float64 kernels of the losses: softmax cross-entropy over class logits, and mean squared error. Each returns
 * the loss value and its gradient with respect to the network output.
 */

/**
 * Softmax cross-entropy of `rows` rows of `classes` logits against integer targets: loss = Σ_r −log p_r[t_r],
 * divided by `rows` for the mean. Gradient (p − onehot(t)) per row, divided by `rows` for the mean
 * (Goodfellow, Bengio & Courville 2016, §6.2.2.3). The log-sum-exp subtracts the row maximum (common practice).
 */
export function crossEntropy(
  logits: Float64Array,
  targets: ArrayLike<number>,
  rows: number,
  classes: number,
  reduction: "mean" | "sum",
): { loss: number; gradient: Float64Array } {
  const gradient = new Float64Array(rows * classes);
  const divide = reduction === "mean" ? rows : 1;
  let loss = 0;
  for (let r = 0; r < rows; r++) {
    const o = r * classes;
    let max = -Infinity;
    for (let j = 0; j < classes; j++) if (logits[o + j]! > max) max = logits[o + j]!;
    let sum = 0;
    for (let j = 0; j < classes; j++) sum += Math.exp(logits[o + j]! - max);
    const logSum = max + Math.log(sum);
    const t = targets[r]!;
    loss += logSum - logits[o + t]!;
    for (let j = 0; j < classes; j++) {
      const p = Math.exp(logits[o + j]! - logSum);
      gradient[o + j] = (j === t ? p - 1 : p) / divide;
    }
  }
  return { loss: loss / divide, gradient };
}

/** Mean squared error: loss = Σ (y − t)² (over every element), divided by the element count for the mean; gradient 2(y − t). */
export function meanSquaredError(
  prediction: Float64Array,
  target: Float64Array,
  reduction: "mean" | "sum",
): { loss: number; gradient: Float64Array } {
  const n = prediction.length;
  const divide = reduction === "mean" ? n : 1;
  const gradient = new Float64Array(n);
  let loss = 0;
  for (let i = 0; i < n; i++) {
    const d = prediction[i]! - target[i]!;
    loss += d * d;
    gradient[i] = (2 * d) / divide;
  }
  return { loss: loss / divide, gradient };
}
