import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { createRandom } from "../../src/numeric/index.js";
import { parseSpec } from "../../src/spec/index.js";

// A batch norm keeps one statistic per channel, Σ x² over batch × pixels. After a convolution each channel's sum is set
// by its own weights: with He et al. 2015 initialisation ‖w_c‖² is (2/fan_in)·χ² of fan_in, so a first convolution of
// fan-in 9 gives every channel a scale of its own, and with 64 channels one of them is likely far above the mean. The
// judgement took the whole tensor's spread (a mean over 64 channels, tight) and every channel at it: 2.16e-5 per step
// where about 0.87 holds. The expected value below is an independent Monte Carlo over the channels' weights: each
// channel's expected sum is T·0.25²·Σ_k w_k²·inside_k (inside_k the share of the output pixels whose tap k falls inside
// the zero-padded image: 63/64 per axis for an offset tap), which overflows binary16 at 65520 (IEEE 754-2019: the values
// that round to infinity); the data's own noise over T = 262144 terms is a relative 0.3% and left out.

// an invented bottle-crack detector: 64×64 greyscale crops, a first convolution of 64 channels, batch norm
const CRACKS = `name: bottle-cracks
description: invented bottle-crack detector, a first convolution and its batch norm
input: { channels: 1, height: 64, width: 64, scale: 0.25 }
training: { batch: 64, loss: { kind: cross-entropy, classes: 4 } }
precision: { activations: binary16, weights: binary16, gradients: binary16 }
layers:
  - { type: conv2d, name: first, channels: 64, kernel: 3, bias: false, init: he-normal }
  - { type: batch-norm, name: tidy }
  - relu
  - flatten
  - { type: dense, name: head, width: 4 }
`;

function monteCarlo(draws: number, seed: number): number {
  const random = createRandom(seed);
  const terms = 64 * 64 * 64;
  const axis = [63 / 64, 1, 63 / 64];
  let any = 0;
  for (let d = 0; d < draws; d++) {
    let over = false;
    for (let c = 0; c < 64; c++) {
      let sum = 0;
      for (let i = 0; i < 3; i++) {
        for (let j = 0; j < 3; j++) {
          const w = random.normal() * Math.sqrt(2 / 9);
          sum += w * w * (axis[i] as number) * (axis[j] as number);
        }
      }
      if (terms * 0.0625 * sum >= 65520) over = true;
    }
    if (over) any++;
  }
  return any / draws;
}

describe("a batch norm's statistics each have their own spread", () => {
  it("after a first convolution of fan-in 9: one of 64 channels overflows binary16 with probability ≈ 0.87 (2.16e-5 before)", () => {
    const parsed = parseSpec(CRACKS, "bottle-cracks.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const site = check(parsed.spec).hazards.find((h) => h.kind === "norm-sum-of-squares" && h.layer === "tidy");
    const value = site?.evaluations.find((e) => e.format === "binary16")?.value as number;
    const expected = monteCarlo(20000, 7);
    // 20000 draws: a binomial standard error of 0.0024
    expect(expected).toBeGreaterThan(0.8);
    expect(Math.abs(value - expected), `${value} against ${expected}`).toBeLessThan(0.02);
    expect(site?.findings[0]?.sentence).toMatch(/in one of its 64 statistics/);
  });
});
