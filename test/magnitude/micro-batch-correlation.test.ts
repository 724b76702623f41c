import { describe, expect, it } from "vitest";
import { betweenBatches, correlatedSum } from "../../src/ops/common.js";
import { measuredDifferences } from "../helpers/simulated.js";

// Two samples of one batch share a part of their gradient terms (a ReLU's positive mean passed on by the weights gives
// every sample's logits the same offset); two samples of two different micro-batches or workers share exactly as much,
// since they are drawn alike and meet the same weights. The combination of micro-batch sums counted them as
// independent: K micro-batches added that part K times instead of K² times.

describe("the part two micro-batches share", () => {
  it("counts the same pairs as one batch of all their samples (variance of a sum of correlated terms; common practice)", () => {
    // one batch of K·B samples against K batches of B: K·(one batch) + K(K − 1)·(between two), pair by pair
    const cases: [number, number, number, number, number][] = [
      [8, 1, 4, 0.2, 0.2],
      [4, 9, 3, 0.05, 0.02],
      [16, 4, 2, 0.3, 0.1],
    ];
    for (const [batch, positions, k, sample, cross] of cases) {
      const position = 0.4;
      const whole = correlatedSum(k * batch, positions, 1, sample, position, cross);
      const parts = k * correlatedSum(batch, positions, 1, sample, position, cross) + k * (k - 1) * betweenBatches(batch, positions, 1, sample, cross);
      expect(parts / whole).toBeCloseTo(1, 12);
    }
    // a batch norm's negative pair correlation stays inside its batch
    expect(betweenBatches(8, 4, 1, -0.01)).toBe(0);
  });

  it("a ReLU classifier over 4 accumulation steps and 2 summing workers (head bias 1.64, head weights 1.21, hidden bias 1.54 binades low before)", () => {
    // an invented loom-fault classifier; checked against the project's float64 simulation (src/simulate: the described
    // network run forward and backward on random data, median of 5 draws)
    const yaml = `name: loom-faults
description: invented
input: { features: 48 }
training: { batch: 128, accumulation-steps: 4, workers: 2, worker-gradients: sum, loss: { kind: cross-entropy, classes: 6 } }
precision: { activations: binary32, weights: binary32, gradients: binary32 }
layers:
  - { type: dense, name: lower, width: 96, init: he-normal }
  - { type: relu, name: gate }
  - { type: dense, name: head, width: 6 }
`;
    const d = measuredDifferences(yaml, "loom-faults", /weight-gradient/, 5);
    expect([...d.keys()].sort()).toEqual(["head/weight-gradient", "head/weight-gradient:bias", "lower/weight-gradient", "lower/weight-gradient:bias"]);
    for (const [id, difference] of d) expect(Math.abs(difference), `${id}: ${difference.toFixed(2)}`).toBeLessThan(0.35);
  });
});
