import { describe, expect, it } from "vitest";
import { imageClassifier, measuredDifferences } from "../helpers/simulated.js";
import { channelInverse, rectifierChannel } from "../../src/ops/norm/channels.js";
import { createRandom } from "../../src/numeric/random.js";

// A batch norm right after a rectifier divides each channel by that channel's own variance over batch and pixels.
// When the rectifier's input has a per-channel mean (a convolution of a ReLU output, μ_c = m·Σw), a channel whose mean
// sits low is nearly off: its variance is small and its 1/variance large, so the gradient below the norm holds the
// channels' mean of 1/var_c, well above 1/(mean var), at the median draw. Checked against the project's float64
// simulation (src/simulate: the network run forward and backward on random data, median of 5 draws), on the step the
// gradient takes across the norm and across the rectifier below it (the figures in the titles: before this rule).

// an invented moss-tile sorter: two padded convolutions, the second on a ReLU output, then ReLU and batch norm
const MOSS = imageClassifier("moss-tiles", "channels: 3, height: 10, width: 10", `
  - { type: conv2d, name: c1, channels: 8, kernel: 3, padding: 1 }
  - { type: relu, name: a1 }
  - { type: conv2d, name: c2, channels: 8, kernel: 3, padding: 1 }
  - { type: relu, name: a2 }
  - { type: batch-norm, name: bn2 }
  - { type: conv2d, name: c3, channels: 8, kernel: 3, padding: 1 }
  - { type: relu, name: a3 }
  - { type: batch-norm, name: bn3 }
`, 16);

// an invented lichen-crust camera: the same with leaky ReLU and 16 channels
const LICHEN = imageClassifier("lichen-crust", "channels: 3, height: 10, width: 10", `
  - { type: conv2d, name: c1, channels: 16, kernel: 3, padding: 1 }
  - { type: leaky-relu, name: a1, slope: 0.1 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, padding: 1 }
  - { type: leaky-relu, name: a2, slope: 0.1 }
  - { type: batch-norm, name: bn2 }
  - { type: conv2d, name: c3, channels: 16, kernel: 3, padding: 1 }
  - { type: leaky-relu, name: a3, slope: 0.1 }
  - { type: batch-norm, name: bn3 }
`, 16);

// an invented fern-frond scanner: three padded convolutions, each followed by ReLU and batch norm (channels of mean 0)
const FERN = imageClassifier("fern-fronds", "channels: 3, height: 10, width: 10", `
  - { type: conv2d, name: c1, channels: 16, kernel: 3, padding: 1 }
  - { type: relu, name: a1 }
  - { type: batch-norm, name: bn1 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, padding: 1 }
  - { type: relu, name: a2 }
  - { type: batch-norm, name: bn2 }
  - { type: conv2d, name: c3, channels: 16, kernel: 3, padding: 1 }
  - { type: relu, name: a3 }
  - { type: batch-norm, name: bn3 }
`, 16);

// an invented reed-bed survey: an average pool of a ReLU's output (a mean well above its spread) into a padded
// convolution, ReLU and batch norm, so the channels' means spread far and neighbouring pixels' gates agree
const REEDS = imageClassifier("reed-survey", "channels: 3, height: 16, width: 16", `
  - { type: conv2d, name: c1, channels: 12, kernel: 3, init: he-normal }
  - { type: relu, name: a1 }
  - { type: average-pool, name: p1, size: 2 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, padding: 1, bias: false }
  - { type: relu, name: a2 }
  - { type: batch-norm, name: bn2 }
  - { type: average-pool, name: p2, size: 4 }
`, 16);

function steps(yaml: string, name: string): { norm: number; rectifier: number } {
  const d = measuredDifferences(yaml, name, /^(bn2|a2|c2)\/activation-gradient$/);
  expect(d.size).toBe(3);
  const at = (id: string): number => d.get(`${id}/activation-gradient`) as number;
  return { norm: at("a2") - at("bn2"), rectifier: at("c2") - at("a2") };
}

