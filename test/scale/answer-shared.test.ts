// The loss-scale answer shares work between its parts: the gradients' profiles and draw bounds are made once for the
// gradient format, bfloat16's remedy and the simulation's ends of the horizon, and the window of a set of tensors held
// in binary32 is searched once however many remedies ask for it. Each part must equal what a fresh computation of its
// own gives: the remedies' windows a new search over fresh curves, the simulation one run with the overflow probability
// computed directly as 1 − Π(1 − p_i) over the tensors (independent tensors, common practice) and the flushing by each
// tensor's integral. A deep plain network whose gradients explode over the horizon (a scenario of our own) has an empty
// window, so every part runs.
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { energyBelow, limitsFor, probabilityAnyAbove } from "../../src/risk/index.js";
import { simulateDynamicScale, type DynamicScaleModel } from "../../src/scale/dynamic.js";
import { boundedLossScaleCurves, lossScaleAnswer, profileAt } from "../../src/scale/recommend.js";
import { DEFAULT_WINDOW_OPTIONS, lossScaleWindow } from "../../src/scale/window.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// a plain stack of dense layers and ReLUs trained with AdamW at a high rate: its last layers' weight gradients grow by
// many binades over the horizon
function deepStack(pairs: number): NetworkSpec {
  const layers: Record<string, unknown>[] = [];
  const he = { kind: "he", distribution: "normal", gain: 1 };
  for (let i = 0; i < pairs; i++) {
    layers.push({ family: "dense", name: `d${i}`, path: ["layers", 2 * i], width: 64, bias: true, init: he });
    layers.push({ family: "activation", name: `a${i}`, path: ["layers", 2 * i + 1], activation: "relu", slope: 0 });
  }
  return {
    source: "<test>",
    name: "deep-stack",
    description: "a deep plain stack",
    input: { kind: "features", features: 64, positions: 1, scale: 1 },
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

describe("the loss-scale answer's shared work", () => {
  const spec = deepStack(200);
  const built = buildGraph(spec);
  if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
  const prediction = predict(built.graph, spec);
  const answer = lossScaleAnswer(prediction, spec.precision, { steps: 1000, seed: 1 });
  const gradients = prediction.tensors.filter((t) => t.role === "activation-gradient" || t.role === "weight-gradient");
  const limits = limitsFor(spec.precision, "binary16");

  it("has an empty window, so the remedies and the simulation run", () => {
    expect(answer.window.empty).toBe(true);
    expect(answer.dynamic).not.toBeNull();
    expect(answer.remedies.filter((r) => r.kind === "hold-in-binary32").length).toBeGreaterThan(0);
  });

  it("gives each remedy's window as a fresh search over fresh curves of the tensors not held", () => {
    for (const remedy of answer.remedies) {
      if (remedy.kind === "hold-in-binary32") {
        const held = new Set(remedy.tensors);
        const fresh = lossScaleWindow(boundedLossScaleCurves(gradients.filter((t) => !held.has(t.id)), limits), DEFAULT_WINDOW_OPTIONS);
        expect(remedy.window).toEqual(fresh);
      } else if (remedy.kind === "bfloat16-gradients") {
        const bf = limitsFor({ ...spec.precision, gradients: "bfloat16" }, "bfloat16");
        expect(remedy.window).toEqual(lossScaleWindow(boundedLossScaleCurves(gradients, bf), DEFAULT_WINDOW_OPTIONS));
      }
    }
  });

  it("simulates the dynamic scale as a run with the probabilities computed directly", () => {
    const direct: DynamicScaleModel = {
      overflowProbability(scale, progress) {
        let none = 1;
        for (const t of gradients) none *= 1 - probabilityAnyAbove(profileAt(t, progress), limits.overflowLevel / scale);
        return 1 - none;
      },
      flushesTooMuch(scale, progress) {
        return gradients.some((t) => energyBelow(profileAt(t, progress), limits.flushBound / scale) > DEFAULT_WINDOW_OPTIONS.flushTolerance);
      },
    };
    const reference = simulateDynamicScale(direct, { steps: 1000, seed: 1, horizonPoints: 8 });
    expect(answer.dynamic).toEqual(reference);
    // the run overflows on some steps and not on others: the draws are compared with the probability, not decided by 0 or 1
    expect(reference.skippedSteps).toBeGreaterThan(0);
    expect(reference.skippedSteps).toBeLessThan(1000);
  });
});
