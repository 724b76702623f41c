import { describe, expect, it } from "vitest";
import { imageClassifier, measuredDifferences } from "../helpers/simulated.js";

// An overlapping max pool (size 3, stride 2) routes two neighbouring windows' gradients to one pixel when the maximum
// of their union lies in their overlap (for independent inputs, with chance overlap/union): that pixel gets g + g', and
// the summed squares gain 2·E[g·g'] per such pair. Routing to distinct pixels alone kept only Σ g². Checked against the
// project's float64 simulation (src/simulate, median of 5 draws): the step across the pool, the difference at its
// input less the one at its output, was 0.67 binade before.

// an invented lichen-edge detector: valid convolutions (no padding, no norm) around an overlapping max pool
const LICHEN = imageClassifier("lichen-edges", "channels: 3, height: 17, width: 17", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, padding: valid, init: he-normal }
  - { type: relu, name: a1 }
  - { type: max-pool, name: p1, size: 3, stride: 2 }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: valid, init: he-normal }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 5 }
`);

describe("an overlapping max pool's backward", () => {
  it("the gradient's step across the pool (0.67 binade before; 0.28 while the gradient was taken to reach one pixel per window)", () => {
    const d = measuredDifferences(LICHEN, "lichen-edges", /^(a1|p1)\/activation-gradient$/);
    expect(d.size).toBe(2);
    const step = d.get("a1/activation-gradient")! - d.get("p1/activation-gradient")!;
    // a pixel picked twice is one nonzero element (max-pool-reach.test.ts); what is left: the rule pairs windows by the
    // gradient's mean correlation over all pixel pairs, which neighbours exceed
    expect(Math.abs(step), `step ${step.toFixed(2)}`).toBeLessThan(0.15);
  });

  it("forward, overlapping windows' maxima co-vary: the next convolution's weight gradient (measured 1.16 binades above the prediction before)", () => {
    // an invented heron-nest camera: a size-3 stride-1 max pool (neighbouring windows share 6 of 9 pixels, so their
    // maxima correlate ~0.6 beyond the mean) into a padded convolution, whose weight gradient pairs those pixels with the
    // gradient's own position correlation
    const yaml = imageClassifier("heron-nest", "channels: 3, height: 14, width: 14", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, bias: false }
  - { type: batch-norm, name: bn1 }
  - { type: relu, name: a1 }
  - { type: max-pool, name: p1, size: 3, stride: 1 }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: 1, bias: false }
  - { type: batch-norm, name: bn2 }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 12 }
`);
    const d = measuredDifferences(yaml, "heron-nest", /^c2\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.5);
  });
});

describe("overlapping windows over a leaky ReLU's outputs", () => {
  it("co-vary as φ of the pre-activations' maxima, not as maxima of the outputs taken as Gaussians: the next convolution's weight gradient (0.76 binade above before)", () => {
    // an invented egret-roost camera: a leaky ReLU (slope 0.1) into a size-3 stride-1 max pool, whose neighbouring
    // windows share 6 of 9 pixels; their covariance is E[φ(M_A)φ(M_B)] − E[φ(M)]², M over pre-activations of variance q
    const yaml = imageClassifier("egret-roost", "channels: 3, height: 14, width: 14", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, bias: false }
  - { type: batch-norm, name: bn1 }
  - { type: leaky-relu, name: a1, slope: 0.1 }
  - { type: max-pool, name: p1, size: 3, stride: 1 }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: 1, bias: false }
  - { type: batch-norm, name: bn2 }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 12 }
`);
    const d = measuredDifferences(yaml, "egret-roost", /^c2\/weight-gradient$/);
    expect(d.size).toBe(1);
    // +0.76 before; what is left (+0.38, +0.27 over 21 draws) is what the same network with a ReLU leaves (heron-nest above)
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.5);
  });
});
