/**
 * Each micro-batch's loss is divided by `accumulation-steps` before its backward pass, whatever `reduction` and
 * `worker-gradients` say (common practice: the accumulated gradient is the mean over the micro-batches), and
 * specs/README.md says so. The backward pass is linear in its seed (the chain rule), so dividing the loss by A divides
 * every gradient of one backward pass by A exactly: 16 steps give gradients 1/16 of one step's.
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { parseSpec } from "../../src/spec/index.js";

// an invented vibration classifier, summed everywhere (as the review's summed-workers), in binary32: no loss scale
const spec = (steps: number) => `
name: summed-everywhere
input: { features: 64, scale: 1.0 }
training:
  batch: 32
  loss: { kind: cross-entropy, classes: 10, reduction: sum }
  workers: 8
  worker-gradients: sum
  accumulation-steps: ${steps}
  optimizer: { kind: sgd, learning-rate: 1.0e-3 }
precision: { activations: binary32 }
layers:
  - { type: dense, name: fc1, width: 128, init: he-normal }
  - relu
  - { type: dense, name: cls, width: 10 }
`;

function gradientRms(steps: number, id: string): number {
  const parsed = parseSpec(spec(steps), "summed-everywhere.yaml");
  if (!parsed.ok) throw new Error("the spec does not load");
  const result = check(parsed.spec);
  expect(result.lossScale.value).toBe(1);
  const tensor = result.tensors.find((t) => t.id === id);
  if (tensor === undefined) throw new Error(`no tensor ${id}`);
  return tensor.start.rms;
}

describe("accumulation steps divide each micro-batch's loss, even with reduction: sum and worker-gradients: sum", () => {
  it("16 steps: every gradient of one backward pass is 1/16 of one step's", () => {
    for (const id of ["cls/activation-gradient", "fc1/activation-gradient"]) {
      expect(gradientRms(1, id) / gradientRms(16, id), id).toBeCloseTo(16, 9);
    }
  });

  it("specs/README.md says so where it defines the keys", () => {
    const readme = readFileSync(new URL("../../specs/README.md", import.meta.url), "utf8");
    const row = (key: string) => readme.split("\n").find((line) => line.startsWith(`| \`${key}\` |`)) ?? "";
    expect(row("accumulation-steps")).toMatch(/loss is divided by the accumulation steps/);
    expect(row("accumulation-steps")).toMatch(/whatever `reduction` and `worker-gradients` say/);
    expect(row("reduction")).toMatch(/within a micro-batch/);
  });
});
