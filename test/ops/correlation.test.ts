/**
 * The correlation rules: sums over batch and positions with correlated terms, attention over correlated positions,
 * average-pool's copied gradient and batch norm's zero-sum gradient, and the ReLU units off for a whole batch.
 */
import { describe, expect, test } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import type { GraphLayer } from "../../src/graph/types.js";
import { predict } from "../../src/magnitude/index.js";
import { activationMoments } from "../../src/numeric/activations.js";
import { allBelowZero, crossMoments } from "../../src/ops/activation/analytic.js";
import { attentionRowSums, attentionRule } from "../../src/ops/attention/analytic.js";
import { correlatedSum, meanPairCorrelation } from "../../src/ops/common.js";
import { normRule } from "../../src/ops/norm/analytic.js";
import { poolRule } from "../../src/ops/pool/analytic.js";
import { dropoutRule } from "../../src/ops/dropout/analytic.js";
import type { Gradient, OpContext, Signal } from "../../src/ops/types.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { act, attention, conv, crossEntropy, dense, dropout, features, flatten, he, image, makeSpec, norm, pool } from "../magnitude/build-spec.js";

function layerOf(spec: NetworkSpec, name: string): GraphLayer {
  const built = buildGraph(spec);
  if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
  const found = built.graph.layers.find((l) => l.name === name);
  if (found === undefined) throw new Error(`no layer ${name}`);
  return found;
}

function context(batch: number): OpContext {
  return { batch, phase: "start", ledger: true, details: true, variance: (w) => w.variance, moments: activationMoments };
}

const signal = (q: number, positionCorrelation: number): Signal => ({ q, mean: 0, shared: 0, positionCorrelation, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true });

describe("correlatedSum: the variance of a sum of correlated terms", () => {
  test("equals the sum of every entry of the terms' covariance matrix (definition of the variance of a sum)", () => {
    const [B, P, q, rs, rp] = [3, 5, 0.7, 0.1, 0.45];
    let total = 0;
    for (let a = 0; a < B * P; a++) {
      for (let b = 0; b < B * P; b++) {
        const sameSample = Math.floor(a / P) === Math.floor(b / P);
        total += q * (a === b ? 1 : sameSample ? rp : rs);
      }
    }
    expect(correlatedSum(B, P, q, rs, rp)).toBeCloseTo(total, 12);
    // N·q·(1 + (N − 1)·ρ̄) with ρ̄ the mean over pairs (common practice)
    expect(correlatedSum(B, P, q, rs, rp)).toBeCloseTo(B * P * q * (1 + (B * P - 1) * meanPairCorrelation(B, P, rs, rp)), 12);
  });

  test("independent terms add up incoherently (N·q), identical ones coherently (N²·q)", () => {
    expect(correlatedSum(8, 4, 2, 0, 0)).toBeCloseTo(64, 12);
    expect(correlatedSum(8, 4, 2, 1, 1)).toBeCloseTo(32 * 32 * 2, 9);
  });
});

