import { describe, expect, it } from "vitest";
import { encoderTagger } from "../helpers/invented-specs.js";
import { measuredDifferences } from "../helpers/simulated.js";

// The cross-entropy gradient of two positions of one sequence, p_t − y_t and p_s − y_s with labels drawn apart, share
// E[p_t·p_s] − 1/C² per class (derived: the same pair moment as two samples', at the logits' position correlation).
// After attention the positions of one sequence share much of their features (the tagger's input here: 0.75 between
// two positions, 0.03 between two sequences, measured), so the gradient's position correlation (q_z·ρ/C to first
// order, about 0.004 at these sizes) is 20–30 times the samples' and makes the weight-gradient sums over positions
// partly coherent: N·q·(1 + (N − 1)·ρ̄) (variance of a sum of correlated terms, common practice). The seed took the
// samples' correlation for the positions' as well, and every weight gradient below read the smaller one.
// Each check is against the project's float64 simulation (src/simulate): log2 of measured over predicted rms of the
// median of 15 seeded draws, unrounded. The figures in the names are before → after this rule; the query and key
// gradients, low by a further 0.3 binade from the attention's own rule, are left out.

// an invented tagger of field notes: two pre-norm encoder blocks, 32 words, 40 tags per word
const NOTES = encoderTagger({
  name: "field-note-tagger",
  description: "invented; a two-block pre-norm encoder tagging the words of invented field notes",
  blocks: 2,
  tableStd: 0.01,
  attentionOutputStd: 0.02,
});

describe("the loss gradient's correlation between positions of one sequence", { timeout: 180_000 }, () => {
  const rows = measuredDifferences(NOTES, "field-note-tagger", /gradient/, 15);
  const within = (id: string, limit: number): void => {
    const d = rows.get(id);
    expect(d, id).toBeDefined();
    expect(Math.abs(d!), id).toBeLessThan(limit);
  };
  it("leaves the loss gradient's own size as it was (within 0.03 binade)", () => {
    within("tagger/activation-gradient", 0.03);
  });
  it("gives the tagger's weight gradient, a sum over positions of its input × the loss gradient (+0.095 → +0.020)", () => {
    within("tagger/weight-gradient", 0.06);
  });
  it("carries it down to the attention's value weight gradients (+0.121, +0.126 → +0.039, +0.035)", () => {
    within("encoder.0.use-0.attention-part.attention-1/weight-gradient:value", 0.08);
    within("encoder.1.use-0.attention-part.attention-1/weight-gradient:value", 0.08);
  });
  it("and to the embedding table's gradient (+0.134 → +0.063)", () => {
    within("table/weight-gradient:table", 0.1);
  });
});
