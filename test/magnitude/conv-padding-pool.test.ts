import { describe, expect, it } from "vitest";
import { imageClassifier, measuredDifferences } from "../helpers/simulated.js";
import { buildGraph } from "../../src/graph/index.js";
import { paddingShares, tapCounts } from "../../src/ops/conv2d/analytic.js";
import { conv2dForward, conv2dGeometry } from "../../src/ops/conv2d/kernel.js";
import { parseSpec } from "../../src/spec/index.js";

// Zero padding and pooling between batch-normed convolutions. A padded convolution gives its border pixels fewer taps:
// its output's second moment is the share of taps inside times the unpadded rule's, and on an input of nonzero mean
// (a pool after a rectifier) each pixel keeps a batch mean of its own, of which the next batch norm removes only the
// channel's mean over batch and pixels. Backward, the border taps sum only a part of the gradient that the batch norm
// forces to zero over all pixels, so the sum over batch and pixels below them no longer vanishes. Checked against the
// project's float64 simulation (src/simulate: the network run forward and backward on random data, median of 5 draws);
// the figures in the comments are the differences before these rules.

// an invented kelp-frond camera: padded convolutions with batch norm and an overlapping max pool between them
const KELP = imageClassifier("kelp-camera", "channels: 3, height: 14, width: 14", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, bias: false }
  - { type: batch-norm, name: bn1 }
  - { type: relu, name: a1 }
  - { type: max-pool, name: p1, size: 3, stride: 2 }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: 1, bias: false }
  - { type: batch-norm, name: bn2 }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 6 }
`);

// an invented reed-bed survey: an average pool (its output's mean well above its spread) into a padded convolution and
// a batch norm, with no norm below
const REEDS = imageClassifier("reed-survey", "channels: 3, height: 16, width: 16", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, init: he-normal }
  - { type: relu, name: a1 }
  - { type: average-pool, name: p1, size: 4 }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: 1, bias: false }
  - { type: batch-norm, name: bn2 }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 4 }
`);

describe("zero padding between batch-normed convolutions", () => {
  it("the share of taps inside is what the float64 kernel sums of a ones image through a ones kernel", () => {
    const parsed = parseSpec(KELP, "kelp-camera.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const built = buildGraph(parsed.spec);
    if (!built.ok) throw new Error("graph");
    const c2 = built.graph.layers.find((l) => l.name === "c2")!;
    const taps = tapCounts(c2)!;
    // 6 × 6 pooled map, 3 × 3 kernel, one pixel of zeros around: each axis has 6·3 − 2 of 18 taps inside (counted)
    expect(paddingShares(taps).inside).toBeCloseTo((16 / 18) ** 2, 12);
    const g = conv2dGeometry(1, 1, 6, 6, 1, 3, 1, 1);
    const out = conv2dForward(new Float64Array(36).fill(1), new Float64Array(9).fill(1), null, g);
    const mean = out.reduce((a, b) => a + b, 0) / out.length / 9;
    expect(paddingShares(taps).inside).toBeCloseTo(mean, 12);
  });

  it("the gradients across the second batch norm and its convolution, and the first norm's bias (−0.30, −0.38, +2.59 before)", () => {
    const d = measuredDifferences(KELP, "kelp-camera", /^(c2\/activation-gradient|p1\/activation-gradient|bn1\/weight-gradient:bias)$/);
    expect(d.size).toBe(3);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.35);
  });

  it("after an average pool: the gradients below the batch norm and the first weights (−0.37, −0.53, −0.53 before)", () => {
    const d = measuredDifferences(REEDS, "reed-survey", /^(c2\/activation-gradient|p1\/activation-gradient|c1\/weight-gradient)$/);
    expect(d.size).toBe(3);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.35);
  });

  it("a padded convolution's weight gradient sums each tap over the pixels it reaches (−0.27 binade before, 3 × 3 images)", () => {
    // an invented seed-tray camera: 3 × 3 thermal tiles, one pixel of zeros around, so a border tap reaches 2 of 3 rows
    // or columns and the taps' mean count of terms is (7/9)² of the rule's batch × pixels
    const yaml = imageClassifier("seed-tray", "channels: 8, height: 3, width: 3", `
  - { type: conv2d, name: c1, channels: 16, kernel: 3, padding: 1 }
  - { type: tanh, name: a1 }
`, 64);
    const d = measuredDifferences(yaml, "seed-tray", /^c1\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.2);
  });
});
