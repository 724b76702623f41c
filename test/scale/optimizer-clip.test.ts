import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { getFormat, roundTo } from "../../src/formats/index.js";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../../src/magnitude/types.js";
import { checkOptimizer } from "../../src/scale/optimizer.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec, OptimizerSpec, PrecisionPlan } from "../../src/spec/types.js";

// Clipping to a global norm c multiplies every gradient by c/‖g‖ when ‖g‖ > c (common practice), before the optimizer
// step: Adam's states hold the clipped gradients, and its update m̂/(√v̂ + ε) (Kingma & Ba 2015, Algorithm 1) keeps
// its size under a common factor only while ε stays negligible beside √v̂.

const constant = (rms: number, elements = 1e4): MagnitudeProfile => ({ elements, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });

function tensor(id: string, role: TensorPrediction["role"], profile: MagnitudeProfile): TensorPrediction {
  return { id, layer: "dense-0", layerIndex: 0, family: "dense", role, slot: role === "weight" ? "weights" : "gradients", shape: [profile.elements], start: profile, end: profile, ledger: [], source: "predicted" };
}

// 10^4 gradient elements of 0.1: global norm √(10^4·0.01) = 10 (derived); weights of 1.0
const net: Prediction = {
  specName: "test",
  tensors: [tensor("dense-0/weight", "weight", constant(1)), tensor("dense-0/weight-gradient", "weight-gradient", constant(0.1))],
  hazards: [],
  assumptions: [],
};

const states32: PrecisionPlan = {
  name: "test",
  activations: "binary16",
  weights: "binary16",
  gradients: "binary16",
  optimizerStates: "binary32",
  masterWeights: "binary32",
  accumulate: "binary32",
  overflow: "saturate",
  flushSubnormals: false,
  scaling: "none",
};

function adam(clipNorm: number | undefined, epsilon = 1e-8): OptimizerSpec {
  return {
    kind: "adam",
    learningRate: { peak: 1e-3, end: 1e-3 },
    warmupSteps: 0,
    momentum: 0,
    betas: [0.9, 0.999],
    epsilon,
    weightDecay: 0,
    ...(clipNorm === undefined ? {} : { clipNorm }),
  };
}

describe("checkOptimizer: Adam's states and update see the clipped gradients", () => {
  it("clip-norm 1e-30 against a global norm of 10 leaves gradients of 1e-32: (1 − β2)·g² = 1e-67 is below binary32's smallest subnormal 2^-149 (IEEE 754-2019 §3.6), so every second moment flushes and the check fails", () => {
    const free = checkOptimizer(adam(undefined), states32, net);
    expect(free.tensors[0]!.secondMomentFlushed.firstStep).toBe(0);
    expect(free.verdict).toBe("fits");
    const clipped = checkOptimizer(adam(1e-30), states32, net);
    expect(clipped.tensors[0]!.secondMomentFlushed).toEqual({ firstStep: 1, settled: 1 });
    expect(clipped.verdict).toBe("fails");
    expect(clipped.reasons.join(" ")).toMatch(/100% of the second moments of dense-0 flush to zero in binary32/);
    // the update is tagged with the clip: the factor 1e-30/10 and the norm
    const update = clipped.tensors[0]!.updates[0]!;
    expect(update.clipped?.globalNorm).toBeCloseTo(10, 12);
    expect(update.clipped?.factor).toBeCloseTo(1e-31, 40);
  });

  it("the first step moves a weight by lr·|g|/(|g| + ε) (Kingma & Ba 2015, Algorithm 1): lr while ε ≪ |g|, lr·|g|/ε once the clip makes |g| smaller than ε", () => {
    const lr = 1e-3;
    // clip 0.1: gradients of 0.1·0.01 = 1e-3, five binades above ε = 1e-8: within 1e-5 of lr, as unclipped
    const negligible = checkOptimizer(adam(0.1), states32, net).tensors[0]!.updates[0]!;
    expect(Math.abs(negligible.updateRms - lr) / lr).toBeLessThan(1e-5);
    // ε = 1e-2 as binary32 holds it (round to nearest, IEEE 754-2019 §4.3.1): |Δ| = lr·1e-3/(1e-3 + ε) ≈ lr/11
    const epsilon = roundTo(getFormat("binary32"), 1e-2);
    const dominated = checkOptimizer(adam(0.1, 1e-2), states32, net).tensors[0]!.updates[0]!;
    expect(dominated.updateRms).toBeCloseTo((lr * 1e-3) / (1e-3 + epsilon), 15);
    // unclipped, the same ε is negligible beside 0.1: lr·0.1/(0.1 + 0.01) = lr/1.1
    const free = checkOptimizer(adam(undefined, 1e-2), states32, net).tensors[0]!.updates[0]!;
    expect(free.updateRms).toBeCloseTo((lr * 0.1) / (0.1 + epsilon), 15);
  });

  it("a clip that makes ε dominate swamps the update: lr·|g|/ε = 1e-3·1e-31 /1e-8 is far below half an ulp of 1.0 in binary32 (2^-24, IEEE 754-2019 p = 24)", () => {
    const free = checkOptimizer(adam(undefined), states32, net);
    expect(free.worst?.lostShare ?? 0).toBe(0);
    const clipped = checkOptimizer(adam(1e-30), states32, net);
    expect(clipped.worst?.lostShare).toBe(1);
    expect(clipped.reasons[0]).toContain("The gradients are clipped there: clip-norm 1e-30 against a predicted global norm of 10 scales them by 1e-31.");
  });
});

describe("check: the optimizer-state hazards judge the clipped gradients", () => {
  const text = (clip: string) => `name: tiny
input: { features: 64 }
training:
  batch: 32
  loss: { kind: cross-entropy, classes: 10 }
  optimizer: { kind: adam${clip} }
precision:
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
layers:
  - type: dense
    width: 10
`;
  function spec(clip: string): NetworkSpec {
    const parsed = parseSpec(text(clip), "tiny.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    return parsed.spec;
  }

  it("clip-norm 1e-30 flushes every second moment even in binary32 (g ≲ 1e-30: (1 − β2)·g² ≲ 1e-63, below 2^-149, IEEE 754-2019 §3.6); unclipped the same spec keeps them", () => {
    const secondMoment = (answer: ReturnType<typeof check>) => answer.hazards.find((h) => h.kind === "optimizer-second-moment")!;
    const free = check(spec(""));
    expect(secondMoment(free).findings.filter((f) => f.format === "binary32")).toEqual([]);
    const clipped = check(spec(", clip-norm: 1.0e-30"));
    const findings = secondMoment(clipped).findings.filter((f) => f.format === "binary32");
    expect(findings.map((f) => f.severity)).toEqual(["fails"]);
    expect(clipped.verdict).toBe("fails");
    // the optimizer check tells the same finding through the hazard, with one severity
    expect(clipped.optimizer.reportedAsHazards).toContain("optimizer-second-moment");
    expect(clipped.optimizer.verdict).toBe("fails");
  });
});
