import { describe, expect, it } from "vitest";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";
import { lossSeed } from "../../src/magnitude/loss.js";
import { createRandom } from "../../src/numeric/index.js";
import { densePullback } from "../../src/ops/dense/analytic.js";

// At the start of training the labels are independent of the inputs, and the loss gradient at a layer's output holds
// the layer's own output through the loss's curvature M (δ = M·y + what does not depend on the layer). A weight
// gradient Σ_t δ_t·x_tᵀ then holds N·M·W·E[x xᵀ] in every micro-batch (Stein's lemma), and a gradient at a unit holds
// M_ii times that unit's own output. The independent-terms rule missed both: up to 2 binades low. Each check below is
// against the project's float64 simulation (src/simulate: the described network run forward and backward on random
// data, median of 5 draws); the figures in the comments are the differences before the rule.


describe("the loss's curvature through a layer's own weights", () => {
  it("a one-layer regressor's weight gradient (0.81 binade low before)", () => {
    // an invented kiln probe: 256 readings to 16 temperatures, squared error, batch 1024; the part N·(2/M)·W·E[x²]
    // is √2× the independent part here (N/fan_in · q_y/(q_y + q_t) = 4 · 1/2)
    const yaml = `name: kiln-probe
description: invented
input: { features: 256 }
training: { batch: 1024, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: probe, width: 16, bias: true }
`;
    const d = measuredDifferences(yaml, "kiln-probe", /^probe\/weight-gradient/);
    expect(d.size).toBe(2);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.2);
  });

  it("the same regressor over 4 accumulation steps and 2 averaging workers: the aligned part adds coherently (2.08 binades low before)", () => {
    // each micro-batch holds the same N·M·W·E[x xᵀ], so A·W micro-batches add it as (A·W)², not A·W
    const yaml = `name: kiln-probe
description: invented
input: { features: 256 }
training: { batch: 1024, accumulation-steps: 4, workers: 2, worker-gradients: average, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: probe, width: 16, bias: true }
`;
    const d = measuredDifferences(yaml, "kiln-probe", /^probe\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.2);
  });

  it("a two-layer regressor's hidden weights, bias and unit gradients (1.68, 1.30, 0.44 binade low before)", () => {
    // an invented orchard-yield model: 128 soil readings, a ReLU layer of 64, 64 outputs, batch 2048
    const yaml = `name: orchard-yield
description: invented
input: { features: 128 }
training: { batch: 2048, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: hidden, width: 64, bias: true }
  - { type: relu, name: gate }
  - { type: dense, name: head, width: 64, bias: true }
`;
    const d = measuredDifferences(yaml, "orchard-yield", /gradient/);
    expect([...d.keys()].sort()).toEqual([
      "gate/activation-gradient",
      "head/activation-gradient",
      "head/weight-gradient",
      "head/weight-gradient:bias",
      "hidden/activation-gradient",
      "hidden/weight-gradient",
      "hidden/weight-gradient:bias",
    ]);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("through a flatten: a position-wise layer sees its own position's block of the curvature (2.64 and 0.23 binades low before)", () => {
    // an invented kiln reader: 4 rows of 32 sensors, a row-wise ReLU layer, flattened into a 128-output head
    const yaml = `name: kiln-rows
description: invented
input: { features: 32, positions: 4 }
training: { batch: 1024, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: rowwise, width: 32 }
  - relu
  - flatten
  - { type: dense, name: head, width: 128 }
`;
    const d = measuredDifferences(yaml, "kiln-rows", /^rowwise\/(weight-gradient|activation-gradient)$/);
    expect(d.size).toBe(2);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("a gated feed-forward layer under a wide head: its three weights (1.50, 1.65, 1.87 binades low before), and the head's bias (1.42)", () => {
    // an invented loom-tension regressor: one gated block (ReLU gate) into 64 outputs, batch 2048. The head's bias
    // sums the gated product's own mean, E[φ(g)·u] = E[φ'(g)]·Cov(g, u) for one unit (Stein's lemma)
    const yaml = `name: loom-tension
description: invented
input: { features: 64 }
training: { batch: 2048, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: gated-feed-forward, name: ff, hidden: 128, activation: relu }
  - { type: dense, name: head, width: 64 }
`;
    const d = measuredDifferences(yaml, "loom-tension", /^(ff\/weight-gradient:(gate|up|down)|head\/weight-gradient:bias)$/);
    expect(d.size).toBe(4);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.4);
  });

  it("the gain of a norm right before a softmax classifier (1.93 binades low before)", () => {
    // an invented reef-sound classifier: the gain gradient Σ_t x̂·δ holds N·g·E[x̂²]·(Wᵀ·M·W)_ii in every micro-batch,
    // of one sign for every feature
    const yaml = `name: reef-sounds
description: invented
input: { features: 96 }
training: { batch: 1024, loss: { kind: cross-entropy, classes: 12 } }
${WIDE_PLAN}layers:
  - { type: dense, name: second, width: 64, bias: true }
  - { type: relu, name: gate }
  - { type: layer-norm, name: tidy }
  - { type: dense, name: head, width: 12, bias: true }
`;
    const d = measuredDifferences(yaml, "reef-sounds", /^(tidy\/weight-gradient:gain|head\/weight-gradient)$/);
    expect(d.size).toBe(2);
    expect(Math.abs(d.get("tidy/weight-gradient:gain")!)).toBeLessThan(0.25);
    // (0.77 low before; the part left is not this rule's)
    expect(Math.abs(d.get("head/weight-gradient")!)).toBeLessThan(0.35);
  });
});

describe("the curvature through many layers", () => {
  it("a deep narrow tanh stack: the pulled-back rows stay within the bound of a Gauss–Newton matrix (up to 3.98 binades above the simulation before), and the gradient meets the output's own spread again (up to 3.04 binades above before, 101 draws)", () => {
    // an invented glacier-melt surrogate: 80 tanh layers of width 24, one output, squared error with small targets (the
    // output's own value dominates the loss gradient). Counting the rows' squares as independent entries compounded
    // through the narrow layers; a positive semidefinite M has M_ij² ≤ M_ii·M_jj (Cauchy–Schwarz). Then the gradient's
    // draw-to-draw spread: δ_ℓ = k·(y − t)·b_ℓ with y = b_ℓ·x_ℓ, so the seed's e·ln‖y‖² holds ln‖b_ℓ‖², the very
    // spread the transposed maps add (Var 2e·V_b more; a Monte Carlo of 400 draws measures ln-variances up to 12.2 where
    // the rules without it gave 8.9): the predictions sat 2–3 binades above the measurement from the middle of the stack
    // down. Left: the middle layers' gradients and bias gradients still 0.8–1.5 binades above the simulation. Not the
    // curved activation's E[φ''φ] (the pre-activations' q is below 0.05 from layer 10 up, where E[φ''φ] ≈ −2q); the
    // median of a spread this wide (V ≈ 6–17) is where the log-normal law is least exact
    const yaml = `name: meltwater-deep
description: invented
input: { features: 12 }
training: { batch: 32, loss: { kind: mean-squared-error, target-scale: 0.01 } }
${WIDE_PLAN}layers:
  - type: repeat
    name: stack
    times: 80
    layers:
      - { type: dense, width: 24, init: glorot-normal }
      - tanh
  - { type: dense, name: out, width: 1 }
`;
    // a spread of ~2 binades per draw: 5 draws cannot resolve a binade, 101 resolve ~0.2
    const d = measuredDifferences(yaml, "meltwater-deep", /gradient/, 101);
    expect(d.size).toBeGreaterThan(300);
    for (const [id, value] of d) {
      expect(value, `${id}: ${value.toFixed(2)}`).toBeGreaterThan(-1.8);
      expect(value, `${id}: ${value.toFixed(2)}`).toBeLessThan(0.8);
    }
    const values = [...d.values()];
    // 1.90 before, 0.59 after
    expect(values.reduce((sum, v) => sum + Math.abs(v), 0) / values.length).toBeLessThan(0.75);
  });
});

describe("the curvature the loss seeds", () => {
  const output = { q: 1e-12, mean: 0, zeroFraction: 0, shape: "gaussian" as const, logVar: 0, gaussian: true };
  it("squared error: ∂δ/∂y = 2/M·I (mean over M = batch × outputs; common practice)", () => {
    const seed = lossSeed({ kind: "mean-squared-error", reduction: "mean", targetScale: 1 }, output, 8, 1, 4, 1, "start", undefined);
    expect(seed.gradient.curvature).toEqual({ diagonal: 2 / 32, diagonalSquare: (2 / 32) ** 2, rowSquares: (2 / 32) ** 2 });
  });
  it("cross-entropy at equal logits: ∂(p − y)/∂z = diag(p) − p pᵀ with p = 1/C (common practice)", () => {
    const C = 10;
    const seed = lossSeed({ kind: "cross-entropy", reduction: "mean", classes: C }, output, 8, 1, C, 1, "start", undefined);
    const h = (1 / 8) * (1 / C - 1 / (C * C));
    expect(seed.gradient.curvature!.diagonal).toBeCloseTo(h, 12);
    // a row: h on the diagonal, −1/C² (= −h/(C − 1)) in each of the C − 1 others
    expect(seed.gradient.curvature!.rowSquares).toBeCloseTo(h * h + (C - 1) * (1 / 8 / (C * C)) ** 2, 14);
  });
  it("none at the end of the horizon, where the labels have been fitted", () => {
    const seed = lossSeed({ kind: "mean-squared-error", reduction: "mean", targetScale: 1 }, output, 8, 1, 4, 1, "end", 0.1);
    expect(seed.gradient.curvature).toBeUndefined();
  });
});

describe("the curvature pulled back through a dense layer", () => {
  it("matches a Monte Carlo count over random weights (Isserlis' theorem: E[(WᵀMW)_ij²])", () => {
    // M = a fixed symmetric n × n matrix with independent diagonal draws; W n × m with entries N(0, v)
    const n = 12;
    const m = 20;
    const v = 0.3;
    const random = createRandom(7);
    const gaussian = (): number => {
      const u = Math.max(random.next(), 1e-300);
      return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * random.next());
    };
    const M: number[][] = Array.from({ length: n }, () => new Array<number>(n).fill(0));
    for (let i = 0; i < n; i++) {
      M[i]![i] = 0.5 + 0.2 * gaussian();
      for (let j = 0; j < i; j++) M[i]![j] = M[j]![i] = 0.1 * gaussian();
    }
    let diagonal = 0;
    let diagonalSquare = 0;
    let rowSquares = 0;
    for (let i = 0; i < n; i++) {
      diagonal += M[i]![i]! / n;
      diagonalSquare += M[i]![i]! ** 2 / n;
      for (let j = 0; j < n; j++) rowSquares += M[i]![j]! ** 2 / n;
    }
    const draws = 4000;
    let d = 0;
    let d2 = 0;
    let r = 0;
    for (let draw = 0; draw < draws; draw++) {
      const W = Array.from({ length: n }, () => Array.from({ length: m }, () => Math.sqrt(v) * gaussian()));
      // row 0 of Wᵀ M W
      const MW0 = new Array<number>(n).fill(0);
      for (let c = 0; c < n; c++) for (let k = 0; k < n; k++) MW0[c]! += M[c]![k]! * W[k]![0]!;
      for (let j = 0; j < m; j++) {
        let value = 0;
        for (let c = 0; c < n; c++) value += W[c]![j]! * MW0[c]!;
        if (j === 0) {
          d += value / draws;
          d2 += (value * value) / draws;
        }
        r += (value * value) / draws;
      }
    }
    // the rule takes the diagonal entries as independent draws of mean `diagonal`: E[(tr M)²] then is the trace² of
    // this M plus n times their variance, so compare with this M's own trace
    const pulled = densePullback({ diagonal, diagonalSquare: diagonal * diagonal, rowSquares }, v, n, m);
    expect(d / pulled.diagonal).toBeCloseTo(1, 1);
    expect(d2 / pulled.diagonalSquare).toBeCloseTo(1, 1);
    expect(r / pulled.rowSquares).toBeCloseTo(1, 1);
  });
});
