import { describe, expect, it } from "vitest";
import { measuredDifferences, residualStack } from "../helpers/simulated.js";

// Below a residual sum the loss's curvature reads the block's input through the tangent x + α·J_F·x of the sum, whose
// output is x + α·F(x). A saturating branch's J_F·x is small next to F (tanh: φ'(u)·u against φ(u)), so the tangent
// holds less and less of the output the deeper the block, and what it holds apart from the output grows by the
// mean-field gain per block (Schoenholz et al. 2017). Read as y ≈ J·x, as before this rule, the curvature's self
// parts grew the predicted gradients block by block (3.4 binades too large at the stem of the first stack here). Each
// check is against the project's float64 simulation (src/simulate, median of 25 draws); the comments give the largest
// difference before the rule.

const stack = (name: string, gain: number, multiplier: number): string => residualStack(name, { gain, multiplier });

// the deep gradients' scale varies by about 0.3 binade from draw to draw here: the median of 25 draws is within about
// 0.08 of the distribution's (1.2533·σ/√n, the standard error of a sample median; common practice)
const DRAWS = 25;

const GRADIENTS = /^(stem\/(weight|activation)-gradient|trunk\.(0|1|2|4|8|12)\.residual-0\/activation-gradient|trunk\.0\.residual-0\.dense-0\/weight-gradient)$/;

describe("the loss's curvature below residual sums of saturating branches", () => {
  it("tanh branches at σ_w² = 4 per layer: every gradient within 0.25 binade (the stem's weights −3.4 before)", () => {
    // an invented kelp-growth regressor
    const d = measuredDifferences(stack("kelp-growth", 2, 1), "kelp-growth", GRADIENTS, DRAWS);
    expect(d.size).toBe(9);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("the same branches at multiplier 0.5: within 0.2 binade (−1.3 before)", () => {
    const d = measuredDifferences(stack("kelp-growth", 2, 0.5), "kelp-growth", GRADIENTS, DRAWS);
    expect(d.size).toBe(9);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.2);
  });

  it("tanh branches at σ_w² = 1 (LeCun): within 0.2 binade (−0.3 before)", () => {
    const d = measuredDifferences(stack("kelp-growth", 1, 1), "kelp-growth", GRADIENTS, DRAWS);
    expect(d.size).toBe(9);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.2);
  });
});