describe("attention over correlated positions", () => {
  const P = 16;
  const spec = makeSpec([attention("mix", 2, 8, { scaling: "query" }), dense("out", 4)], { input: features(16, P), loss: crossEntropy(4) });
  const layer = layerOf(spec, "mix");

  for (const rho of [0, 0.3, 1]) {
    test(`ρ = ${rho}: E[o²] = E[v²]·(Σp² + ρ(1 − Σp²) + (1 − ρ)(τ − Σp²)/D), the weighted mean of equicorrelated values plus the query's tilt`, () => {
      const result = attentionRule.forward(context(4), layer, signal(1, rho), {});
      const value = result.stash.value.q;
      const rows = attentionRowSums(P, false, result.stash.query.q * result.stash.key.q * 8 * (1 / 8));
      const sumSquares = rows.sumSquares;
      // the tilt along one of the input's 16 directions (own algebra, src/ops/attention/analytic.ts rowTiltExcess)
      expect(rows.tiltExcess).toBeGreaterThan(0);
      expect(result.stash.heads.q / value).toBeCloseTo(sumSquares + rho * (1 - sumSquares) + ((1 - rho) * rows.tiltExcess) / 16, 12);
      // the formula is the quadratic form Σ_i Σ_j p_i p_j C_ij with C_ij = ρ + (1 − ρ)·[i = j] for any weights summing to 1
      const weights = Array.from({ length: P }, (_, i) => Math.exp(Math.sin(3 * i)));
      const total = weights.reduce((a, b) => a + b, 0);
      const p = weights.map((w) => w / total);
      let quadratic = 0;
      for (let i = 0; i < P; i++) for (let j = 0; j < P; j++) quadratic += p[i]! * p[j]! * (i === j ? 1 : rho);
      const squares = p.reduce((a, b) => a + b * b, 0);
      expect(squares + rho * (1 - squares)).toBeCloseTo(quadratic, 14);
      // two rows average the same values: they share 1/P + ρ(1 − 1/P) of E[v²]
      expect(result.stash.heads.positionCorrelation! * result.stash.heads.q).toBeCloseTo(value * (1 / P + rho * (1 - 1 / P)), 12);
    });
  }

  test("fully correlated positions do not shrink (rank collapse, Dong et al. 2021) and give the softmax Jacobian nothing to pass", () => {
    const result = attentionRule.forward(context(4), layer, signal(1, 1), {});
    expect(result.stash.heads.q).toBeCloseTo(result.stash.value.q, 12);
    const back = attentionRule.backward(context(4), layer, result.stash, { q: 1, zeroFraction: 0, shape: "gaussian", logVar: 0 }, {});
    const logits = back.inner.find((g) => g.suffix === "logits");
    expect(logits?.gradient.q).toBe(0);
  });
});

describe("average-pool copies its gradient: fully correlated within a window", () => {
  const spec = makeSpec([conv("c", 4), pool("avg", "average-pool", 4), flatten("f"), dense("out", 3)], { input: image(2, 8, 8), loss: crossEntropy(3) });
  const layer = layerOf(spec, "avg");
  const output: Gradient = { q: 2, zeroFraction: 0, shape: "gaussian", logVar: 0, positionCorrelation: 0 };
  const back = poolRule.backward(context(4), layer, null, output, {});

  test("pairs of pixels in one window share everything, pairs in different windows what the output pixels share", () => {
    // 64 input pixels, windows of 16: a pixel has 15 partners in its window out of 63
    expect(back.input?.positionCorrelation).toBeCloseTo(15 / 63, 12);
  });

  test("the sum over a sample's pixels keeps its second moment (every window passes its whole gradient)", () => {
    const input = back.input as Gradient;
    expect(correlatedSum(1, 64, input.q, 0, input.positionCorrelation ?? 0)).toBeCloseTo(correlatedSum(1, 4, output.q, 0, 0), 12);
  });

  test("one window over the whole image: position correlation 1", () => {
    const whole = layerOf(makeSpec([conv("c", 4), pool("avg", "average-pool", 8), flatten("f"), dense("out", 3)], { input: image(2, 8, 8), loss: crossEntropy(3) }), "avg");
    expect(poolRule.backward(context(4), whole, null, output, {}).input?.positionCorrelation).toBeCloseTo(1, 12);
  });
});

/** A batch norm over 6×6 pixels followed by a ReLU, its forward run on an input of second moment 2. */
function batchNormCase(input: Signal): { layer: GraphLayer; ctx: OpContext; forward: ReturnType<typeof normRule.forward> } {
  const spec = makeSpec([conv("c", 4), norm("bn", "batch-norm"), act("r"), flatten("f"), dense("out", 3)], { input: image(2, 6, 6), loss: crossEntropy(3) });
  const layer = layerOf(spec, "bn");
  const ctx = context(8);
  return { layer, ctx, forward: normRule.forward(ctx, layer, input, {}) };
}

