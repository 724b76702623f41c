import { describe } from "vitest";
import { WIDE_PLAN, measuredSpreads, spreadsWithin } from "../helpers/simulated.js";

// The draw-to-draw spread of a tensor's scale (Hanin & Nica 2019: ln of a squared norm is near Gaussian, its variance
// κ·Σ 1/width) in a convolutional network. A channel's weights serve every pixel of every sample, so its mean square
// over the step averages over batch × pixels: its Var/E² is 2·(1/T + the terms' pairs' mean E[c²]) (moments of a
// Gaussian quadratic form), about 2/fan_in for unrelated patches, not the 2 (and a ReLU's 5) of one sample's unit, which
// the rules counted per channel. Each check is against the project's float64 simulation (src/simulate: the described
// network run forward and backward on random data): the measured spread is the standard deviation of log2 rms over 41
// seeded draws, whose own sampling error is about 1/√(2·40) = 11% (the standard error of a standard deviation). Over
// 161 draws the rules give 0.070 against 0.072 for the first convolution and the first pool, 0.69 against 0.68 for the
// head's weight gradient, and 0.60 against 0.52 for the head's pre-activation (16% wide: the second ReLU's channel sums
// are skewed, and the log of their mean spreads less than their Var/E² says). A factor of 1.35 leaves two standard
// errors beside that; the figures in the test names are those of the rules before (predicted against measured, 41 draws).

// an invented quarry-grit sorter: two convolution → ReLU → max-pool stages and a four-class head
const QUARRY = `name: quarry-grit
description: invented quarry-grit sorter, two convolution stages and a four-class head
input: { channels: 3, height: 16, width: 16 }
training: { batch: 16, loss: { kind: cross-entropy, classes: 4 } }
${WIDE_PLAN}layers:
  - { type: conv2d, name: c1, channels: 8, kernel: 3, padding: same, bias: false, init: he-normal }
  - { type: relu, name: r1 }
  - { type: max-pool, name: p1, size: 2 }
  - { type: conv2d, name: c2, channels: 16, kernel: 3, padding: same, bias: false, init: he-normal }
  - { type: relu, name: r2 }
  - { type: max-pool, name: p2, size: 2 }
  - flatten
  - { type: dense, name: head, width: 4 }
`;

describe("the finite-width spread of a convolutional network's tensors", () => {
  const rows = measuredSpreads(QUARRY, "quarry-grit", 41);
  const cases: [string, string][] = [
    ["c1/pre-activation", "the first convolution's output (0.36 against 0.07 before)"],
    ["p1/activation", "the first pool's output (0.57 against 0.07 before)"],
    ["c2/pre-activation", "the second convolution's output (0.63 against 0.19 before)"],
    ["head/pre-activation", "the head's pre-activation after the flatten (0.87 against 0.55 before)"],
    ["head/weight-gradient", "the head's weight gradient (1.10 against 0.76 before)"],
  ];
  spreadsWithin(rows, cases);
});
