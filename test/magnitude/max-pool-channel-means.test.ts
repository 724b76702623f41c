import { describe, expect, it } from "vitest";
import { createRandom } from "../../src/numeric/random.js";
import { maxOfOffsetWindows } from "../../src/ops/pool/analytic.js";
import { predict } from "../../src/magnitude/index.js";
import { simulate } from "../../src/simulate/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { WIDE_PLAN } from "../helpers/simulated.js";

// A convolution of a nonzero-mean input (a ReLU and a max pool below it) gives each channel a mean of its own, the same
// at every pixel and sample: Σ_k w_k·m over its taps. A ReLU after it and a max pool over 2 × 2 windows then see the
// window's four pre-activations as μ_c + e_i, not as four independent zero-mean Gaussians: a channel whose mean sits
// low is off in most windows (the pool's output held 30% zeros in the float64 simulation, where four independent
// inputs give 1/16), the channel's windows are on or off together, and two samples share μ_c. The rule is checked here
// against a seeded Monte Carlo of that definition, and the whole network against the project's float64 simulation
// (src/simulate: the network run forward and backward on random data, median of 31 draws); the figures in the test
// names are log2(measured rms / predicted rms) before → after this rule, and the shares of zeros predicted and measured.

describe("max of a window about its channel's mean (maxOfOffsetWindows)", () => {
  // the definition sampled: μ_c ~ N(0, between), a sample's common part √(position·within)·u, and k pixels of
  // √((1 − position)·within)·z_i; φ(x) = max(x, 0) + a·min(x, 0) of the window's maximum
  function monteCarlo(k: number, between: number, within: number, position: number, slope: number, seed: number) {
    const random = createRandom(seed);
    const channels = 20_000;
    const phi = (x: number): number => (x > 0 ? x : slope * x);
    const windowMax = (base: number): number => {
      let best = -Infinity;
      for (let i = 0; i < k; i++) best = Math.max(best, base + Math.sqrt((1 - position) * within) * random.normal());
      return best;
    };
    const keys = ["q", "mean", "off", "sampleShared", "positionShared", "sampleOn", "positionOn"] as const;
    const sums = { q: 0, mean: 0, off: 0, sampleShared: 0, positionShared: 0, sampleOn: 0, positionOn: 0 };
    const squares = { q: 0, mean: 0, off: 0, sampleShared: 0, positionShared: 0, sampleOn: 0, positionOn: 0 };
    for (let c = 0; c < channels; c++) {
      // one channel: two samples (each with its own common part) and a second window of the first sample
      const mu = Math.sqrt(between) * random.normal();
      const u1 = mu + Math.sqrt(position * within) * random.normal();
      const u2 = mu + Math.sqrt(position * within) * random.normal();
      const a = windowMax(u1);
      const b = windowMax(u2);
      const c2 = windowMax(u1);
      const values = {
        q: phi(a) ** 2,
        mean: phi(a),
        off: a <= 0 ? 1 : 0,
        sampleShared: phi(a) * phi(b),
        positionShared: phi(a) * phi(c2),
        sampleOn: a > 0 && b > 0 ? 1 : 0,
        positionOn: a > 0 && c2 > 0 ? 1 : 0,
      };
      for (const key of keys) {
        sums[key] += values[key];
        squares[key] += values[key] ** 2;
      }
    }
    // each mean and its standard error over the independent channels (common practice)
    const result = {} as Record<(typeof keys)[number], { value: number; error: number }>;
    for (const key of keys) {
      const value = sums[key] / channels;
      result[key] = { value, error: Math.sqrt(Math.max(squares[key] / channels - value * value, 0) / channels) };
    }
    return result;
  }

  const cases: [string, number, number, number, number, number][] = [
    ["ReLU, channels' means well apart (between 3.7 times within)", 4, 2.2, 0.6, 0, 0],
    ["ReLU, a sample's pixels sharing a part too", 4, 0.5, 1, 0.3, 0],
    ["leaky ReLU of slope 0.2, 3 × 3 windows", 9, 1, 1, 0.1, 0.2],
  ];
  for (const [what, k, between, within, position, slope] of cases) {
    it(what, () => {
      const rule = maxOfOffsetWindows(k, { slope, between, within, position, q: 1 });
      const sampled = monteCarlo(k, between, within, position, slope, 20_241);
      // within four standard errors of the seeded Monte Carlo (the quadrature's own error is far smaller)
      for (const key of ["q", "mean", "off", "sampleShared", "positionShared", "sampleOn", "positionOn"] as const) {
        const { value, error } = sampled[key];
        expect(Math.abs(rule[key] - value), `${key}: rule ${rule[key].toFixed(4)}, sampled ${value.toFixed(4)} ± ${error.toFixed(4)}`).toBeLessThan(4 * error);
      }
    });
  }

  it("without channel means or a shared part it is the maximum of k independent ReLU inputs: off = (1/2)^k (order statistics)", () => {
    const rule = maxOfOffsetWindows(4, { slope: 0, between: 0, within: 1, position: 0, q: 1 });
    expect(rule.off).toBeCloseTo(1 / 16, 5);
    expect(rule.sampleOn).toBeCloseTo((15 / 16) ** 2, 5);
  });
});