describe("batch norm's gradient sums to zero over batch × pixels (Ioffe & Szegedy 2015, backward pass)", () => {
  test("the input gradient's sample and position correlations cancel in the channel sum", () => {
    const { layer, ctx, forward } = batchNormCase({ ...signal(2, 0.2), mean: 0.5, shared: 0.3 });
    const back = normRule.backward(ctx, layer, forward.stash, { q: 1, zeroFraction: 0, shape: "gaussian", logVar: 0, shared: 0.1, positionCorrelation: 0.6 }, {});
    const input = back.input as Gradient;
    expect(input.q).toBeGreaterThan(0);
    expect(correlatedSum(8, 36, input.q, (input.shared ?? 0) / input.q, input.positionCorrelation ?? 0)).toBeCloseTo(0, 12);
  });
});

describe("a norm's gain gradient when a ReLU gates the gradient right after it", () => {
  test("x̂·relu'(x̂)·b = relu(x̂)·b: pixels with a shared b (an average-pool's copy) share E[relu(u)relu(v)] = q/2π at c = 0 (Cho & Saul 2009)", () => {
    const { layer, ctx, forward } = batchNormCase(signal(2, 0));
    const gated: Gradient = { q: 0.5, zeroFraction: 0.5, shape: "gaussian", logVar: 0, shared: 0, positionCorrelation: 0.5, reluGated: { sample: 0, position: 1, cross: 0 } };
    const gain = normRule.backward(ctx, layer, forward.stash, gated, {}).weightGradients.find((w) => w.weight === "gain");
    const ns = forward.stash.normalisedSecond;
    // diagonal E[x̂²·1(x̂ > 0)]·E[b²] = (ns/2)·1; pairs of pixels (ns/2π)·1, i.e. correlation 1/π; pairs of samples the same mean part
    expect(gain?.q).toBeCloseTo(correlatedSum(8, 36, ns * 0.5, 0, 1 / Math.PI), 9);
    const ungated = normRule.backward(ctx, layer, forward.stash, { ...gated, reluGated: undefined }, {}).weightGradients.find((w) => w.weight === "gain");
    expect(ungated?.q).toBeCloseTo(8 * 36 * ns * 0.5, 9);
  });

  test("two samples at two positions pair by the gradient's own cross correlation, not its sample one (a flatten's positions meet independent weights)", () => {
    const { layer, ctx, forward } = batchNormCase(signal(2, 0));
    // b shared by two samples at one position (the same weights after a flatten), unrelated at two
    const gated: Gradient = { q: 0.5, zeroFraction: 0.5, shape: "gaussian", logVar: 0, shared: 0.25, positionCorrelation: 0, crossCorrelation: 0, reluGated: { sample: 0.5, position: 0, cross: 0 } };
    const gain = normRule.backward(ctx, layer, forward.stash, gated, {}).weightGradients.find((w) => w.weight === "gain");
    const ns = forward.stash.normalisedSecond;
    // at c = 0 a pair of relu(x̂) shares q/2π (Cho & Saul 2009): a pair of terms 0.5/π at one position, 0 at two
    expect(gain?.q).toBeCloseTo(correlatedSum(8, 36, ns * 0.5, 0.5 / Math.PI, 0, 0), 9);
  });
});

describe("ReLU units off for the whole batch give exact zeros in the weight gradients", () => {
  test("bias gradient: P(a unit is off for all B samples) at the pre-activations' correlation; weights: either side all zero", () => {
    const B = 16;
    const spec = makeSpec([dense("d1", 64, he, true), act("r1"), dense("d2", 64, he, true), act("r2"), dense("out", 4, he, true)], { input: features(64), loss: crossEntropy(4), training: { batch: B } });
    const built = buildGraph(spec);
    if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
    const p = predict(built.graph, spec);
    const get = (id: string) => p.tensors.find((t) => t.id === id)!.start;
    // independent inputs: d1's pre-activations are uncorrelated across samples, d2's correlated by the ReLU map
    // c = 1/π (Cho & Saul 2009: (√(1 − 0) + (π − π/2)·0)/π)
    const c2 = (2 * crossMoments("relu", 0, 1, 0, activationMoments("relu", 1)).value) / 1;
    expect(c2).toBeCloseTo(1 / Math.PI, 12);
    const off2 = allBelowZero(c2, B);
    expect(get("d1/weight-gradient:bias").zeroFraction).toBeCloseTo(allBelowZero(0, B), 12);
    expect(get("d2/weight-gradient:bias").zeroFraction).toBeCloseTo(off2, 9);
    // d2's weight gradient: its own unit off (off2) or its input (r1's output) zero for the whole batch (2^−B)
    expect(get("d2/weight-gradient").zeroFraction).toBeCloseTo(1 - (1 - off2) * (1 - allBelowZero(0, B)), 9);
    expect(get("out/weight-gradient").zeroFraction).toBeCloseTo(off2, 9);
    // the ledger says it in words
    const ledger = p.tensors.find((t) => t.id === "d2/weight-gradient:bias")!.ledger;
    expect(ledger.some((e) => e.rule.startsWith("weight gradient: sum of 16 gradients") && e.rule.includes("1 + (N − 1)·ρ̄"))).toBe(true);
  });
});

