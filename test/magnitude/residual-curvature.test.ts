import { describe, expect, it } from "vitest";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";

// A residual block y = x + α·F(x) at the start of training, where the loss gradient holds the network's own output
// through the loss's curvature M (see loss-curvature.test.ts). The skip and the branch are not independent: the branch
// is a function of x, so E[x·Fᵀ] = Cov(x)·J̄ᵀ with J̄ = E[∂F/∂x] the branch's mean Jacobian (Stein 1981, Lemma 1). Each
// check below is against the project's float64 simulation (src/simulate: the described network run forward and
// backward on random data, median of 5 draws); the figures in the comments are the differences before each rule.

// an invented orchard irrigation planner: 8 readings per position, one pre-norm residual block with multiplier 0.5
const PLANNER = `name: irrigation-planner
description: invented orchard irrigation planner, one pre-norm residual block
input: { features: 64, positions: 8 }
training: { batch: 64, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: inp, width: 64 }
  - type: residual
    name: res
    multiplier: 0.5
    branch:
      - { type: rms-norm, name: n0 }
      - { type: dense, name: d1, width: 64 }
      - { type: silu, name: s }
      - { type: dense, name: d3, width: 64 }
  - { type: dense, name: head, width: 4 }
`;

describe("the loss's curvature through a residual block", () => {
  it("two features of the block's output share the skip's covariance with the branch (the head's weight gradient 0.55 binade low before)", () => {
    // Cov(y) = Cov(x) + α·(Cov(x)·J̄ᵀ + J̄·Cov(x)) + α²·Cov(F): the head sums the curvature over E[y yᵀ]'s off-diagonal
    const d = measuredDifferences(PLANNER, "irrigation-planner", /^head\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("the curvature passes down the skip: M + α·(M·J̄ + J̄ᵀ·M) + the branch's pullback (the weights below 1.33 binades low before)", () => {
    // with none carried past the block, the layer below lost the aligned part N·M_x·W·E[x xᵀ] of its weight gradient
    const d = measuredDifferences(PLANNER, "irrigation-planner", /^inp\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });
});
