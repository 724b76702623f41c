import { describe, expect, it } from "vitest";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";

// A layer or RMS norm divides each sample by its own statistic s² (the mean square of its features), so its backward
// multiplies the gradient by E[1/s²], not 1/E[s²]: ln s² is N(−V/2, V) about its mean, V the input's finite-width
// spread (Hanin & Nica 2019; SCIENCE.md §2.6), and E[1/s²]·E[s²] = e^V (the log-normal's negative moment). Post-norm
// residual blocks show it most: a block's sum x + α·F(x) holds the branch's spread, and each block's norm missed it
// once more (in the kiln below, V = 0.09 at the upper blocks' norms; a separate float64 count of 30 networks gives
// Var(ln s²) = 0.08 there and E[1/s²]·E[s²] = 1.09; at the lowest, 0.23 and 1.26, which also hold the per-sample spread
// of the input layer and of the data, 2/32 each, that the engine's V, the spread of a batch rms, leaves out). Each check
// is against the project's float64 simulation (src/simulate: the described network run forward and backward on random
// data, median of the draws); the figures in the test names are the differences before the rule.

// an invented kiln-temperature regressor: three post-norm residual blocks with multiplier 2; the targets' noise (scale 8)
// drowns the loss's curvature, so the gradients are the noise passed down
const KILN = `name: kiln-temperature
description: invented kiln-temperature regressor, post-norm residual blocks
input: { features: 32 }
training: { batch: 64, loss: { kind: mean-squared-error, target-scale: 8 } }
${WIDE_PLAN}blocks:
  blk:
    - type: residual
      multiplier: 2
      branch:
        - { type: dense, width: 64, init: he-normal }
        - { type: relu }
        - { type: dense, width: 32 }
    - layer-norm
layers:
  - { type: dense, name: inp, width: 32 }
  - { type: repeat, times: 3, layers: [ { type: use, block: blk } ] }
  - { type: dense, name: head, width: 4 }
`;

// an invented hive-weight logger: one norm over only 8 features right after a dense layer, one sample's statistic a
// Gaussian quadratic form of 8 terms, V = 2/8
const hive = (norm: string): string => `name: hive-weight
description: invented hive-weight logger, a narrow ${norm}
input: { features: 64 }
training: { batch: 256, loss: { kind: mean-squared-error, target-scale: 8 } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 8 }
  - { type: ${norm}, name: tidy }
  - { type: dense, name: head, width: 4 }
`;

describe("a norm's backward divides each sample by its own statistic", () => {
  it("post-norm residual blocks: every activation gradient (the lowest block sum's and the input layer's 0.33 binade low before)", () => {
    const d = measuredDifferences(KILN, "kiln-temperature", /activation-gradient$/, 9);
    expect(d.size).toBe(17);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.2);
  });

  it("a narrow RMS norm: the gradient below it (0.15 binade low before)", () => {
    // e^(V/2) = e^(1/8) in rms; a Gaussian input's s² over 8 features of a near-isotropic map is about χ²₈/8, whose
    // E[1/s²]·E[s²] = 8/6 (the chi-square's negative moment) against e^(1/4) = 1.28
    const d = measuredDifferences(hive("rms-norm"), "hive-weight", /^lower\/activation-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.1);
  });

  it("a narrow layer norm: the gradient below it (0.21 binade low before)", () => {
    // as above, and the centring leaves 7 of 8 degrees of freedom to s² (E[s²] = 7/8 of the input's), left out
    const d = measuredDifferences(hive("layer-norm"), "hive-weight", /^lower\/activation-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.1);
  });
});