describe("batch norm after a rectifier whose channels' means differ", () => {
  it("a ReLU's variance and E[φ'²] at channel mean a: the truncated normal's moments (Φ(a), and 1/2 − 1/2π at a = 0)", () => {
    // Var[max(Z, 0)] = 1/2 − 1/(2π) for Z ~ N(0, 1) (half-normal moments, common practice)
    expect(rectifierChannel(0, 0).variance).toBeCloseTo(0.5 - 1 / (2 * Math.PI), 14);
    // far below zero the ReLU is nearly off: Var ≈ E[relu²] = φ(t)·((t² + 1)·R(t) − t), t = −a, with the Mills ratio's
    // series R(t) = 1/t − 1/t³ + 3/t⁵ − 15/t⁷ + 105/t⁹ − … (Abramowitz & Stegun 26.2.12, from memory):
    // φ(t)·(2/t³ − 12/t⁵ + 90/t⁷ − 840/t⁹), its next term below 1e-4 of it at t = 10
    const t = 10;
    const pdf = Math.exp(-t * t / 2) / Math.sqrt(2 * Math.PI);
    expect(rectifierChannel(-t, 0).variance / (pdf * (2 / t ** 3 - 12 / t ** 5 + 90 / t ** 7 - 840 / t ** 9))).toBeCloseTo(1, 3);
    // leaky: φ = slope·x + (1 − slope)·relu(x); at a = 0 its variance is slope² + slope(1 − slope) + (1 − slope)²·Var[relu]
    const s = 0.1;
    expect(rectifierChannel(0, s).variance).toBeCloseTo(s * s + s * (1 - s) + (1 - s) ** 2 * (0.5 - 1 / (2 * Math.PI)), 14);
    expect(rectifierChannel(0, s).derivativeSecond).toBeCloseTo(s * s + (1 - s * s) / 2, 14);
  });

  it("the channels' mean of 1/var_c at the median draw is a Monte Carlo count's within 4% (seeded, 2001 draws)", () => {
    const random = createRandom(7);
    for (const [ratio, channels] of [[0.3, 4], [0.47, 8], [0.8, 32], [1.5, 16]] as const) {
      const means: number[] = [];
      for (let d = 0; d < 2001; d++) {
        let sum = 0;
        for (let c = 0; c < channels; c++) sum += 1 / rectifierChannel(Math.sqrt(ratio) * random.normal(), 0).variance;
        means.push(sum / channels);
      }
      means.sort((a, b) => a - b);
      const median = means[1000] as number;
      const rule = channelInverse({ slope: 0, between: ratio, within: 1, q: 1, position: 0 }, channels, 0).inverse;
      expect(Math.abs(rule / median - 1), `between/within ${ratio}, ${channels} channels: rule ${rule.toFixed(3)}, count ${median.toFixed(3)}`).toBeLessThan(0.04);
    }
  });

  it("ReLU, 8 channels: the gradient's step across the norm (+0.40 before) and across the ReLU below it (−0.20)", () => {
    const s = steps(MOSS, "moss-tiles");
    expect(Math.abs(s.norm), `norm ${s.norm.toFixed(2)}`).toBeLessThan(0.2);
    expect(Math.abs(s.rectifier), `rectifier ${s.rectifier.toFixed(2)}`).toBeLessThan(0.15);
  });

  it("the biases of the convolutions below: a ReLU's gate leaves part of the norm's zero sum (−0.38, −0.51, −0.57 before)", () => {
    // Σ relu'·δ_x over a channel's N terms is Σ_{x>0} δ_x = −Σ_{x≤0} δ_x, whose coefficients on δ pair x̂ with the gate:
    // about a quarter of N·E[(relu'·δ_x)²] for a channel of mean 0, not the half that independent gates leave
    const d = measuredDifferences(FERN, "fern-fronds", /^c[123]\/weight-gradient:bias$/);
    expect(d.size).toBe(3);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("after an average pool: the convolution's weight gradient and the bias below it (+0.88, +1.09 before these rules; −2.61, −2.70 with the gates' pairs of two positions unweighed)", () => {
    // two positions of a nearly-off channel are on together far less often than the channels' mean gate says, and the
    // position pairs then outweigh what the norm's zero sum takes from the pairs of two samples
    const d = measuredDifferences(REEDS, "reed-survey", /^(c2\/weight-gradient|c1\/weight-gradient:bias)$/);
    expect(d.size).toBe(2);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.45);
  });

  it("leaky ReLU, 16 channels: the gradient's step across the norm (+0.30 before) and across the leaky ReLU (−0.31)", () => {
    const s = steps(LICHEN, "lichen-crust");
    expect(Math.abs(s.norm), `norm ${s.norm.toFixed(2)}`).toBeLessThan(0.2);
    expect(Math.abs(s.rectifier), `rectifier ${s.rectifier.toFixed(2)}`).toBeLessThan(0.2);
  });
});
