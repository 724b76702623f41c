/**
 * Attention's query gradient sums δs_ij·k̃_j over keys, and two keys j ≠ j' pair through the weights W_v, W_k they
 * share: by (x̃_j·x̃_j')², whose mean is tr(Σ̃²) for the keys' input deviations x̃ (src/ops/attention/analytic.ts). A
 * wide layer of independent features gives D·E[x̃²]²; a layer that fills few directions (a wide ReLU layer lifted from a
 * narrow input, whose features covary) gives D·E[x̃²]²·(1 + (D − 1)·E[Cov²]/E[x̃²]²), the covariance carried as
 * `featureCovariance`. Checked against the float64 simulation (src/simulate) on an invented sequence model.
 *
 * The targets are far larger than the outputs (target scale 30), so that the loss gradient is independent of the
 * forward values, the assumption of these rules (as in attention-concentration.test.ts).
 */
import { describe, expect, it } from "vitest";
import { measuredDifferences } from "../helpers/simulated.js";

// An invented summariser of four wind readings per mast along a line of 16 masts: the 4 readings lifted to 64 features
// by a ReLU layer (so the 64 features span about 4 directions), one attention layer over the masts, a flatten and 8
// regression outputs.
const MASTS = `name: mast-summary
description: an invented summariser of wind along a line of masts
input: { features: 4, positions: 16, scale: 1 }
training:
  batch: 16
  loss: { kind: mean-squared-error, target-scale: 30 }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  activations: binary32
  weights: binary32
  gradients: binary32
layers:
  - { type: dense, name: lift, width: 64, init: he-normal }
  - relu
  - { type: attention, name: att, heads: 4, head-width: 16 }
  - flatten
  - { type: dense, name: out, width: 8 }
`;

/** the sweep's tolerance (test/magnitude/sweep.test.ts) */
const TOLERANCE = 0.4;

describe("attention: two keys pair through the directions their input fills", () => {
  // Before this rule, the median of 9 draws (measured against predicted): the query gradient +0.68 binade, the query
  // weight gradient +0.74, the key weight gradient +0.70 (the pairs counted at 1/D of D = 64 independent features);
  // after it +0.15, +0.21 and +0.17
  it("query gradient and the query and key weight gradients within 0.4 binade of the float64 simulation (median of 9 draws)", () => {
    const rows = measuredDifferences(MASTS, "mast-summary", /^att\//, 9);
    for (const id of ["att/activation-gradient:query", "att/activation-gradient:key", "att/weight-gradient:query", "att/weight-gradient:key"]) {
      const diff = rows.get(id);
      expect(diff, `${id} is compared`).toBeDefined();
      expect(Math.abs(diff!), `${id}: ${diff!.toFixed(2)} binades`).toBeLessThan(TOLERANCE);
    }
  });
});
