import { describe, expect, it } from "vitest";
import { imageClassifier, measuredDifferences } from "../helpers/simulated.js";

// A norm's gain gradient sums x̂·δ over batch × pixels. Below a flatten and a dense head, δ at two pixels of two samples
// meets two different columns of the head's weights and shares nothing (Gradient.crossCorrelation = 0), while at one
// pixel it shares what the two samples' loss gradients share; the gain's pairs of terms must take that cross
// correlation, not the one of two samples at one pixel, which counted B·P·(B − 1)·P pairs of them as correlated.
// Checked against the project's float64 simulation (src/simulate: the network run forward and backward on random data,
// median of 5 draws); the figure in the title is the difference before.

// an invented slate-grain inspector: one grey channel, two convolutions with batch norm and ReLU, then the head
const SLATE = imageClassifier("slate-grain", "channels: 1, height: 12, width: 12", `
  - { type: conv2d, name: c1, channels: 16, kernel: 3, bias: false, init: he-normal }
  - { type: batch-norm, name: bn1 }
  - { type: relu, name: a1 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, bias: false, init: he-normal }
  - { type: batch-norm, name: bn2 }
  - { type: relu, name: a2 }
`, 16);

describe("a norm's gain gradient right above a flatten's positions", () => {
  it("batch norm, ReLU, flatten, dense head: the gain gradient (−1.86 binades before)", () => {
    const d = measuredDifferences(SLATE, "slate-grain", /^bn[12]\/weight-gradient:gain$/);
    expect(d.size).toBe(2);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });
});
