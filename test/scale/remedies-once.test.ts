// The remedies of an empty window hold the tensors that set its edges in binary32, greedily from each edge. Where one
// tensor sets both edges (a deep plain stack whose last weight gradient both flushes at small scales early in the
// horizon and overflows at every scale late in it: a scenario of our own) the two greedy lists coincide; a held set is
// told once, and each set's window is still a fresh search's over the tensors not held.
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { limitsFor } from "../../src/risk/index.js";
import { boundedLossScaleCurves, lossScaleAnswer } from "../../src/scale/recommend.js";
import { DEFAULT_WINDOW_OPTIONS, lossScaleWindow } from "../../src/scale/window.js";
import type { NetworkSpec } from "../../src/spec/types.js";

function deepStack(pairs: number, width: number): NetworkSpec {
  const layers: Record<string, unknown>[] = [];
  const he = { kind: "he", distribution: "normal", gain: 1 };
  for (let i = 0; i < pairs; i++) {
    layers.push({ family: "dense", name: `d${i}`, path: ["layers", 2 * i], width, bias: true, init: he });
    layers.push({ family: "activation", name: `a${i}`, path: ["layers", 2 * i + 1], activation: "relu", slope: 0 });
  }
  return {
    source: "<test>",
    name: "deep-stack",
    description: "a deep plain stack",
    input: { kind: "features", features: width, positions: 1, scale: 1 },
    training: {
      batch: 32,
      loss: { kind: "mean-squared-error", reduction: "mean", targetScale: 1 },
      workers: 1,
      workerGradients: "average",
      accumulationSteps: 1,
      optimizer: { kind: "adamw", learningRate: { peak: 1e-3, end: 1e-5 }, warmupSteps: 10, momentum: 0.9, betas: [0.9, 0.999], epsilon: 1e-8, weightDecay: 0 },
      horizon: { steps: 1000, weightGrowth: 1.1, finalLoss: 0.5 },
    },
    precision: {
      name: "half",
      activations: "binary16",
      weights: "binary16",
      gradients: "binary16",
      optimizerStates: "binary32",
      masterWeights: "binary32",
      accumulate: "binary32",
      overflow: "saturate",
      flushSubnormals: false,
      scaling: "none",
    },
    plans: [],
    blocks: {},
    layers,
  } as unknown as NetworkSpec;
}

describe("rankRemedies: a set of tensors held in binary32 is told once", () => {
  const spec = deepStack(300, 128);
  const built = buildGraph(spec);
  if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
  const prediction = predict(built.graph, spec);
  const answer = lossScaleAnswer(prediction, spec.precision, { steps: 200, seed: 1 });
  const holds = answer.remedies.filter((r) => r.kind === "hold-in-binary32");

  it("has an empty window whose two edges are set by one tensor", () => {
    expect(answer.window.empty).toBe(true);
    expect(answer.window.upperEdgeSetBy).not.toBeNull();
    expect(answer.window.upperEdgeSetBy).toBe(answer.window.lowerEdgeSetBy);
    expect(holds.length).toBeGreaterThan(0);
  });

  it("lists no held set twice, in any order, nor one sentence twice", () => {
    const sets = holds.map((r) => [...r.tensors!].sort().join("\n"));
    expect(new Set(sets).size).toBe(sets.length);
    const sentences = answer.remedies.map((r) => r.sentence);
    expect(new Set(sentences).size).toBe(sentences.length);
  });

  it("gives each held set's window as a fresh search over the tensors not held", () => {
    const gradients = prediction.tensors.filter((t) => t.role === "activation-gradient" || t.role === "weight-gradient");
    const limits = limitsFor(spec.precision, "binary16");
    for (const remedy of holds) {
      const held = new Set(remedy.tensors);
      expect(remedy.window).toEqual(lossScaleWindow(boundedLossScaleCurves(gradients.filter((t) => !held.has(t.id)), limits), DEFAULT_WINDOW_OPTIONS));
    }
  });
});
