// One stored array, one per-tensor scale: the cross-entropy gradient's right-class elements (`:target-class`) are told
// apart from the others by the prediction, but an 8-bit conversion with per-tensor scaling scales the whole array by
// one factor set from its largest elements (the common per-tensor rule, 2^⌊log2(max finite / amax)⌋: Micikevicius et
// al. 2022, "FP8 Formats for Deep Learning", §4.3 — from memory as to the section). Each part used to get its own scale,
// which lifted the small wrong-class elements 2^7 above where the array's scale puts them.
import { describe, expect, it } from "vitest";
import { check } from "../../src/index.js";
import { predict } from "../../src/magnitude/index.js";
import { simulate } from "../../src/simulate/index.js";
import { parseSpec } from "../../src/spec/index.js";

// an invented classifier of 40,000 seed varieties: small logits, so the wrong-class gradients p_j / B sit far below the
// right-class ones (1 − p_y) / B; gradients in e4m3 with a per-tensor scale
const SPEC = `name: seed-sorter
description: invented
input: { features: 64 }
training: { batch: 16, loss: { kind: cross-entropy, classes: 40000 } }
precision: { activations: binary32, weights: binary32, gradients: e4m3, scaling: tensor }
layers:
  - { type: dense, name: embed, width: 64, init: he-normal }
  - relu
  - { type: dense, name: varieties, width: 40000, init: { kind: normal, std: 0.01 } }
`;
const parsed = parseSpec(SPEC, "seed-sorter.yaml");
if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
const spec = parsed.spec;
const WHOLE = "varieties/activation-gradient";
const PART = "varieties/activation-gradient:target-class";
// e4m3's largest finite value (OCP 8-bit floating point specification v1.0, Table 1)
const E4M3_MAX = 448;

describe("the parts of one stored array share its per-tensor scale", () => {
  const result = check(spec);
  const whole = result.tensors.find((t) => t.id === WHOLE)!;
  const part = result.tensors.find((t) => t.id === PART)!;
  const wholeRisk = whole.risks.find((r) => r.format === "e4m3")!;
  const partRisk = part.risks.find((r) => r.format === "e4m3")!;

  it("marks the right-class elements as part of the gradient's array", () => {
    expect(part.partOf).toBe(WHOLE);
    expect(whole.partOf).toBeUndefined();
  });

  it("scales both parts by the factor the larger max sets", () => {
    const arrayMax = Math.max(whole.statistics.start.max, part.statistics.start.max);
    expect(whole.statistics.arrayMax?.start).toBe(arrayMax);
    expect(wholeRisk.scaleLog2.start).toBe(Math.floor(Math.log2(E4M3_MAX / arrayMax)));
    expect(partRisk.scaleLog2.start).toBe(wholeRisk.scaleLog2.start);
    // the wrong-class part alone would have been scaled far higher
    expect(Math.floor(Math.log2(E4M3_MAX / whole.statistics.start.max))).toBeGreaterThan(wholeRisk.scaleLog2.start + 4);
  });

  it("predicts the wrong-class elements' subnormal and flushed shares the rounded simulation measures", () => {
    const report = simulate(spec, { draws: 3, seed: 1, round: true, predict, lossScale: 1 });
    const measured = report.result.tensors.find((t) => t.id === WHOLE)!.median.counts;
    // at this scale most wrong-class elements are e4m3 subnormals: the judgement says so, as the rounding does
    expect(measured.subnormal).toBeGreaterThan(0.5);
    expect(wholeRisk.start.subnormalFraction).toBeGreaterThan(0.5);
    expect(Math.abs(wholeRisk.start.subnormalFraction - measured.subnormal)).toBeLessThan(0.05);
    expect(Math.abs(wholeRisk.start.flushedFraction - measured.flushed)).toBeLessThan(0.02);
  });
});
