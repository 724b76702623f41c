import { describe, expect, it } from "vitest";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";

// A narrow dense head right after a norm. Over a batch of N samples its output's sum of squares has Var/E² = 2·D per
// unit, D = 1/N + (1 − 1/N)·E[c²] with c the samples' cosine at its input (moments of a Gaussian quadratic form), so
// the head needs the cosine the norm passes on. The norms did not pass it on, and the head took D = 1 (one sample's
// V = 2/width): its median draw sat e^(−1/2) below the mean at width 1, 0.7 binade low, the loss 1.2 binades low and
// every gradient below it 0.6 binade low. A layer norm's centring subtracts each sample's feature mean (the GELU's or
// ReLU's positive mean, most of the cosine), a batch norm each feature's batch mean, and an RMS norm leaves the cosine
// as it is. Each check is against the project's float64 simulation (src/simulate: the network run forward and
// backward on random data, median of 61 draws); the figures in the comments are the differences before the rule.

// an invented greenhouse-humidity regressor: one hidden layer, a norm, one output
const humidity = (norm: string, activation: string): string => `name: greenhouse-humidity
description: invented greenhouse-humidity regressor, a norm before a one-output head
input: { features: 64 }
training: { batch: 128, loss: { kind: mean-squared-error, target-scale: 0.3 } }
${WIDE_PLAN}layers:
  - { type: dense, width: 64, init: he-normal }
  - ${activation}
  - { type: ${norm}, name: tidy }
  - { type: dense, name: out, width: 1, init: lecun-normal }
`;

const ACTIVATIONS = /^(out\/pre-activation|loss\/loss|.*activation-gradient)$/;

function expectClose(d: Map<string, number>, weightGradients: number): void {
  for (const [id, value] of d) {
    const limit = id === "loss/loss" ? 0.2 : /weight-gradient/.test(id) ? weightGradients : 0.15;
    expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(limit);
  }
}

describe("a norm passes the samples' cosine on to the next dense layer", () => {
  it("layer norm after a GELU: the output (+0.71 binade before), the loss (+1.21), every activation and weight gradient (+0.43 to +0.62)", () => {
    const d = measuredDifferences(humidity("layer-norm", "gelu"), "greenhouse-humidity", /^(out\/pre-activation|loss\/loss|.*activation-gradient|.*weight-gradient)$/, 61);
    expect(d.size).toBe(8);
    expectClose(d, 0.25);
  });

  it("RMS norm after a GELU, which keeps the mean: the output (+0.66 before), the loss (+1.14), the activation gradients (+0.57 to +0.64)", () => {
    const d = measuredDifferences(humidity("rms-norm", "gelu"), "greenhouse-humidity", ACTIVATIONS, 61);
    expect(d.size).toBe(6);
    expectClose(d, 0);
  });

  it("batch norm over features after a ReLU: the output (+0.70 before), the loss (+1.20), the activation gradients (+0.58 to +0.63)", () => {
    const d = measuredDifferences(humidity("batch-norm", "relu"), "greenhouse-humidity", ACTIVATIONS, 61);
    expect(d.size).toBe(6);
    expectClose(d, 0);
  });
});
