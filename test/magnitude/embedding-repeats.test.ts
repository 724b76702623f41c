import { describe, expect, it } from "vitest";
import { measuredDifferences } from "../helpers/simulated.js";

// Two lookups of an embedding read the same row with probability 1/V (uniform token use), so two samples (or two
// positions) share q/V of the looked-up values, and the c(c − 1) pairs of one row's lookups share the loss's curvature
// through that row (M·x_r, E[c(c − 1)] = λ² for Poisson counts). With 512 lookups over 16 rows both were missing. Checked
// against the project's float64 simulation (src/simulate: the described network run forward and backward on random
// data, median of 5 draws); the figures are the differences before the rule.

describe("an embedding's repeated rows", () => {
  it("a small vocabulary's table and the bias gradients above it (0.58, 0.66 and 0.69 binade low before)", () => {
    // an invented tide-table reader: 8 tokens of a 16-word vocabulary per sample, 12 classes
    const yaml = `name: tide-tables
description: invented
input: { tokens: 8 }
training: { batch: 64, loss: { kind: cross-entropy, classes: 12 } }
precision: { activations: binary32, weights: binary32, gradients: binary32 }
layers:
  - { type: embedding, name: emb, vocabulary: 16, width: 48 }
  - { type: dense, name: mix, width: 64 }
  - { type: tanh, name: squash }
  - { type: dense, name: head, width: 12 }
`;
    const d = measuredDifferences(yaml, "tide-tables", /weight-gradient:(table|bias)$/, 5);
    expect([...d.keys()].sort()).toEqual(["emb/weight-gradient:table", "head/weight-gradient:bias", "mix/weight-gradient:bias"]);
    expect(Math.abs(d.get("emb/weight-gradient:table")!)).toBeLessThan(0.2);
    // (the part left, ~0.3, is the products x·δ of two lookups of one row, which share more than E[x x']·E[δ δ'])
    expect(Math.abs(d.get("mix/weight-gradient:bias")!)).toBeLessThan(0.4);
    expect(Math.abs(d.get("head/weight-gradient:bias")!)).toBeLessThan(0.4);
  });
});
