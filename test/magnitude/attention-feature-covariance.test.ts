/**
 * Two features of attention's output covary over the data (featureCovariance, src/ops/attention/analytic.ts): they are
 * W_o·W_v applied to the attention-averaged inputs, so they share their inputs as a dense layer's outputs do, and the
 * loss's curvature sums E[y yᵀ] with those covariances into the weight gradient of the dense layer above (the aligned
 * part, N²·E[y²]²·var_w·(1 + (n − 1)·covariance)·Σ_j M_ij², src/ops/dense/analytic.ts). Checked against the float64
 * simulation (src/simulate) on an invented sequence model.
 */
import { describe, expect, it } from "vitest";
import { measuredDifferences } from "../helpers/simulated.js";

// An invented tagger of stage cues along a script: 32 lines of 64 features, an RMS norm, one attention layer of 8 heads
// of width 8 and a dense head of 10 outputs per line, trained with squared error against targets of the outputs' scale
// (so that the loss's curvature keeps a large part of the gradient aligned with the forward values).
const CUES = `name: cue-tagger
description: an invented tagger of stage cues along a script
input: { features: 64, positions: 32, scale: 1 }
training:
  batch: 128
  loss: { kind: mean-squared-error, target-scale: 1 }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  activations: binary32
  weights: binary32
  gradients: binary32
layers:
  - { type: rms-norm, name: norm }
  - { type: attention, name: att, heads: 8, head-width: 8 }
  - { type: dense, name: head, width: 10 }
`;

/** the sweep's tolerance (test/magnitude/sweep.test.ts) */
const TOLERANCE = 0.4;

describe("attention's output features covary, which the dense layer above sums through the loss's curvature", () => {
  // Before this rule (the covariance dropped after attention), the median of 9 draws: the head's weight gradient +0.60
  // binade (measured against predicted); after it +0.11
  it("the head's weight gradient within 0.4 binade of the float64 simulation (median of 9 draws)", () => {
    const rows = measuredDifferences(CUES, "cue-tagger", /^head\/weight-gradient$/, 9);
    const diff = rows.get("head/weight-gradient");
    expect(diff, "head/weight-gradient is compared").toBeDefined();
    expect(Math.abs(diff!), `head/weight-gradient: ${diff!.toFixed(2)} binades`).toBeLessThan(TOLERANCE);
  });
});
