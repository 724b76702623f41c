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

  it("the branch's seed holds the skip's α·M·x, projected on the branch output (its weights 0.86–1.24 binades low before)", () => {
    // x's best linear estimate from F is (q_x/q_F)·J̄ᵀ·F, so M_F gains (α·q_x/q_F)·M·J̄ᵀ: exact for the last dense layer;
    // below the SiLU the projection keeps (E[φ']²·q/E[φ²])² = 0.49 of the skip's part (q = 1 there), so the first dense
    // layer and the norm's gain stay 0.35–0.45 low (own algebra; the SiLU's moments at q = 1 by quadrature: E[φ'] = 1/2,
    // E[φ²] = 0.356)
    const d = measuredDifferences(PLANNER, "irrigation-planner", /^res\.(d3\/weight-gradient|d1\/weight-gradient|n0\/weight-gradient:gain)$/);
    expect(d.size).toBe(3);
    expect(Math.abs(d.get("res.d3/weight-gradient")!), "last dense layer").toBeLessThan(0.3);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.5);
  });
});
