/**
 * The loss's curvature at attention's input (src/ops/attention/analytic.ts, attentionPullback): at the start of training
 * the gradient at the layer's input holds A·x, A = E[∂δ_x/∂x] (Stein's lemma), which an RMS norm below sums into its
 * gain gradient in every micro-batch, Σ x̂_i·δ_i ≈ N·g·E[x̂²]·A_ii (src/ops/norm/analytic.ts). Attention hands down three
 * parts: the value path W_vᵀ·(K ∘ W_oᵀMW_o)·W_v (K = Σ_i p_ij² within a head, plus the query's tilt), and the query
 * and key paths, c²·dE[Σp²]/ds²·E[ṽ²]·E[k²]·tr M_h pulled back through W_q and W_k (the heat equation; own algebra).
 * Checked against the float64 simulation (src/simulate) on an invented sequence model, alone and as a pre-norm
 * residual block.
 *
 * Before this rule (attention set no curvature on its input), the median of 9 draws: the gain gradient 3.52 binades
 * above the prediction in the cue tagger, 3.40 in its causal variant with concentrated rows and 3.09 in its residual
 * variant; after it 0.17, 0.04 and 0.25 (the residual's
 * remainder is the skip's part α·M·x of the branch's gradient, which would need attention's mean Jacobian in the
 * residual rule). A float64 numpy copy of the cue tagger (5 draws, each path's part of the gain gradient apart) put
 * the value path at 2.55e-3 against 2.66e-3 by this rule, the query and key paths at 1.75e-3 against 1.5e-3 each.
 */
import { describe, expect, it } from "vitest";
import { measuredDifferences } from "../helpers/simulated.js";

// An invented tagger of stage cues along a script: 32 lines of 64 features, an RMS norm, one attention layer of 8 heads
// of width 8 and a dense head of 10 outputs per line, trained with squared error against targets of the outputs' scale.
const cues = (name: string, layers: string): string => `name: ${name}
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
${layers}  - { type: dense, name: head, width: 10 }
`;

const PLAIN = `  - { type: rms-norm, name: norm }
  - { type: attention, name: att, heads: 8, head-width: 8 }
`;
// causal, unscaled logits of variance 16: concentrated rows, where the logit paths' dE[Σp²]/ds² is small
const CAUSAL = `  - { type: rms-norm, name: norm }
  - { type: attention, name: att, heads: 4, head-width: 16, causal: true, scaling: none }
`;
const RESIDUAL = `  - { type: residual, name: blk, branch: [{ type: rms-norm, name: norm }, { type: attention, name: att, heads: 8, head-width: 8 }] }
`;

const TOLERANCE = 0.35;

describe("attention hands the loss's curvature down to its input, which an RMS norm's gain gradient sums", () => {
  for (const [name, layers, id] of [
    ["cue-tagger", PLAIN, "norm/weight-gradient:gain"],
    ["cue-tagger-causal", CAUSAL, "norm/weight-gradient:gain"],
    ["cue-tagger-residual", RESIDUAL, "blk.norm/weight-gradient:gain"],
  ] as const) {
    it(`${name}: the gain gradient within ${TOLERANCE} binade of the float64 simulation (median of 9 draws)`, () => {
      const rows = measuredDifferences(cues(name, layers), name, /weight-gradient:gain$/, 9);
      const diff = rows.get(id);
      expect(diff, `${id} is compared`).toBeDefined();
      expect(Math.abs(diff!), `${id}: ${diff!.toFixed(2)} binades`).toBeLessThan(TOLERANCE);
    });
  }
});
