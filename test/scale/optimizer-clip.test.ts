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

describe("checkOptimizer: a clip that causes the finding is named in the first remedy, with its key", () => {
  const sgd = (clipNorm: number): OptimizerSpec => ({ ...adam(clipNorm), kind: "sgd", learningRate: { peak: 1e-2, end: 1e-2 } });

  it("SGD: clip-norm 0.1 against a global norm of 10 makes updates of 1e-2·0.1·0.01 = 1e-5, below half an ulp of 1.0 in binary16 (2^-11, IEEE 754-2019 p = 11); unclipped they are 1e-3 and kept", () => {
    const noMaster = { ...states32, masterWeights: "none" as const };
    const result = checkOptimizer(sgd(0.1), noMaster, net, 20000);
    expect(result.tensors[0]!.updates[0]!.clipped?.plannedUnclipped).toBe(0);
    expect(result.remedies[0]).toBe(
      "raise clip-norm above the predicted global gradient norm of 10 (training.optimizer.clip-norm: 11), so that it no longer scales the gradients down: 0% of the update's squared norm lost instead of 100% (no extra memory)",
    );
  });

  it("Adam: clip-norm 1e-30 flushes the binary32 second moments; without it (1 − β2)·0.01 = 1e-5 is a normal binary32 number (IEEE 754-2019 §3.6), and the update lr is kept in the master copy", () => {
    const result = checkOptimizer(adam(1e-30), states32, net, 20000);
    expect(result.remedies[0]).toBe(
      "raise clip-norm above the predicted global gradient norm of 10 (training.optimizer.clip-norm: 11), so that it no longer scales the gradients down: 0% of the update's squared norm lost instead of 100%; 0% of the second moments flush at the first step instead of 100% (no extra memory)",
    );
  });

  it("a clip that leaves nothing lost is not proposed to be raised", () => {
    expect(checkOptimizer(adam(0.1), states32, net, 20000).remedies).toEqual([]);
  });
});

describe("the Optimizer section of the text report: a remedy past the horizon reads 'does not work', as the loss scale's do", () => {
  it("SGD clipped to 1e-30 in a 20000-step run: raising the clip works, stochastic rounding does not", async () => {
    const { renderCheckText } = await import("../../src/report/check-text.js");
    const parsed = parseSpec(
      `name: tiny
input: { features: 64 }
training:
  batch: 32
  loss: { kind: cross-entropy, classes: 10 }
  optimizer: { kind: sgd, learning-rate: { peak: 1.0e-2 }, clip-norm: 1.0e-30 }
  horizon: { steps: 20000 }
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
`,
      "tiny.yaml",
    );
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const text = renderCheckText(check(parsed.spec), { width: 1000 });
    const lines = text.slice(text.indexOf("Optimizer sgd")).split("\n");
    expect(lines.find((l) => l.startsWith("  1. "))).toMatch(/^ {2}1\. remedy: raise clip-norm above the predicted global gradient norm of [\d.e-]+ \(training\.optimizer\.clip-norm: [\d.e-]+\)/);
    expect(lines.find((l) => l.startsWith("  2. "))).toMatch(/^ {2}2\. does not work: round the weight update stochastically into the binary32 master copy: .* more than the 20000 planned/);
  });
});
