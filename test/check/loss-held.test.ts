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
