import { describe, expect, it } from "vitest";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";

// The loss's curvature gives a layer's gradient a part that holds the layer's own input, read as y ≈ J·h (exact for
// ReLU stacks, whose output is their Jacobian times their input). In a chaotic tanh stack (σ_w²·E[φ'²] > 1, Schoenholz
// et al. 2017 §3) the tangent path J·h outgrows the bounded output y by χ per layer, and that part grew the predicted
// gradients by about ×2 per layer: up to 3.5 binades above the measurement on these 16 layers, 12 on 40. Each check
// below is against the project's float64 simulation (src/simulate: the network run forward and backward on random
// data, median of 5 draws); the figures in the comments are the differences before the rule.

const stack = (name: string, gain: number): string => `name: ${name}
description: invented
input: { features: 128 }
training: { batch: 64, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - type: repeat
    name: stack
    times: 16
    layers:
      - { type: dense, width: 128, init: { kind: lecun, gain: ${gain} } }
      - tanh
  - { type: dense, name: head, width: 4 }
`;

const GRADIENTS = /^stack\.(0|1|8)\.dense-0\/(weight|activation)-gradient/;

describe("the loss's curvature through saturating activations", () => {
  it("a chaotic tanh stack, σ_w² = 9: the deep gradients within 0.35 binade (−3.5 to −1.0 before)", () => {
    // an invented brine-density regressor
    const d = measuredDifferences(stack("brine-density", 3), "brine-density", GRADIENTS);
    expect(d.size).toBe(9);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.35);
  });

  it("a mildly chaotic tanh stack, σ_w² = 4: within 0.35 binade (−0.63 before)", () => {
    const d = measuredDifferences(stack("brine-density", 2), "brine-density", GRADIENTS);
    expect(d.size).toBe(9);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.35);
  });

  it("near criticality, σ_w² = 2.25: as before, within 0.3 binade", () => {
    const d = measuredDifferences(stack("brine-density", 1.5), "brine-density", GRADIENTS);
    expect(d.size).toBe(9);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.3);
  });
});
