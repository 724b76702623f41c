import { describe, expect, it } from "vitest";
import { measuredDifferences, WIDE_PLAN } from "../helpers/simulated.js";
import { createRandom } from "../../src/numeric/index.js";
import { normPullback } from "../../src/ops/norm/analytic.js";

// The loss's curvature at the start (see loss-curvature.test.ts) used to stop at a norm or a dropout layer, so the
// weights below them lost the part of their gradient that is the same in every micro-batch: up to 1.6 binades low with
// 4 accumulation steps. A layer or RMS norm passes g²/(s² + ε)·(M − ρ·(tr M/n)·I) down (its scale invariance takes the
// diagonal's mean out; a layer norm's centring also makes the rows sum to zero), dropout E[D·M·D] = M + (1/keep − 1)·
// diag(M). Each check is against the project's float64 simulation (src/simulate: the described network run forward
// and backward on random data, median of 5 draws); the figures in the comments are the differences before the rule.


describe("the loss's curvature through norms and dropout", () => {
  it("through an RMS norm: the weights below it (1.57 binades low before)", () => {
    // an invented dune survey: 64 readings, a dense layer of 96, an RMS norm, 16 outputs, squared error
    const yaml = `name: dune-survey
description: invented
input: { features: 64 }
training: { batch: 256, accumulation-steps: 4, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 96 }
  - { type: rms-norm, name: tidy }
  - { type: dense, name: head, width: 16 }
`;
    // 21 draws: the bias gradient's own draw-to-draw spread is about 0.3 binade, so a median of 5 is good to ±0.16 only
    // (standard error of a median ≈ 1.25·σ/√n); since the norms pass the samples' cosine on, 5 draws read −0.256 where
    // 101 read −0.034
    const d = measuredDifferences(yaml, "dune-survey", /^lower\/weight-gradient/, 21);
    expect(d.size).toBe(2);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("through a layer norm after a sigmoid: the weights (1.53 binades low before) and, with the centring, the bias", () => {
    // an invented felt press: the sigmoid's mean 1/2 is what the centring removes; without it the bias gradient would
    // sum M_ii·E[φ'φ] coherently over the batch (3 binades high), with it M_ii·Cov(φ', φ) = 0
    const yaml = `name: felt-press
description: invented
input: { features: 64 }
training: { batch: 256, accumulation-steps: 4, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 96 }
  - { type: sigmoid, name: squash }
  - { type: layer-norm, name: tidy }
  - { type: dense, name: head, width: 16 }
`;
    const d = measuredDifferences(yaml, "felt-press", /^(lower|squash)\/(weight|activation)-gradient/);
    expect([...d.keys()].sort()).toEqual(["lower/activation-gradient", "lower/weight-gradient", "lower/weight-gradient:bias", "squash/activation-gradient"]);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("through a layer norm under cross-entropy (0.75 binade low before)", () => {
    // an invented moth-wing classifier: tanh, layer norm, 10 classes
    const yaml = `name: moth-wings
description: invented
input: { features: 64 }
training: { batch: 512, accumulation-steps: 4, loss: { kind: cross-entropy, classes: 10 } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 96 }
  - { type: tanh, name: squash }
  - { type: layer-norm, name: tidy }
  - { type: dense, name: head, width: 10 }
`;
    const d = measuredDifferences(yaml, "moth-wings", /^lower\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
  });

  it("through dropout: the weights below it (0.96 binade low before)", () => {
    // an invented hive scale: ReLU, dropout at rate 1/2, squared error
    const yaml = `name: hive-weights
description: invented
input: { features: 64 }
training: { batch: 256, accumulation-steps: 4, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 96 }
  - { type: relu, name: gate }
  - { type: dropout, name: drop, rate: 0.5 }
  - { type: dense, name: head, width: 16 }
`;
    const d = measuredDifferences(yaml, "hive-weights", /^lower\/weight-gradient$/);
    expect(d.size).toBe(1);
    for (const [id, value] of d) expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.3);
  });
});

describe("the norm's pullback of the curvature", () => {
  it("matches a Monte Carlo count of E[Jᵀ·M·y·zᵀ]/s² for an RMS norm over Gaussian inputs (Stein's lemma)", () => {
    // a fixed diagonal M (entries d_i) and y = z/√(mean z²) with ε = 0: the rule says the diagonal of the effective
    // matrix is d_i − mean(d) (ρ = 1), so its mean is 0 and its square mean the entries' variance
    const n = 8;
    const d = [0.2, 0.5, 0.9, 1.4, 0.3, 0.7, 1.1, 0.6];
    const random = createRandom(7);
    const gaussian = (): number => Math.sqrt(-2 * Math.log(Math.max(random.next(), 1e-300))) * Math.cos(2 * Math.PI * random.next());
    const draws = 200000;
    const effective = new Array<number>(n).fill(0);
    for (let t = 0; t < draws; t++) {
      const z = Array.from({ length: n }, gaussian);
      const s2 = z.reduce((a, v) => a + v * v, 0) / n;
      const s = Math.sqrt(s2);
      const y = z.map((v) => v / s);
      const my = y.map((v, i) => d[i]! * v);
      const ymy = y.reduce((a, v, i) => a + v * my[i]!, 0);
      // δ_z = Jᵀ·M·y with J = (I − y yᵀ/n)/s
      for (let i = 0; i < n; i++) effective[i]! += ((my[i]! - (y[i]! * ymy) / n) / s) * z[i]!;
    }
    // exact for finite n (u = z/|z| uniform on the sphere, E[(uᵀMu)·u uᵀ] = (tr M·I + 2M)/(n(n + 2)), the fourth
    // moments of a uniform unit vector, from memory): E[δ_z·zᵀ] = M − (tr M·I + 2M)/(n + 2), with s² = 1 here
    const trace = d.reduce((a, v) => a + v, 0);
    for (let i = 0; i < n; i++) expect(effective[i]! / draws).toBeCloseTo(d[i]! - (trace + 2 * d[i]!) / (n + 2), 2);
    // and the rule's statistics at leading order: diagonal (1 − ρ)·mean, diagonalSquare E[d²] − mean²
    const mean = trace / n;
    const square = d.reduce((a, v) => a + v * v, 0) / n;
    const pulled = normPullback({ diagonal: mean, diagonalSquare: square, rowSquares: square }, 1, 1);
    expect(pulled.diagonal).toBe(0);
    expect(pulled.diagonalSquare).toBeCloseTo(square - mean * mean, 12);
    expect(pulled.rowSquares).toBeCloseTo(square - mean * mean, 12);
  });
});

describe("a residual branch's seed", () => {
  it("scales what samples share of the gradient, and the curvature, by the multiplier² (branch biases 0.8–1.4 binades high before)", () => {
    // an invented river-gauge forecaster: pre-norm residual blocks with multiplier 1/2; δ_F = α·δ_out, so the part the
    // samples share (which the bias gradient sums coherently) is α² of the stream's, and the curvature α²·M
    const yaml = `name: river-gauge
description: invented
input: { features: 64, positions: 8 }
training: { batch: 16, loss: { kind: mean-squared-error } }
${WIDE_PLAN}blocks:
  blk:
    - type: residual
      multiplier: 0.5
      branch:
        - { type: rms-norm }
        - { type: dense, width: 64 }
        - silu
        - { type: dense, width: 64 }
layers:
  - { type: dense, name: inp, width: 64 }
  - { type: repeat, times: 4, layers: [ { type: use, block: blk } ] }
  - { type: rms-norm, name: final }
  - { type: dense, name: head, width: 4 }
`;
    // the median of 41 draws: these sums spread 0.3–0.45 binade from draw to draw, so a median of 5 strays by about
    // 1.25·σ/√5 ≈ 0.2 binade by chance (the standard error of a median), the tolerance itself
    const d = measuredDifferences(yaml, "river-gauge", /residual-0\.dense-[13]\/weight-gradient:bias$/, 41);
    expect(d.size).toBe(8);
    for (const [id, value] of d) {
      // over 41 draws every one of the eight reads within 0.06 binade (−0.003 to −0.060). The last dense of each branch
      // was 1.26–1.42 binades high before the seed scaled the shared part by α²; the first dense layer's were 0.21–0.34
      // high once the seed carried the skip's (α·q_x/q_F)·M·J̄ᵀ, while the dense pullback counted that non-symmetric
      // part's square twice on the diagonal and the SiLU took its mean as E[φ'φ]·(WᵀAW)_ii where Stein's lemma gives
      // E[φ'']·Cov(u, g) (own algebra, Curvature.skip). The readings at 5 draws (0.4–0.5 high for the last dense,
      // 0.12–0.24 for the first) were the median's own scatter
      expect(Math.abs(value), `${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
    }
  });
});

describe("two features of a random linear map's output share its inputs", () => {
  it("the weights above a norm fed by a dense layer: E[x xᵀ] is not diagonal (0.61 and 0.45 binade low before)", () => {
    // z = W·x gives Cov(z_i, z_j) = Σ_k W_ik·W_jk·var(x), of square var_w²·fan_in·var(x)² = q²/fan_in: the curvature's
    // N·M·W·E[x xᵀ] holds the (width − 1) off-diagonal covariances of each row as well, here 1 + 95/64 times the diagonal
    const squared = `name: dune-survey
description: invented
input: { features: 64 }
training: { batch: 256, accumulation-steps: 4, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 96 }
  - { type: rms-norm, name: tidy }
  - { type: dense, name: head, width: 16 }
`;
    const classes = `name: moth-wings
description: invented
input: { features: 64 }
training: { batch: 512, accumulation-steps: 4, loss: { kind: cross-entropy, classes: 10 } }
${WIDE_PLAN}layers:
  - { type: dense, name: lower, width: 96 }
  - { type: tanh, name: squash }
  - { type: layer-norm, name: tidy }
  - { type: dense, name: head, width: 10 }
`;
    for (const [yaml, name] of [
      [squared, "dune-survey"],
      [classes, "moth-wings"],
    ] as const) {
      const d = measuredDifferences(yaml, name, /^head\/weight-gradient$/);
      expect(d.size).toBe(1);
      for (const [id, value] of d) expect(Math.abs(value), `${name} ${id}: ${value.toFixed(2)}`).toBeLessThan(0.25);
    }
  });
});
