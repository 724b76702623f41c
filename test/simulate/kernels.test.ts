import { describe, expect, it } from "vitest";
import { buildGraph, forwardOrder, type GraphLayer } from "../../src/graph/index.js";
import { kernelFor, kernels, type KernelContext, type KernelForward } from "../../src/ops/kernels.js";
import { parseSpec } from "../../src/spec/index.js";
import { createRandom } from "../../src/numeric/random.js";
import { dot, gradientError, randomArray, testRandom } from "./gradcheck.js";

/**
 * Every family's kernels as the engine calls them (through src/ops/kernels.ts, on layers built from a spec),
 * checked against central finite differences (common practice): relative error below 1e-6 in binary64.
 */

const BATCH = 3;

function spec(input: string, layers: string, loss = "{ kind: mean-squared-error }"): GraphLayer[] {
  const text = `name: kernels\ninput: ${input}\ntraining:\n  batch: ${BATCH}\n  loss: ${loss}\nlayers:\n${layers}`;
  const parsed = parseSpec(text, "kernels.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  const built = buildGraph(parsed.spec);
  if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
  return built.graph.layers;
}

function elements(shape: GraphLayer["input"]): number {
  return shape.layout === "image" ? shape.channels * shape.height * shape.width : shape.layout === "features" ? shape.positions * shape.features : shape.positions;
}

type Weights = Map<GraphLayer, Record<string, Float64Array>>;

/** Run layers forward; returns the output and a backward function (which also collects weight gradients). */
function run(layers: readonly GraphLayer[], x: Float64Array, weights: Weights, seed: number) {
  const saved: { layer: GraphLayer; x: Float64Array; forward: KernelForward; ctx: KernelContext }[] = [];
  let current = x;
  for (const layer of layers) {
    const ctx: KernelContext = { batch: BATCH, random: createRandom(seed + layer.index).next, store: () => {} };
    if (layer.branch !== undefined) {
      const branch = layer.branch;
      let back: ((dy: Float64Array, grads: Map<string, Float64Array>) => Float64Array) | undefined;
      ctx.branchForward = (input) => {
        const r = run(branch, input, weights, seed);
        back = r.backward;
        return r.output;
      };
      const grads = new Map<string, Float64Array>();
      ctx.branchBackward = (dy) => back!(dy, grads);
    }
    const forward = kernelFor(layer.family).forward(layer, current, weights.get(layer)!, ctx);
    saved.push({ layer, x: current, forward, ctx });
    current = forward.output;
  }
  const backward = (dy: Float64Array, grads: Map<string, Float64Array>): Float64Array => {
    let d = dy;
    for (let i = saved.length - 1; i >= 0; i--) {
      const s = saved[i]!;
      if (s.layer.branch !== undefined) {
        // the branch's own weight gradients come back through this closure
        const inner = new Map<string, Float64Array>();
        let back: ((dy: Float64Array, grads: Map<string, Float64Array>) => Float64Array) | undefined;
        s.ctx.branchForward = (input) => {
          const r = run(s.layer.branch!, input, weights, seed);
          back = r.backward;
          return r.output;
        };
        s.ctx.branchForward(s.x);
        s.ctx.branchBackward = (g) => back!(g, inner);
        const r = kernelFor(s.layer.family).backward(s.layer, d, s.x, s.forward, weights.get(s.layer)!, s.ctx);
        for (const [k, v] of inner) grads.set(k, v);
        d = r.input ?? new Float64Array(0);
        continue;
      }
      const r = kernelFor(s.layer.family).backward(s.layer, d, s.x, s.forward, weights.get(s.layer)!, s.ctx);
      for (const [name, g] of Object.entries(r.weights)) grads.set(`${s.layer.name}/${name}`, g);
      d = r.input ?? new Float64Array(0);
    }
    return d;
  };
  return { output: current, backward };
}

function check(layers: GraphLayer[], seed: number, tokens?: number): void {
  const rnd = testRandom(seed);
  const weights: Weights = new Map();
  for (const layer of forwardOrder({ layers } as never)) {
    const w: Record<string, Float64Array> = {};
    for (const weight of layer.weights) {
      w[weight.name] = weight.name === "gain" ? Float64Array.from(randomArray(rnd, weight.elements, 0.3), (v) => 1 + v) : randomArray(rnd, weight.elements, 0.5 / Math.sqrt(Math.max(weight.fanIn, 1)));
    }
    weights.set(layer, w);
  }
  const first = layers[0]!;
  const n = BATCH * elements(first.input);
  const x = tokens === undefined ? randomArray(rnd, n) : Float64Array.from({ length: n }, () => Math.floor(rnd.next() * tokens));
  const probe = run(layers, x, weights, seed);
  const r = randomArray(rnd, probe.output.length);
  const f = (): number => dot(run(layers, x, weights, seed).output, r);
  const grads = new Map<string, Float64Array>();
  const dx = probe.backward(r, grads);
  if (tokens === undefined) expect(gradientError(f, x, dx)).toBeLessThan(1e-6);
  for (const layer of forwardOrder({ layers } as never)) {
    for (const [name, w] of Object.entries(weights.get(layer)!)) {
      const g = grads.get(`${layer.name}/${name}`);
      expect(g, `${layer.name}/${name}`).toBeDefined();
      expect(gradientError(f, w, g!), `${layer.name}/${name}`).toBeLessThan(1e-6);
    }
  }
}

describe("kernels through the registry, on layers built from specs", () => {
  it("the registry has kernels for every graph family", () => {
    expect(Object.keys(kernels).sort()).toEqual(
      ["activation", "attention", "average-pool", "batch-norm", "conv2d", "dense", "dropout", "embedding", "flatten", "gated-feed-forward", "layer-norm", "max-pool", "residual", "rms-norm"].sort(),
    );
  });

  it("an image network: conv2d (stride, padding), layer-norm and rms-norm over images, batch-norm, softmax over channels, pools, flatten, dense", () => {
    const layers = spec(
      "{ channels: 2, height: 6, width: 5, scale: 1 }",
      [
        "  - { type: conv2d, channels: 3, kernel: 3, stride: 1, padding: same, bias: true }",
        "  - layer-norm",
        "  - { type: conv2d, channels: 4, kernel: 3, stride: 2, padding: 1, bias: false }",
        "  - batch-norm",
        "  - tanh",
        "  - rms-norm",
        "  - softmax",
        "  - { type: average-pool, size: 2, stride: 1 }",
        "  - { type: max-pool, size: 2, stride: 1 }",
        "  - flatten",
        "  - { type: dropout, rate: 0.3 }",
        "  - { type: dense, width: 3 }",
      ].join("\n"),
    );
    check(layers, 40);
  });

  it("a sequence network: embedding, residual attention (causal), residual gated feed-forward, pooling over positions", () => {
    const layers = spec(
      "{ tokens: 5 }",
      [
        "  - { type: embedding, vocabulary: 11, width: 6 }",
        "  - type: residual",
        "    multiplier: 0.5",
        "    branch:",
        "      - rms-norm",
        "      - { type: attention, heads: 2, head-width: 3, causal: true, scaling: query }",
        "  - type: residual",
        "    branch:",
        "      - layer-norm",
        "      - { type: gated-feed-forward, hidden: 7, activation: gelu }",
        "  - { type: max-pool, size: 2, stride: 1 }",
        "  - { type: average-pool, size: 2, stride: 2 }",
        "  - { type: dense, width: 4, bias: true }",
      ].join("\n"),
    );
    check(layers, 41, 11);
  });

  it("a features network: non-causal attention without max subtraction, leaky-relu, softplus, silu, sigmoid, batch-norm over features", () => {
    const layers = spec(
      "{ features: 4, positions: 3, scale: 1 }",
      [
        "  - { type: attention, heads: 1, head-width: 4, causal: false, scaling: none, subtract-max: false }",
        "  - { type: dense, width: 5, bias: true }",
        "  - { type: leaky-relu, slope: 0.2 }",
        "  - batch-norm",
        "  - softplus",
        "  - { type: dense, width: 5 }",
        "  - silu",
        "  - sigmoid",
        "  - gelu",
        "  - { type: dense, width: 2 }",
      ].join("\n"),
    );
    check(layers, 42);
  });
});
