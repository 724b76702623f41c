/**
 * The gated feed-forward product's position correlation (src/ops/gated-feed-forward/analytic.ts): each unit's gate and
 * up read the same input, so a pair of rows shares E[φ']²·q·Var(ĉ)/m₂ beyond the mean-field E[φ(g)φ(g')]·c·E[u²],
 * Var(ĉ) the scatter of the pair's realised input cosine. Two samples scatter by 1/D; two positions of one sequence
 * at correlation c by (1 − c²)²/D (the variance of a sample correlation, Fisher 1915). Taking 1/D at every c put the
 * rule, evaluated at the measured input correlation, 0.009–0.012 over the measured product correlation in this pre-norm
 * encoder (blocks 0–3, input correlation 0.62–0.91, 20 draws, standard error 0.003–0.006); the residual stream carries
 * it on to the next blocks, where it grows (block 2's product: 0.80 predicted before, 0.78 after, 0.765 ± 0.009
 * measured), and the deep blocks' query and key gradients, which scale with (1 − ρ)², came out too small. What is left
 * comes from the input correlation itself (block 2: 0.885 predicted, 0.874 ± 0.004 measured), which the residual sums
 * above set, not this rule. Each check is against the project's float64 simulation
 * (src/simulate): log2 of measured over predicted rms, median of 9 seeded draws, unrounded; the figures in the test's
 * name are before → after the rule.
 */
import { describe, expect, it } from "vitest";
import { encoderTagger } from "../helpers/invented-specs.js";
import { measuredDifferences } from "../helpers/simulated.js";

// an invented tagger of the words of orchard-log entries: four pre-norm encoder blocks, 32 words, 40 tags per word
const ORCHARD = encoderTagger({
  name: "orchard-log-tagger",
  description: "invented; a four-block pre-norm encoder tagging the words of invented orchard-log entries",
  blocks: 4,
  tableStd: 0.01,
  attentionOutputStd: 0.02,
});

describe("gated feed-forward: two positions' realised input cosine scatters by (1 − c²)²/D, not 1/D", () => {
  it("blocks 2–3: query activation gradient and query and key weight gradients within their tolerances (block 3 before +0.56, +0.62, +0.63; after +0.49, +0.55, +0.56)", () => {
    const rows = measuredDifferences(ORCHARD, "orchard-log-tagger", /attention-1\/(activation|weight)-gradient:(query|key)$/, 9);
    // block 3 is left 0.49–0.56 binade under-predicted: the residual stream feeding it is itself 0.01 over in position
    // correlation (the attention part's sum), which the gated rule does not set
    const limits: [string, number][] = [
      ["encoder.2.use-0.attention-part.attention-1/activation-gradient:query", 0.3],
      ["encoder.2.use-0.attention-part.attention-1/weight-gradient:query", 0.38],
      ["encoder.2.use-0.attention-part.attention-1/weight-gradient:key", 0.38],
      ["encoder.3.use-0.attention-part.attention-1/activation-gradient:query", 0.52],
      ["encoder.3.use-0.attention-part.attention-1/weight-gradient:query", 0.6],
      ["encoder.3.use-0.attention-part.attention-1/weight-gradient:key", 0.6],
    ];
    const found: string[] = [];
    for (const [id, limit] of limits) {
      const diff = rows.get(id);
      expect(diff, `${id} is compared`).toBeDefined();
      if (!(Math.abs(diff!) < limit)) found.push(`${id}: ${diff!.toFixed(2)} binades (limit ${limit})`);
    }
    expect(found).toEqual([]);
  });
});
