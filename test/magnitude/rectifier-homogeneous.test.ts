import { describe, expect, it } from "vitest";
import { imageClassifier, measuredDifferences } from "../helpers/simulated.js";

// A convolution's weight gradient below a rectifier holds, along each unit's own weights w, S·w/‖w‖² with
// S = Σ u·δ_u = Σ φ(u)·g over batch and pixels (Euler's theorem for the positively homogeneous ReLU, φ(u) = u·φ'(u)). The
// pairs of S share the rectifier's mean: E[x·φ'(w·x)] = E[φ'']·Cov(x, u) ≠ 0 (Stein's lemma), a part the same in every
// sample that grows as N² while the independent terms grow as N, and that the pairs of a zero-mean input with its
// gradient miss. A max pool above the rectifier already passed S down; a plain rectifier (here under an average pool)
// did not, and the first convolution's weight gradient sat 0.7–1.2 binades below the project's float64 simulation
// (src/simulate: the network run forward and backward on random data), the more so the larger the batch.
//
// Tolerance: the predicted draw-to-draw spread of these weight gradients is σ ≈ 0.29 binade, so the median of 21 draws
// is uncertain by about 1.2533·σ/√21 ≈ 0.08 binade (standard error of a sample median; common practice); 0.3 binade
// allows two such errors and ~0.15 for the pairs, which the rule takes as independent of the gate.

const seedTray = (name: string, batch: number): string =>
  imageClassifier(name, "channels: 2, height: 8, width: 8", `
  - { type: conv2d, name: c1, channels: 8, kernel: 3, padding: 1, init: he-normal }
  - { type: relu, name: a1 }
  - { type: average-pool, name: p1, size: 4 }
`, batch);

describe("a plain rectifier's sum Σ φ·g passed down by Euler's theorem", () => {
  it("the first convolution under a ReLU and an average pool, batch 96 (0.68 binade below the simulation before)", () => {
    // an invented frost-sensor array: 8 × 8 two-channel thermal tiles sorted into 4 frost levels
    const d = measuredDifferences(seedTray("frost-tiles", 96), "frost-tiles", /^c1\/weight-gradient$/, 21);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.3);
  });

  it("the same at batch 256, where the shared part dominates (1.20 binades below before)", () => {
    const d = measuredDifferences(seedTray("frost-tiles-wide", 256), "frost-tiles-wide", /^c1\/weight-gradient$/, 21);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.3);
  });
});
