/**
 * Attention's average leans toward the query (src/ops/attention/analytic.ts, rowTiltExcess): a row's logits read the
 * keys' input along one direction a = Aᵀx_i, so the softmax-weighted mean of the keys' inputs keeps
 * τ = E[(Σ_j p_j z_j)²]/s² of the input's second moment along a (gaussianSoftmaxRows) instead of Σ_j p_j², and the
 * heads, the layer's output and the value, key and output weight gradients grow by (τ − Σp²)/D over Σp² of an input of
 * width D. Checked against the float64 simulation (src/simulate) on invented sequence models with ordinary 1/√d
 * scaling, where rows are spread (Var[s] = 1) and the effect is largest for a narrow input and long rows.
 *
 * The targets are far larger than the outputs (target scale 30), so that the loss gradient is independent of the
 * forward values, the assumption of these rules (as in test/magnitude/theory.test.ts); the loss's curvature is another
 * matter (test/magnitude/loss-curvature.test.ts).
 *
 * Before this rule, the median of 5 draws: heads 1.44 / 0.53 / 0.63 binade above the prediction (128 positions full,
 * 128 causal, 32 full), the output projection's weight gradient 1.15 / 0.46 / 0.96, the value's 1.13 / 0.29 / 0.67,
 * the key's 1.27 / 0.52 / 0.80; after it, all within 0.35.
 */
import { describe, expect, it } from "vitest";
import { measuredDifferences } from "../helpers/simulated.js";

// An invented reader of tide gauges: 8 readings per time step along 128 (or 32) steps, one attention layer of 2 heads
// of width 16 with the query scaled by 1/√16, and a regression head of 4 outputs.
const gauges = (name: string, positions: number, causal: boolean): string => `name: ${name}
description: an invented reader of tide gauges along a sequence of time steps
input: { features: 8, positions: ${positions} }
training:
  batch: 8
  loss: { kind: mean-squared-error, target-scale: 30 }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  activations: binary32
  weights: binary32
  gradients: binary32
layers:
  - { type: attention, name: att, heads: 2, head-width: 16, causal: ${causal}, scaling: query, subtract-max: true }
  - { type: dense, name: head, width: 4 }
`;

const IDS = ["att/activation:heads", "att/activation", "att/weight-gradient:value", "att/weight-gradient:key", "att/weight-gradient:output", "head/weight-gradient"];
/** the sweep's tolerance (test/magnitude/sweep.test.ts) */
const TOLERANCE = 0.4;

describe("attention's average keeps more of the input along the query's direction (the tilt)", () => {
  for (const [name, positions, causal] of [
    ["gauges-128", 128, false],
    ["gauges-128-causal", 128, true],
    ["gauges-32", 32, false],
  ] as const) {
    it(`${name}: heads, output and the value, key, output and head weight gradients within ${TOLERANCE} binade of the float64 simulation (median of 5 draws)`, () => {
      const rows = measuredDifferences(gauges(name, positions, causal), name, /^(att|head)\//, 5);
      for (const id of IDS) {
        const diff = rows.get(id);
        expect(diff, `${id} is compared`).toBeDefined();
        expect(Math.abs(diff!), `${id}: ${diff!.toFixed(2)} binades`).toBeLessThan(TOLERANCE);
      }
    });
  }
});
