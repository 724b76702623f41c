import { describe, expect, it } from "vitest";
import { WIDE_PLAN, imageClassifier, measuredDifferences } from "../helpers/simulated.js";
import { residualBranchSeed } from "../../src/ops/residual/analytic.js";
import type { GraphLayer } from "../../src/graph/types.js";

// A max pool routes its gradient to the pixels where the layer below is largest, where that layer's input lines up
// with its weights: a convolution y = w·x below a ReLU and a max pool gets S·w/‖w‖² in its weight gradient, S = Σ y·δ
// over batch and pixels, and S = Σ p·g at the pool's output (Euler's theorem for the positively homogeneous ReLU and
// leaky ReLU, φ(y) = y·φ'(y); own algebra). A float64 count of one such network put 81–90% of the weight gradient's
// energy along w. The same S is a batch norm's gain gradient below the ReLU (Σ x̂·δ = Σ (y − β)·δ/γ). Each check is
// against the project's float64 simulation (src/simulate, median of 5 draws); the figures are the differences before.

const conv = (name: string, pool: string): string => imageClassifier(name, "channels: 3, height: 17, width: 17", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, padding: valid, init: he-normal }
  - { type: relu, name: a1 }
  - { type: max-pool, name: p1, ${pool} }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: valid, init: he-normal }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 5 }
`);

describe("a max pool's sum Σ p·g passed down by Euler's theorem", () => {
  it("the convolution below a ReLU and an overlapping max pool: its weight gradient (1.88 binades above the prediction before)", () => {
    // an invented lichen-edge detector (size 3, stride 2)
    const d = measuredDifferences(conv("lichen-edges", "size: 3, stride: 2"), "lichen-edges", /^c1\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("the same with a plain 2 × 2 max pool (1.65 binades above before)", () => {
    // an invented moss-tile sorter
    const d = measuredDifferences(conv("moss-tiles", "size: 2"), "moss-tiles", /^c1\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("a batch norm's gain gradient below a leaky ReLU and a max pool (1.11 binades below before)", () => {
    // an invented heron-nest camera: the gain's Σ x̂·δ is the pool's S, whose terms the pool pairs by its output's
    // shared mean and position correlation (the norm's own count paired x̂ of mean zero)
    const yaml = imageClassifier("heron-nest", "channels: 3, height: 14, width: 14", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, bias: false }
  - { type: batch-norm, name: bn1 }
  - { type: leaky-relu, name: a1 }
  - { type: max-pool, name: p1, size: 2 }
  - { type: conv2d, name: c2, channels: 20, kernel: 3, padding: 1, bias: false }
  - { type: batch-norm, name: bn2 }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 7 }
`);
    // 21 draws: the gain's own rms moves 0.44 log2 from draw to draw (measured over 41), so a median of 5 moves ~0.25
    const d = measuredDifferences(yaml, "heron-nest", /^bn1\/weight-gradient:gain$/, 21);
    expect(d.size).toBe(1);
    // what is left (−0.13; +0.04 before the pool saw φ and the ReLU's gate under the pool stopped adding draw-to-draw
    // spread, which lowered the predicted median): S pairs terms as E[p p′]·E[g g′]
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.3);
  });
});

describe("a max pool over a leaky ReLU's outputs", () => {
  it("takes max φ(x) = φ(max x) for the increasing φ, not a Gaussian of the outputs' mean and variance (0.28 and 0.50 binade above before)", () => {
    // an invented salt-flat camera: batch-normed convolution, leaky ReLU of slope 0.2, an overlapping max pool; the
    // next convolution's output takes the pool's second moment. What c2 keeps (+0.24): each channel's (Σw)²·m² spreads
    // from draw to draw, and the rms here is the median of 5 draws (see the sweep's s2 case)
    const yaml = `name: salt-flats
description: invented
input: { channels: 2, height: 13, width: 13 }
training: { batch: 32, loss: { kind: cross-entropy, classes: 5 } }
${WIDE_PLAN}layers:
  - { type: conv2d, name: c1, channels: 16, kernel: 3, bias: false }
  - { type: batch-norm, name: bn1 }
  - { type: leaky-relu, name: a1, slope: 0.2 }
  - { type: max-pool, name: p1, size: 3, stride: 2 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, padding: valid }
  - { type: relu, name: a2 }
  - { type: average-pool, name: p2, size: 4 }
  - flatten
  - { type: dense, name: head, width: 5 }
`;
    const d = measuredDifferences(yaml, "salt-flats", /^(p1\/activation|c2\/pre-activation)$/);
    expect(d.size).toBe(2);
    expect(Math.abs(d.get("p1/activation")!), `p1: ${d.get("p1/activation")!.toFixed(2)}`).toBeLessThan(0.1);
    expect(Math.abs(d.get("c2/pre-activation")!), `c2: ${d.get("c2/pre-activation")!.toFixed(2)}`).toBeLessThan(0.35);
  });
});

describe("a residual block under a max pool", () => {
  it("its branch does not take the block output's Σ y·δ: Σ F·δ_F = Σ y·δ − Σ x·δ for y = x + F", () => {
    // a block output gradient that carries the pool's sum (a ReLU and a max pool above the block)
    const layer = { spec: { type: "residual", multiplier: 1, branch: [] } } as unknown as GraphLayer;
    const seed = residualBranchSeed(layer, { q: 1, zeroFraction: 0, shape: "gaussian", logVar: 0, homogeneousSum: 5 }, false);
    expect(seed.gradient.q).toBe(1);
    expect(seed.gradient.homogeneousSum).toBeUndefined();
  });
});
