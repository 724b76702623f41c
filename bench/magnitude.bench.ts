/**
 * The magnitude engine's core call, predict(graph, spec), on a generated 1,000-layer spec (500 dense + ReLU pairs
 * of width 256, biases on, weight growth 1.1: both passes, forward and backward) and on every example in specs/.
 * Goal: under 20 ms for 1,000 layers. buildGraph on the same spec runs beside it as the baseline of the same run;
 * a second generated spec of 1,000 layers mixes residual attention, gated feed-forward and norms.
 */
import { readFileSync, readdirSync } from "node:fs";
import { bench, describe } from "vitest";
import { built } from "./built.js";
import type { Graph } from "../src/graph/index.js";
import type { LayerSpec, NetworkSpec } from "../src/spec/types.js";
import { base, mlpSpec } from "./generated-specs.js";

// the built library, loaded as a user's program loads it (bench/built.ts)
const { buildGraph } = await built<typeof import("../src/graph/index.js")>("graph/index.js");
const { predict } = await built<typeof import("../src/magnitude/index.js")>("magnitude/index.js");
const { parseSpec } = await built<typeof import("../src/spec/index.js")>("spec/index.js");

function transformerSpec(): NetworkSpec {
  const init = { kind: "normal", std: 0.02, gain: 1 } as const;
  const block: LayerSpec[] = [
    { family: "residual", name: "attn", path: ["b", 0], multiplier: 1, branch: [
      { family: "rms-norm", name: "norm", path: ["b", 1], gain: 1, epsilon: 1e-6 },
      { family: "attention", name: "self", path: ["b", 2], heads: 8, headWidth: 64, causal: true, scaling: "logits", subtractMax: true, init, outputInit: init },
    ] },
    { family: "residual", name: "mlp", path: ["b", 3], multiplier: 1, branch: [
      { family: "rms-norm", name: "norm", path: ["b", 4], gain: 1, epsilon: 1e-6 },
      { family: "gated-feed-forward", name: "ff", path: ["b", 5], hidden: 1376, activation: "silu", init, outputInit: init },
    ] },
  ];
  // 6 layers per block (2 residual adds, 2 norms, attention, gated feed-forward): 166 blocks ≈ 1,000 layers
  const layers: LayerSpec[] = [
    { family: "embedding", name: "embed", path: ["l", 0], vocabulary: 32000, width: 512, init, multiplier: 1 },
    { family: "repeat", name: "blocks", path: ["l", 1], times: 166, layers: block },
    { family: "rms-norm", name: "final", path: ["l", 2], gain: 1, epsilon: 1e-6 },
    { family: "dense", name: "head", path: ["l", 3], width: 32000, bias: false, init },
  ];
  return base("transformer-1000", layers, { kind: "tokens", positions: 512 }, { kind: "cross-entropy", classes: 32000, reduction: "mean" });
}

function graphOf(spec: NetworkSpec): Graph {
  const result = buildGraph(spec);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return result.graph;
}

function check(spec: NetworkSpec, graph: Graph): void {
  const p = predict(graph, spec);
  if (!(p.tensors.length > 0) || !Number.isFinite(p.tensors[p.tensors.length - 1]?.start.rms)) throw new Error(`${spec.name}: no finite prediction`);
}

const mlp = mlpSpec();
const mlpGraph = graphOf(mlp);
const transformer = transformerSpec();
const transformerGraph = graphOf(transformer);

describe("1,000-layer dense + ReLU spec", () => {
  bench("buildGraph (baseline)", () => {
    graphOf(mlp);
  });
  bench("predict", () => {
    check(mlp, mlpGraph);
  });
});

describe("1,000-layer transformer spec", () => {
  bench("buildGraph (baseline)", () => {
    graphOf(transformer);
  });
  bench("predict", () => {
    check(transformer, transformerGraph);
  });
});

describe("example specs", () => {
  for (const file of readdirSync("specs").filter((f) => f.endsWith(".yaml"))) {
    const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
    if (!parsed.ok) continue;
    const spec = parsed.spec;
    const graph = graphOf(spec);
    bench(`predict ${file} (${graph.layerCount} layers)`, () => {
      check(spec, graph);
    });
  }
});
