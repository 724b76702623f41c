import { describe, expect, it } from "vitest";
import {
  attentionBackward,
  attentionForward,
  type AttentionConfig,
  type AttentionWeights,
} from "../../src/ops/attention/kernel.js";
import { softmaxForward } from "../../src/ops/activation/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

function setup(seed: number, cfg: AttentionConfig): { x: Float64Array; w: AttentionWeights; r: Float64Array } {
  const rnd = testRandom(seed);
  const inner = cfg.heads * cfg.headWidth;
  return {
    x: randomArray(rnd, cfg.batch * cfg.positions * cfg.width),
    w: {
      query: randomArray(rnd, inner * cfg.width, 0.5),
      key: randomArray(rnd, inner * cfg.width, 0.5),
      value: randomArray(rnd, inner * cfg.width, 0.5),
      output: randomArray(rnd, cfg.width * inner, 0.5),
    },
    r: randomArray(rnd, cfg.batch * cfg.positions * cfg.width),
  };
}

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("attention kernel", () => {
  it("one head matches softmax(q·kᵀ/√d)·v·Woᵀ written out directly (Vaswani et al. 2017, eq. 1)", () => {
    const cfg: AttentionConfig = { batch: 1, positions: 3, width: 2, heads: 1, headWidth: 2, causal: true, scaling: "logits", subtractMax: true };
    const { x, w } = setup(20, cfg);
    const proj = (m: Float64Array, i: number, o: number): number => x[i * 2]! * m[o * 2]! + x[i * 2 + 1]! * m[o * 2 + 1]!;
    const expected = new Float64Array(6);
    for (let i = 0; i < 3; i++) {
      const logits = new Float64Array(3);
      for (let j = 0; j < 3; j++) {
        logits[j] = (proj(w.query, i, 0) * proj(w.key, j, 0) + proj(w.query, i, 1) * proj(w.key, j, 1)) / Math.SQRT2;
      }
      const p = softmaxForward(logits, 1, 3, true, (_r, c) => c > i);
      const ctx = [0, 1].map((d) => p.reduce((s, pj, j) => s + pj * proj(w.value, j, d), 0));
      for (let o = 0; o < 2; o++) expected[i * 2 + o] = ctx[0]! * w.output[o * 2]! + ctx[1]! * w.output[o * 2 + 1]!;
    }
    const { y } = attentionForward(x, w, cfg);
    for (let i = 0; i < 6; i++) expect(y[i]).toBeCloseTo(expected[i]!, 12);
  });

  it("scaling on the query and on the logits give the same output", () => {
    const base: AttentionConfig = { batch: 2, positions: 4, width: 6, heads: 2, headWidth: 3, causal: false, scaling: "query", subtractMax: true };
    const { x, w } = setup(21, base);
    const a = attentionForward(x, w, base).y;
    const b = attentionForward(x, w, { ...base, scaling: "logits" }).y;
    for (let i = 0; i < a.length; i++) expect(a[i]).toBeCloseTo(b[i]!, 12);
  });

  it.each([
    { causal: true, scaling: "query" as const, subtractMax: true },
    { causal: false, scaling: "logits" as const, subtractMax: true },
    { causal: true, scaling: "none" as const, subtractMax: false },
    { causal: false, scaling: "query" as const, subtractMax: false },
  ])("backward matches central differences (causal $causal, scaling $scaling, subtract max $subtractMax)", (opts) => {
    const cfg: AttentionConfig = { batch: 2, positions: 4, width: 6, heads: 2, headWidth: 3, ...opts };
    const { x, w, r } = setup(22, cfg);
    const f = (): number => dot(attentionForward(x, w, cfg).y, r);
    const { saved } = attentionForward(x, w, cfg);
    const g = attentionBackward(r, w, saved, cfg);
    expect(gradientError(f, x, g.dx)).toBeLessThan(1e-6);
    expect(gradientError(f, w.query, g.dweights.query)).toBeLessThan(1e-6);
    expect(gradientError(f, w.key, g.dweights.key)).toBeLessThan(1e-6);
    expect(gradientError(f, w.value, g.dweights.value)).toBeLessThan(1e-6);
    expect(gradientError(f, w.output, g.dweights.output)).toBeLessThan(1e-6);
  });

  it("hands every intermediate tensor to the hook, in order", () => {
    const cfg: AttentionConfig = { batch: 1, positions: 2, width: 2, heads: 1, headWidth: 2, causal: true, scaling: "query", subtractMax: true };
    const { x, w, r } = setup(23, cfg);
    const seen: string[] = [];
    const { saved } = attentionForward(x, w, cfg, (name) => seen.push(name));
    attentionBackward(r, w, saved, cfg, (name) => seen.push(name));
    expect(seen).toEqual([
      "query", "key", "value", "logits", "probabilities", "context",
      "context-gradient", "probabilities-gradient", "value-gradient", "logits-gradient", "query-gradient", "key-gradient",
    ]);
  });
});
