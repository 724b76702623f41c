import { f16round } from "@petamoriken/float16";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// What the check holds for the loss: the scaled loss summed, S·ΣL, in the accumulate format (README "Loss scale").
// The tensor, the loss-value hazard and the tables all judge that one value.

function spec(yaml: string, name: string): NetworkSpec {
  const parsed = parseSpec(yaml, name);
  if (!parsed.ok) throw new Error(`${name} does not load`);
  return parsed.spec;
}

// An invented scenario: a flood-gauge network classifying readings into 100 kinds, its loss summed over a huge batch
// and accumulated in binary16.
const SUMMED = spec(
  `name: gauge-sum
input: { features: 4096 }
training:
  batch: 65536
  loss: { kind: cross-entropy, classes: 100, reduction: sum }
  optimizer: { kind: adam, learning-rate: 1.0e-3 }
  horizon: { steps: 20000, final-loss: 0.5 }
precision: { name: half, activations: binary16, weights: binary16, gradients: binary16, optimizer-states: binary32, master-weights: binary32, accumulate: binary16 }
layers:
  - { type: dense, width: 1024, init: he-normal }
  - relu
  - { type: dense, width: 100 }
`,
  "gauge-sum.yaml",
);

describe("the loss is held as the scaled loss summed", () => {
  it("a summed loss that overflows binary16 unscaled fits once scaled by 2^-4, in the tensor and the hazard alike", () => {
    // the loss at initialisation: 65536 terms of about ln 100 (cross-entropy of a uniform guess over 100 classes)
    const summed = 65536 * Math.log(100);
    // binary16 rounds it to infinity unscaled, and keeps it finite times 2^-4 (@petamoriken/float16's f16round,
    // IEEE 754-2019 binary16: largest finite 65504)
    expect(f16round(summed)).toBe(Infinity);
    expect(Number.isFinite(f16round(summed * 2 ** -4))).toBe(true);
    for (const [scale, overflows] of [[1, true], [2 ** -4, false]] as const) {
      const result = check(SUMMED, { lossScale: scale });
      const loss = result.tensors.find((t) => t.role === "loss")!;
      expect(loss.statistics.factor).toBe(scale);
      // its rms is the predicted loss times the scale: within a binade of 65536·ln 100 times the scale at the start
      expect(Math.abs(Math.log2(loss.statistics.start.rms / (summed * scale)))).toBeLessThan(1);
      const risk = loss.risks.find((r) => r.format === "binary16")!;
      const tensorOverflows = risk.findings.some((f) => f.kind === "overflow");
      const hazard = result.hazards.find((h) => h.kind === "loss-value")!;
      const hazardOverflows = hazard.findings.some((f) => f.kind === "loss-value-overflow");
      expect(tensorOverflows).toBe(overflows);
      expect(hazardOverflows).toBe(overflows);
    }
  });
});

// An invented scenario: a seed-sorting rig classifying camera crops into 30000 seed lots, trained until the loss is
// tiny, so the wrong classes' probabilities, and so their logit gradients p_j, fall far below binary16's range.
const CONFIDENT = spec(
  `name: seed-lots
input: { features: 512 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 30000, reduction: sum }
  optimizer: { kind: adam, learning-rate: 1.0e-4 }
  horizon: { steps: 100000, final-loss: 0.0001, weight-growth: 3 }
precision: { name: half, activations: binary16, weights: binary16, gradients: binary16 }
layers:
  - { type: dense, width: 1024, init: he-normal }
  - relu
  - { type: dense, width: 30000, init: { kind: normal, std: 0.05 } }
`,
  "seed-lots.yaml",
);

// a seeded normal source of the test's own (xorshift32 and Box–Muller), apart from the project's
function normals(seed: number): () => number {
  let x = seed >>> 0 || 1;
  const uniform = () => {
    x ^= x << 13;
    x >>>= 0;
    x ^= x >>> 17;
    x ^= x << 5;
    x >>>= 0;
    return (x + 0.5) / 2 ** 32;
  };
  return () => Math.sqrt(-2 * Math.log(uniform())) * Math.cos(2 * Math.PI * uniform());
}

