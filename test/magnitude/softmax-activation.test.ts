/**
 * The pointwise softmax activation's E[p²]: the exact moment of Gaussian logits (gaussianSoftmaxMoments, as attention
 * and the loss take it) instead of the log-normal min(e^q/n², 1/n), held to a seeded Monte Carlo and to the project's
 * float64 simulation.
 */
import { describe, expect, it } from "vitest";
import { createRandom } from "../../src/numeric/index.js";
import { softmaxMoments } from "../../src/ops/index.js";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";

// Invented scenario: an orchard irrigation mixer that shares water among 12 valves by a softmax of 12 scores.
const mixer = (init: string, out = 4, target = 0.1): string => `name: orchard-mixer
description: invented orchard irrigation mixer, a softmax over 12 valve shares
input: { features: 64 }
training: { batch: 64, loss: { kind: mean-squared-error, reduction: mean, target-scale: ${target} } }
${WIDE_PLAN}layers:
  - { type: dense, width: 12, init: ${init} }
  - softmax
  - { type: dense, width: ${out} }
`;

describe("the pointwise softmax's second moment", () => {
  it("agrees with a seeded Monte Carlo of n independent N(0, q) logits within 4 standard errors", () => {
    // the old min(e^q/n², 1/n) was 0.019 against 0.0140 at (1, 12) and 1/12 against about 0.05 at (4, 12)
    for (const [q, n] of [[1, 12], [4, 12], [9, 50]] as const) {
      const random = createRandom(11);
      const s = Math.sqrt(q);
      const samples = 40000;
      const z = new Float64Array(n);
      let sum = 0;
      let sumSquares = 0;
      for (let r = 0; r < samples; r++) {
        let top = -Infinity;
        for (let j = 0; j < n; j++) {
          z[j] = s * random.normal();
          top = Math.max(top, z[j] as number);
        }
        let total = 0;
        for (let j = 0; j < n; j++) total += Math.exp((z[j] as number) - top);
        const p = Math.exp((z[0] as number) - top) / total;
        sum += p * p;
        sumSquares += p ** 4;
      }
      const mean = sum / samples;
      const error = Math.sqrt((sumSquares / samples - mean * mean) / samples);
      expect(Math.abs(softmaxMoments(q, n).second - mean), `q = ${q}, n = ${n}`).toBeLessThan(4 * error);
    }
  });

  it("the probabilities, the next layer and the loss against the float64 simulation (logit variance 1 and 2; the probabilities 0.23 and 0.68 binade high before, 41 draws)", () => {
    for (const init of ["lecun-normal", "he-normal"]) {
      const d = measuredDifferences(mixer(init), "orchard-mixer", /^(softmax-1\/activation|dense-2\/pre-activation|loss\/loss)$/, 41);
      expect(d.size).toBe(3);
      // the median of 41 draws of a 12-wide softmax's rms is good to a few hundredths of a binade (measured here:
      // −0.01 and −0.02 after, −0.23 and −0.68 before); the next layer and the loss were 0.13–0.81 binade high
      expect(Math.abs(d.get("softmax-1/activation")!), init).toBeLessThan(0.06);
      expect(Math.abs(d.get("dense-2/pre-activation")!), init).toBeLessThan(0.2);
      expect(Math.abs(d.get("loss/loss")!), init).toBeLessThan(0.2);
    }
  });

  it("the Jacobian's share E[S + S² − 2Σp³]/n against the float64 simulation, where the gradient does not depend on p (0.32 and 0.53 binade high by E[p²] before)", () => {
    // targets 100 times the outputs' scale make the output gradient y − t ≈ −t, independent of the probabilities, as
    // the share assumes; the difference of the two gradients' errors is the share's own error
    for (const [init, out] of [["lecun-normal", 4], ["he-normal", 256]] as const) {
      const d = measuredDifferences(mixer(init, out, 10), "orchard-mixer", /^(softmax-1|dense-0)\/activation-gradient$/, 41);
      expect(d.size).toBe(2);
      const share = d.get("dense-0/activation-gradient")! - d.get("softmax-1/activation-gradient")!;
      expect(Math.abs(share), `${init}, ${out} outputs`).toBeLessThan(0.08);
    }
  });
});