// Pairs of two samples: routing (max-pool) and copying (average-pool) keep each sample's sum over pixels, so the sum
// over every pair of two samples' pixels keeps its expectation, P·ρ_sample·q + P(P − 1)·ρ_cross·q on either side (the
// variance of a sum, common practice); the third correlation is carried only where set (a flatten's gradient sets 0).
describe("two samples at two pixels through the pools", () => {
  const twoSamplePairs = (g: Gradient, pixels: number): number => {
    const rs = (g.shared ?? 0) / g.q;
    return pixels * rs * g.q + pixels * (pixels - 1) * (g.crossCorrelation ?? rs) * g.q;
  };
  for (const family of ["max-pool", "average-pool"] as const) {
    test(`${family}: the pairs of two samples keep their sum`, () => {
      const spec = makeSpec([conv("c", 4), pool("p", family, 2), flatten("f"), dense("out", 3)], { input: image(2, 8, 8), loss: crossEntropy(3) });
      const layer = layerOf(spec, "p");
      for (const cross of [0, 0.02, 0.1]) {
        const output: Gradient = { q: 2, zeroFraction: 0, shape: "gaussian", logVar: 0, shared: 0.2, positionCorrelation: 0.3, crossCorrelation: cross };
        const input = poolRule.backward(context(4), layer, null, output, {}).input as Gradient;
        expect(input.crossCorrelation).toBeDefined();
        expect(twoSamplePairs(input, 64)).toBeCloseTo(twoSamplePairs(output, 16), 10);
      }
      // unset, it stays unset: the sample correlation stands in, as before
      const plain = poolRule.backward(context(4), layer, null, { q: 2, zeroFraction: 0, shape: "gaussian", logVar: 0, shared: 0.2 }, {}).input as Gradient;
      expect(plain.crossCorrelation).toBeUndefined();
    });
  }
});

// Inverted dropout multiplies by independent masks m/keep with E[m] = keep (Srivastava et al. 2014): two elements keep
// E[x·x'] while E[x²] grows by 1/keep, so a correlation relative to E[x²] shrinks by keep
describe("dropout: correlations relative to q shrink by the keep rate", () => {
  const spec = makeSpec([dense("d", 8), dropout("drop", 0.25), dense("out", 3)], { input: features(8, 16), loss: crossEntropy(3) });
  const layer = layerOf(spec, "drop");
  test("forward: two positions keep their product", () => {
    const input = signal(2, 0.4);
    const output = dropoutRule.forward(context(4), layer, input, {}).output;
    expect(output.q * (output.positionCorrelation ?? 0)).toBeCloseTo(input.q * 0.4, 12);
  });
  test("backward: two positions, and two samples at two positions, keep their products", () => {
    const output: Gradient = { q: 2, zeroFraction: 0, shape: "gaussian", logVar: 0, shared: 0.2, positionCorrelation: 0.4, crossCorrelation: 0.05 };
    const input = dropoutRule.backward(context(4), layer, null, output, {}).input as Gradient;
    expect(input.q * (input.positionCorrelation ?? 0)).toBeCloseTo(output.q * 0.4, 12);
    expect(input.q * (input.crossCorrelation ?? 0)).toBeCloseTo(output.q * 0.05, 12);
    expect(input.shared).toBe(0.2);
  });
});
