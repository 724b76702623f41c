import { describe, expect, it } from "vitest";
import { reluStackSorter } from "../helpers/invented-specs.js";
import { measuredDifferences } from "../helpers/simulated.js";

// Under a squared-error loss the gradient is δ = k·(y − t) exactly, so the dense layer right below the head holds each
// sample's own Wᵀ·k·W·x, and two samples' such parts pair as one sample's does with itself, E[x_a·x_b] in place of
// E[x²] (Isserlis' theorem over W; own algebra). The rule was left out right below the loss, where the samples of a deep
// ReLU stack, whose outputs share 0.9 of their square, then shared too little of the gradient: the weight and bias
// gradients of the layers below the head, sums over the batch of terms that share it, came out low.
//
// Each check is against the project's float64 simulation (src/simulate: the described network run forward and backward
// on random data), 41 draws (seeds 1 …), log2(measured/predicted) of the median draw; a positive figure is a prediction
// below the measured. The draws are fixed, so the figures are too; a median of 41 draws at σ ≈ 0.5 of log2 rms is itself
// uncertain by about 1.2533·σ/√41 ≈ 0.1 binade (standard error of a sample median; common practice), and the layers share
// their draws. Before: the layer right below the head +0.13 (weights) and +0.07 (biases), the eleven layers' weights
// +0.056 on average; now +0.07, +0.00 and +0.02.

// an invented seed sorter: 512 sensor readings, a 12-layer ReLU stack of width 256 under a 16-output regression head
const SORTER = reluStackSorter({
  name: "seed-sorter",
  description: "invented seed sorter, a 12-layer He-initialised ReLU stack under a 16-output squared-error head",
  loss: "{ kind: mean-squared-error }",
  outputs: 16,
});

describe("two samples' own parts of the gradient right below a squared-error head", () => {
  it("the weight and bias gradients of the layer below the head (+0.13 and +0.07 binade before) and of layers 2 to 12", () => {
    const d = measuredDifferences(SORTER, "seed-sorter", /^s\.([1-9]|1[01])\.dense-0\/weight-gradient/, 41);
    expect(d.size).toBe(22);
    const top = "s.11.dense-0/weight-gradient";
    expect(Math.abs(d.get(top)!), `${top}: ${d.get(top)!.toFixed(3)}`).toBeLessThan(0.1);
    expect(Math.abs(d.get(`${top}:bias`)!), `${top}:bias: ${d.get(`${top}:bias`)!.toFixed(3)}`).toBeLessThan(0.05);
    const weights = [...d].filter(([id]) => id.endsWith("/weight-gradient")).map(([, v]) => v);
    expect(Math.abs(weights.reduce((a, b) => a + b, 0) / weights.length)).toBeLessThan(0.04);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(3)}`).toBeLessThan(0.1);
  }, 180_000);
});
