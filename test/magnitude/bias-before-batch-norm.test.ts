/**
 * A bias in front of a batch norm: the norm subtracts each channel's mean over the batch (and pixels), so the bias has
 * no effect on the output and its gradient is exactly zero (Ioffe & Szegedy 2015, §3: the bias "can be ignored since
 * its effect will be canceled by the subsequent mean subtraction"; from memory). The prediction carries that zero as a
 * sum whose pair correlations cancel it; the rounding of those correlations must not leave a tiny gradient that is then
 * judged (or refused as shrinking below what binary64 carries).
 */
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// invented: a small classifier of 64×64 images, three conv + batch norm + ReLU stages (convolutions with biases)
function vision(bias: boolean, finalLoss: number): NetworkSpec {
  const conv = (channels: number) => `  - { type: conv2d, channels: ${channels}, kernel: 3, init: he-normal, bias: ${bias} }`;
  const text = [
    "name: pond-survey",
    "input: { channels: 3, height: 64, width: 64, scale: 1 }",
    "training:",
    "  batch: 64",
    "  loss: { kind: cross-entropy, classes: 20 }",
    "  optimizer: { kind: momentum, learning-rate: 0.1, momentum: 0.9, weight-decay: 0.0005 }",
    `  horizon: { steps: 20000, final-loss: ${finalLoss} }`,
    "precision: { activations: binary16 }",
    "layers:",
    conv(32),
    "  - batch-norm",
    "  - relu",
    "  - { type: max-pool, size: 2 }",
    conv(64),
    "  - batch-norm",
    "  - relu",
    "  - { type: max-pool, size: 2 }",
    conv(128),
    "  - batch-norm",
    "  - relu",
    "  - { type: average-pool, size: 16 }",
    "  - flatten",
    "  - { type: dense, width: 20 }",
  ].join("\n");
  const parsed = parseSpec(text, "pond-survey.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

describe("a convolution's bias in front of batch norm", () => {
  it("has a gradient of exactly 0 at the start and the end of the horizon, in every stage", () => {
    const spec = vision(true, 1);
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("does not build");
    const biases = predict(built.graph, spec).tensors.filter((t) => /^conv2d-\d+\/weight-gradient:bias$/.test(t.id));
    expect(biases).toHaveLength(3);
    for (const t of biases) expect([t.id, t.start.rms, t.end.rms]).toEqual([t.id, 0, 0]);
  });

  it("checks without an input error at a low final loss, and the loss-scale window is the one without the biases", () => {
    // the residue of the cancelled sum shrank past 2^-255 at the end of the horizon and the check refused the spec
    const withBias = check(vision(true, 0.3));
    const without = check(vision(false, 0.3));
    expect(withBias.lossScaleAnswer?.window).toMatchObject({
      lowestLog2: without.lossScaleAnswer?.window.lowestLog2,
      highestLog2: without.lossScaleAnswer?.window.highestLog2,
    });
    expect(withBias.formats.flatMap((f) => f.findings).some((f) => /conv2d-\d+\/weight-gradient:bias/.test(f.subject))).toBe(false);
  });
});
