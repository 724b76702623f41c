/**
 * Invented networks that several tests simulate, each test with its own names and the few settings its measurement
 * turns on. The text is YAML under {@link WIDE_PLAN} (every tensor in binary32), as a user would write it.
 */
import { WIDE_PLAN } from "./simulated.js";

/**
 * A word tagger: an embedding table of 2,000 words of width 64, `blocks` pre-norm encoder blocks (RMS norm, attention of
 * 2 heads × 32 with the query scaled; RMS norm, a SiLU-gated feed-forward of 172), a final RMS norm and a 40-tag dense
 * head, over 32 tokens, batch 8, mean cross-entropy. `tableStd` and `attentionOutputStd` are the embedding's and the
 * attention output's init stds (the other weights' are fixed: 0.06, the feed-forward's output 0.02).
 */
export function encoderTagger(o: { name: string; description: string; blocks: number; tableStd: number; attentionOutputStd: number }): string {
  return `name: ${o.name}
description: ${o.description}
input: { tokens: 32 }
training:
  batch: 8
  loss: { kind: cross-entropy, classes: 40, reduction: mean }
${WIDE_PLAN}blocks:
  enc:
    - type: residual
      name: attention-part
      branch:
        - { type: rms-norm, epsilon: 1.0e-6 }
        - { type: attention, heads: 2, head-width: 32, causal: false, scaling: query, init: { kind: normal, std: 0.06 }, output-init: { kind: normal, std: ${o.attentionOutputStd} } }
    - type: residual
      name: feed-forward-part
      branch:
        - { type: rms-norm, epsilon: 1.0e-6 }
        - { type: gated-feed-forward, hidden: 172, activation: silu, init: { kind: normal, std: 0.06 }, output-init: { kind: normal, std: 0.02 } }
layers:
  - { type: embedding, name: table, vocabulary: 2000, width: 64, init: { kind: normal, std: ${o.tableStd} } }
  - { type: repeat, name: encoder, times: ${o.blocks}, layers: [ { type: use, block: enc } ] }
  - { type: rms-norm, name: final-norm }
  - { type: dense, name: tagger, width: 40, bias: false, init: { kind: normal, std: 0.06 } }
`;
}

/**
 * A sorter of 512 sensor readings: a 12-layer He-initialised ReLU stack of width 256 (repeat `s`) under a Glorot dense
 * `head` of `outputs`, batch 128, trained with `loss` (a YAML flow mapping).
 */
export function reluStackSorter(o: { name: string; description: string; loss: string; outputs: number }): string {
  return `name: ${o.name}
description: ${o.description}
input: { features: 512 }
training: { batch: 128, loss: ${o.loss} }
${WIDE_PLAN}layers:
  - type: repeat
    name: s
    times: 12
    layers:
      - { type: dense, width: 256, init: he-normal }
      - relu
  - { type: dense, name: head, width: ${o.outputs}, init: glorot-normal }
`;
}