describe("the window beside a given scale", () => {
  it("a scale given by the caller or the plan keeps the window searched for it in the result (README, lossScale)", () => {
    const searched = check(SUMMED).lossScale;
    expect(searched.origin).toBe("recommended");
    const given = check(SUMMED, { lossScale: 1 }).lossScale;
    expect(given).toMatchObject({ value: 1, origin: "option" });
    // the same window the check searches when no scale is given, its pick the one headroom recommends
    expect(given.window).toEqual(searched.window);
    const planned = check({ ...SUMMED, precision: { ...SUMMED.precision, lossScale: 2 } }).lossScale;
    expect(planned).toMatchObject({ value: 2, origin: "plan" });
    expect(planned.window).toEqual(searched.window);
  });
});

describe("the loss's own logit gradient is judged by the share of its squared norm flushed", () => {
  it("a confident softmax's wrong-class gradients: most elements flush, a negligible share of the squared norm does", () => {
    // Outside the project: one row of wrong-class gradients p_j = (1 − p_y)·softmax(z)_j over 29999 classes, logits
    // spread over ~7 binades of probability (z ~ N(0, 4.7²), ln-spread 4.7 = 6.8 binades), 1 − p_y = 1e-4 (the loss
    // −ln p_y at 1e-4), times a loss scale 2^5, rounded to binary16 by @petamoriken/float16's f16round
    const draw = normals(20261203);
    const z = Array.from({ length: 29999 }, () => 4.7 * draw());
    const top = Math.max(...z);
    const e = z.map((v) => Math.exp(v - top));
    const sum = e.reduce((a, b) => a + b, 0);
    const g = e.map((v) => (1e-4 * 32 * v) / sum);
    const flushed = g.filter((v) => f16round(v) === 0);
    const countShare = flushed.length / g.length;
    const energyShare = flushed.reduce((a, v) => a + v * v, 0) / g.reduce((a, v) => a + v * v, 0);
    expect(countShare).toBeGreaterThan(0.1);
    expect(energyShare).toBeLessThan(1e-4);

    // the check sees the same regime, and judges it by the squared norm as README's thresholds say (1e-4, 1e-2)
    const result = check(CONFIDENT, { lossScale: 32 });
    const logits = result.tensors.find((t) => t.id === "dense-2/activation-gradient")!;
    const risk = logits.risks.find((r) => r.format === "binary16")!;
    expect(risk.worst.flushedFraction).toBeGreaterThan(0.1);
    expect(risk.worst.flushedEnergy).toBeLessThan(1e-4);
    expect(risk.findings.map((f) => f.kind)).not.toContain("flushed-values");
    expect(risk.findings.map((f) => f.kind)).not.toContain("gradient-energy-flushed");
    // its right-class elements, 1 − p_y, are still judged by their count: none of them flushes here
    const right = result.tensors.find((t) => t.id === "dense-2/activation-gradient:target-class")!;
    expect(right.risks[0]!.worst.flushedFraction).toBeLessThan(0.01);
  });

  it("the share of its squared norm flushed still decides: a loss scale of 2^-40 flushes it and fails", () => {
    const result = check(CONFIDENT, { lossScale: 2 ** -40 });
    const logits = result.tensors.find((t) => t.id === "dense-2/activation-gradient")!;
    const risk = logits.risks.find((r) => r.format === "binary16")!;
    // every wrong-class gradient times 2^-40 sits below binary16's smallest subnormal 2^-24 (IEEE 754-2019 §3.6)
    expect(f16round(logits.start.rms * 2 ** -40)).toBe(0);
    expect(risk.findings.find((f) => f.kind === "gradient-energy-flushed")?.severity).toBe("fails");
  });
});
