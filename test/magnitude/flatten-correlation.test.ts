import { describe, expect, it } from "vitest";
import { correlatedSum, meanPairCorrelation } from "../../src/ops/common.js";
import { measuredDifferences } from "../helpers/simulated.js";

describe("mean pairwise correlation of a batch × positions sum", () => {
  // the variance of a sum of N terms is N·q·(1 + (N − 1)·ρ̄), ρ̄ the mean over all ordered pairs (common practice):
  // counted here pair by pair over a batch × positions grid with three kinds of pair
  it("averages the three kinds of pair as a pair-by-pair count does", () => {
    const cases: [number, number, number, number, number][] = [
      [4, 9, 0.3, 0.6, 0.1],
      [16, 64, 0.02, 0, 0],
      [3, 1, 0.5, 0.2, 0.7],
      [1, 25, 0.4, 0.25, 0.9],
    ];
    for (const [batch, positions, sample, position, cross] of cases) {
      let sum = 0;
      for (let n = 0; n < batch; n++)
        for (let p = 0; p < positions; p++)
          for (let m = 0; m < batch; m++)
            for (let r = 0; r < positions; r++) {
              if (n === m && p === r) continue;
              sum += n === m ? position : p === r ? sample : cross;
            }
      const pairs = batch * positions * (batch * positions - 1);
      expect(meanPairCorrelation(batch, positions, sample, position, cross)).toBeCloseTo(sum / pairs, 12);
    }
    // unset, two samples at two positions share what two samples share (the rule before the third kind)
    expect(meanPairCorrelation(4, 9, 0.3, 0.6)).toBeCloseTo(meanPairCorrelation(4, 9, 0.3, 0.6, 0.3), 15);
    expect(correlatedSum(4, 9, 2, 0.3, 0.6, 0)).toBeCloseTo(36 * 2 * (1 + 35 * meanPairCorrelation(4, 9, 0.3, 0.6, 0)), 9);
  });
});

// An invented grader of kiln-fired tiles: 32×32 grey images, two convolutions, a flatten and a dense classifier. The
// gradient that reaches the convolutions comes through the flatten from independent dense weights, so two pixels share
// nothing (in one sample or across two) but one pixel across samples (mean-field independence of the weights,
// Schoenholz et al. 2017); a bias gradient, summed over batch × pixels, then grows as the square root of the terms. The
// float64 simulation (src/simulate) measures the sums; before this rule the prediction was 2–2.6 binades high.
const TILES = `name: tile-grader
description: an invented grader of kiln-fired tiles
input: { channels: 1, height: 32, width: 32, scale: 0.5 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 4 }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  name: wide
  activations: binary32
  weights: binary32
  gradients: binary32
layers:
  - { type: conv2d, name: c1, channels: 8, kernel: 3, padding: same, init: he-normal }
  - tanh
  - { type: max-pool, size: 2 }
  - { type: conv2d, name: c2, channels: 8, kernel: 3, padding: same, init: he-normal }
  - relu
  - flatten
  - { type: dense, name: grade, width: 4 }
`;

describe("a flatten's gradient, summed over the convolutions' pixels", () => {
  it("conv weight and bias gradients within 0.5 binade of the float64 simulation (median of 3 draws)", () => {
    const d = measuredDifferences(TILES, "tile-grader", /^c[12]\/weight-gradient(:bias)?$/, 3);
    expect([...d.keys()].sort()).toEqual(["c1/weight-gradient", "c1/weight-gradient:bias", "c2/weight-gradient", "c2/weight-gradient:bias"]);
    for (const [id, difference] of d) expect(Math.abs(difference), `${id}: ${difference.toFixed(2)} binades`).toBeLessThan(0.5);
  });
});
