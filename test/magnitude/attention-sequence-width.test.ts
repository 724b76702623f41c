/**
 * Attention's query gradient sums δs_ij·k̃_j over the keys of one sequence, and two keys j ≠ j' pair through
 * (x̃_j·x̃_j')², whose mean is tr(Σ_s²) for Σ_s the covariance of the deviations within that sequence (src/ops/attention/
 * analytic.ts). In a pre-norm encoder the positions of a sequence come to share much of their features, and each gated
 * feed-forward layer then scales its units by gains that sequence's shared part sets (φ at the unit's own mean), a map
 * of the deviations of its own in every sequence: within one sequence the deviations fill fewer directions than pooled
 * over sequences (tagger of 128 features, six blocks: 99.5, 86, 76, 67.5 and 63 effective features at blocks 1–5 within
 * a sequence, 112–115 pooled, measured), and the query and key gradients grew too large for the 1/D the rule took. The
 * rules of src/ops/sequence-excess.ts carry it (Wishart moments and the gated product's first order; own algebra).
 * Each check is against the project's float64 simulation (src/simulate): log2 of measured over predicted rms of the
 * median of 9 seeded draws, unrounded. The figures in the test's name are before → after these rules.
 */
import { describe, expect, it } from "vitest";
import { encoderTagger } from "../helpers/invented-specs.js";
import { measuredDifferences } from "../helpers/simulated.js";

// an invented tagger of trail-survey notes: four pre-norm encoder blocks, 32 words, 40 tags per word
const SURVEY = encoderTagger({
  name: "trail-survey-tagger",
  description: "invented; a four-block pre-norm encoder tagging the words of invented trail-survey notes",
  blocks: 4,
  tableStd: 0.014,
  attentionOutputStd: 0.014,
});

/** the blocks' query, query-weight and key-weight gradients outside `tolerance` binade of the simulation */
function outside(yaml: string, name: string, tolerance: number): string[] {
  const rows = measuredDifferences(yaml, name, /attention-1\//, 9);
  const found: string[] = [];
  for (const block of [1, 2, 3]) {
    const layer = `encoder.${block}.use-0.attention-part.attention-1`;
    for (const id of [`${layer}/activation-gradient:query`, `${layer}/weight-gradient:query`, `${layer}/weight-gradient:key`]) {
      const diff = rows.get(id);
      expect(diff, `${id} is compared`).toBeDefined();
      if (!(Math.abs(diff!) < tolerance)) found.push(`${id}: ${diff!.toFixed(2)} binades`);
    }
  }
  return found;
}

describe("attention: two keys of one sequence pair through the directions that sequence's deviations fill", () => {
  // tighter than the sweep's 0.4 (test/magnitude/sweep.test.ts): the rule moved these by 0.15–0.22 binade
  it("blocks 1–3: query gradient and the query and key weight gradients within 0.35 binade (before: up to +0.48, +0.45, +0.51 at block 3; after +0.26, +0.23, +0.29)", () => {
    expect(outside(SURVEY, "trail-survey-tagger", 0.35)).toEqual([]);
  });

  // the same encoder under a causal mask keeps the width pooled over sequences (src/ops/attention/analytic.ts): with the
  // sequence's own these came out up to 0.24 binade high (the query weight gradient of block 1: −0.24); with the pooled
  // one they are within 0.11
  it("under a causal mask (the pooled width): blocks 1–3 within 0.2 binade", () => {
    expect(outside(SURVEY.replace("causal: false", "causal: true"), "trail-survey-tagger", 0.2)).toEqual([]);
  });
});