// an invented seed-coat grader: 16 × 16 grey close-ups of seed coats, two padded 3 × 3 convolutions with ReLU and 2 × 2
// max pools, a dense head over 5 coat grades, batch 128
const SEED_COAT = `name: seed-coat
description: invented
input: { channels: 1, height: 16, width: 16 }
training: { batch: 128, loss: { kind: cross-entropy, classes: 5 } }
${WIDE_PLAN}layers:
  - { type: conv2d, name: c1, channels: 8, kernel: 3, padding: same, init: he-normal }
  - { type: relu, name: a1 }
  - { type: max-pool, name: p1, size: 2 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, padding: same, init: he-normal }
  - { type: relu, name: a2 }
  - { type: max-pool, name: p2, size: 2 }
  - flatten
  - { type: dense, name: head, width: 5 }
`;

describe("a max pool over a ReLU whose channels' means differ, against the float64 simulation", () => {
  const parsed = parseSpec(SEED_COAT, "seed-coat.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  // 31 draws: the head's pre-activation moves 0.46 binade (sd of log2 rms) from draw to draw, so its median of 31 is
  // uncertain by about 1.2533·0.46/√31 ≈ 0.10 binade (standard error of a sample median; common practice), the pool's
  // output 0.22, 0.05 on the median
  const { comparison } = simulate(parsed.spec, { draws: 31, seed: 1, round: false, predict });
  const row = (id: string) => {
    const r = comparison!.rows.find((x) => x.id === id);
    expect(r, id).toBeDefined();
    return r!;
  };

  it("the pool's share of zeros (predicted 0.063 → 0.227, measured 0.266: the median draw's) and its rms (−0.05 → +0.04)", () => {
    const p2 = row("p2/activation");
    expect(Math.abs(p2.predictedZeroFraction - p2.measured.median.zeroFraction)).toBeLessThan(0.06);
    expect(Math.abs(p2.differenceBinades), `p2: ${p2.differenceBinades.toFixed(3)}`).toBeLessThan(0.1);
  });

  it("the head's pre-activation (−0.29 → −0.07), whose input held fewer nonzero elements than predicted", () => {
    const head = row("head/pre-activation");
    expect(Math.abs(head.differenceBinades), `head: ${head.differenceBinades.toFixed(3)}`).toBeLessThan(0.15);
  });

  it("the gradient below the ReLU gate at the windows' maxima: its zeros (0.766 → 0.807, measured 0.816) and rms below it (p1: −0.20 → −0.03)", () => {
    const gate = row("c2/activation-gradient");
    expect(Math.abs(gate.predictedZeroFraction - gate.measured.median.zeroFraction)).toBeLessThan(0.02);
    for (const id of ["c2/activation-gradient", "p1/activation-gradient"]) expect(Math.abs(row(id).differenceBinades), `${id}: ${row(id).differenceBinades.toFixed(3)}`).toBeLessThan(0.1);
  });
});
