/**
 * Softmax probabilities at large logit variance: once one key takes nearly all of a row, the profile of the
 * probabilities must stay a distribution of numbers in [0, 1] (largest at most 1, a positive low quantile), at the start and at the end of
 * the horizon, where weight growth multiplies the logits' variance by a large factor.
 */
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { parseSpec } from "../../src/spec/index.js";

// Invented scenario: a glasshouse climate mixer over 32 sensor readings. Unscaled logits (scaling: none) give
// Var[s] = head width = 32 at the start (Vaswani et al. 2017, §3.2.1 footnote 4), and weight growth 4 multiplies the
// logits' rms by 4^4 at the end (query, key and the norm gain before them each grow), so exp(Var[s]) overflows
// binary64 there.
const YAML = `
name: glasshouse-mixer
input: { features: 16, positions: 32 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 5 }
  optimizer: { kind: adamw, learning-rate: 0.001, weight-decay: 0.01 }
  horizon: { steps: 1000, final-loss: 0.1, weight-growth: 4 }
precision:
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  master-weights: binary32
  scaling: none
layers:
  - { type: dense, width: 64 }
  - rms-norm
  - { type: attention, heads: 2, head-width: 32, scaling: none, subtract-max: true }
  - rms-norm
  - { type: attention, heads: 2, head-width: 32, causal: true, scaling: none, subtract-max: true }
  - rms-norm
  - { type: dense, width: 12 }
  - softmax
  - { type: dense, width: 5 }
`;

function answer() {
  const parsed = parseSpec(YAML, "glasshouse-mixer.yaml");
  if (!parsed.ok) throw new Error("the test spec does not parse");
  return check(parsed.spec);
}

// keys per row on average over the unmasked elements: 32 for full attention, (P + 1)/2 = 16.5 under a causal mask,
// 12 for the softmax over 12 features
const PROBABILITIES: Record<string, number> = {
  "attention-2/activation:probabilities": 32,
  "attention-4/activation:probabilities": 16.5,
  "softmax-7/activation": 12,
};

describe("softmax probabilities at large logit variance", () => {
  const result = answer();
  const tensors = result.tensors.filter((t) => t.id in PROBABILITIES);

  it("finds the three probability tensors of the spec", () => {
    expect(tensors.map((t) => t.id).sort()).toEqual(Object.keys(PROBABILITIES).sort());
  });

  for (const id of Object.keys(PROBABILITIES)) {
    for (const at of ["start", "end"] as const) {
      it(`${id} at the ${at}: a profile of numbers in [0, 1] with max ≥ rms and a positive low quantile`, () => {
        const t = tensors.find((x) => x.id === id)!;
        const profile = t[at];
        const stats = t.statistics[at];
        expect(profile.zeroFraction).toBeLessThan(1);
        // a nonnegative set's largest element is at least its rms (common practice: max² ≥ mean of squares)
        expect(profile.rms).toBeGreaterThan(0);
        expect(profile.maxElement).toBeGreaterThanOrEqual(profile.rms);
        expect(stats.max).toBeGreaterThanOrEqual(stats.rms);
        // probabilities never exceed 1 (softmax definition)
        expect(stats.max).toBeLessThanOrEqual(1);
        expect(stats.low).toBeGreaterThan(0);
        expect(stats.low).toBeLessThan(stats.rms);
      });
    }
  }

  it("the attention probabilities concentrate: the largest reaches 1, most fall far below 1/keys", () => {
    // logit std √32 ≈ 5.7 and more: one key takes nearly all of a row, the rest are tiny (common practice); a Monte
    // Carlo of 4,000 rows of 32 keys at Var[s] = 32 puts the median probability near 2^-17.3 (derived here)
    for (const id of ["attention-2/activation:probabilities", "attention-4/activation:probabilities"]) {
      const t = tensors.find((x) => x.id === id)!;
      const keys = PROBABILITIES[id] as number;
      for (const at of ["start", "end"] as const) {
        const profile = t[at];
        expect(t.statistics[at].max).toBe(1);
        expect(t.statistics[at].low).toBeLessThan(1 / (64 * keys));
        // median of the log-normal: log2 rms − s²·ln 2 (SCIENCE.md §4 in log2 units)
        const s = profile.elementLog2Spread ?? 0;
        expect(Math.log2(profile.rms) - s * s * Math.LN2).toBeLessThan(-Math.log2(keys) - 3);
      }
    }
  });

  it("the text prints no infinite footroom and every risk has a finite footroom", () => {
    const text = renderCheckText(result, { width: 200 });
    expect(text).not.toContain("-inf");
    for (const t of tensors) {
      for (const risk of t.risks) {
        expect(Number.isFinite(risk.start.footroom)).toBe(true);
        expect(Number.isFinite(risk.end.footroom)).toBe(true);
      }
    }
  });
});
