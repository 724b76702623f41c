import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../../src/magnitude/types.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";
import { checkOptimizer } from "../../src/scale/optimizer.js";
// @ts-expect-error checkOptimizer takes no options object: the per-tensor list is never cut (typecheck: npx tsc -p tsconfig.json)
import type { OptimizerCheckOptions } from "../../src/scale/optimizer.js";
import type { OptimizerSpec, PrecisionPlan } from "../../src/spec/types.js";

const adam: OptimizerSpec = {
  kind: "adam",
  learningRate: { peak: 1e-3, end: 1e-3 },
  warmupSteps: 0,
  momentum: 0,
  betas: [0.9, 0.999],
  epsilon: 1e-8,
  weightDecay: 0,
};

function plan(states: PrecisionPlan["optimizerStates"]): PrecisionPlan {
  return {
    name: "test",
    activations: "binary16",
    weights: "binary16",
    gradients: "binary16",
    optimizerStates: states,
    masterWeights: "binary32",
    accumulate: "binary32",
    overflow: "saturate",
    flushSubnormals: false,
    scaling: "none",
  };
}

function tensor(id: string, role: TensorPrediction["role"], profile: MagnitudeProfile): TensorPrediction {
  return { id, layer: "dense-0", layerIndex: 0, family: "dense", role, slot: role === "weight" ? "weights" : "gradients", shape: [profile.elements], start: profile, end: profile, ledger: [], source: "predicted" };
}

const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });

function prediction(gradientSize: number): Prediction {
  return {
    specName: "test",
    tensors: [tensor("dense-0/weight", "weight", constant(0.05)), tensor("dense-0/weight-gradient", "weight-gradient", constant(gradientSize))],
    hazards: [],
    assumptions: [],
  };
}

describe("checkOptimizer: Adam's states in the optimizer-state format", () => {
  // common practice (SCIENCE.md §3.3 [X]): epsilon 1e-8 is below binary16's flush bound 2^-25 and rounds to 0;
  // bfloat16 keeps it as 1.0011717677116394e-8
  it("flags an epsilon of 1e-8 held in binary16 and keeps it in bfloat16", () => {
    const half = checkOptimizer(adam, plan("binary16"), prediction(1e-2));
    expect(half.epsilon).toEqual({ value: 1e-8, stored: 0, vanishes: true });
    expect(half.verdict).not.toBe("fits");
    expect(half.reasons.join(" ")).toMatch(/epsilon 1e-8 rounds to 0 in binary16/);
    const brain = checkOptimizer(adam, plan("bfloat16"), prediction(1e-2));
    expect(brain.epsilon?.vanishes).toBe(false);
    expect(brain.epsilon?.stored).toBeCloseTo(1.0011717677116394e-8, 22);
  });

  // computed from IEEE 754-2019 binary16 limits: g² rounds to 0 when g² ≤ 2^-25, i.e. |g| ≤ 2^-12.5 ≈ 1.7263e-4
  it("the settled second moment of a gradient below 2^-12.5 flushes in binary16, and above it does not", () => {
    const below = checkOptimizer(adam, plan("binary16"), prediction(2 ** -12.5 * 0.99));
    expect(below.tensors[0]!.secondMomentFlushed.settled).toBe(1);
    const above = checkOptimizer(adam, plan("binary16"), prediction(2 ** -12.5 * 1.01));
    expect(above.tensors[0]!.secondMomentFlushed.settled).toBe(0);
    // the first step stores (1 − β2)·g²: flushed below sqrt(2^-25 / 0.001) ≈ 5.46e-3 (DESIGN.md §5 item 5)
    expect(above.tensors[0]!.secondMomentFlushed.firstStep).toBe(1);
    const large = checkOptimizer(adam, plan("binary16"), prediction(Math.sqrt(2 ** -25 / 1e-3) * 1.01));
    expect(large.tensors[0]!.secondMomentFlushed.firstStep).toBe(0);
  });

  it("nothing flushes in binary32 states", () => {
    const single = checkOptimizer(adam, plan("binary32"), prediction(1e-6));
    expect(single.tensors[0]!.secondMomentFlushed.firstStep).toBe(0);
    expect(single.epsilon?.vanishes).toBe(false);
  });
});

describe("checkOptimizer: a vanishing epsilon fails only when a zero second moment is expected per step", () => {
  // the rule of README.md's thresholds table and FINDING_INFO (src/risk/catalogue.ts): epsilon rounding to 0 is at
  // risk, and fails when at least one second moment per step is expected to be zero (an update divides by zero)
  const gradient = (profile: Partial<MagnitudeProfile>): Prediction => ({
    specName: "test",
    tensors: [
      tensor("dense-0/weight", "weight", constant(0.05)),
      tensor("dense-0/weight-gradient", "weight-gradient", { elements: 1000, zeroFraction: 0, shape: "constant", rms: 1e-2, log2Spread: 0, ...profile }),
    ],
    hazards: [],
    assumptions: [],
  });
  // (1 − β2)·g² flushes in binary16 for |g| ≤ √(2^-25/0.001) ≈ 5.46e-3 (DESIGN.md §5 item 5; IEEE 754-2019 binary16)
  const bound = Math.sqrt(2 ** -25 / 1e-3);

  it("exactly zero gradients: 0.5 expected per step is at risk, 2 fail (constant |g| = 1e-2 stays above the bound)", () => {
    const half = checkOptimizer(adam, plan("binary16"), gradient({ zeroFraction: 0.0005 }));
    expect(half.epsilon?.vanishes).toBe(true);
    expect(half.verdict).toBe("at-risk");
    expect(checkOptimizer(adam, plan("binary16"), gradient({ zeroFraction: 0.002 })).verdict).toBe("fails");
  });

  it("flushed second moments: about 0.48 expected per step is at risk, about 2.4 fail", () => {
    // P(|Z| ≤ x) = erf(x/√2) ≈ x·√(2/π) for small x (Taylor series of erf, Abramowitz & Stegun 7.1.5): 1000
    // Gaussian gradients with bound/rms = 6e-4 give about 0.48 flushed, with bound/rms = 3e-3 about 2.4
    const few = checkOptimizer(adam, plan("binary16"), gradient({ shape: "gaussian", rms: bound / 6e-4 }));
    expect(few.tensors[0]!.secondMomentFlushed.firstStep).toBeGreaterThan(0);
    expect(few.tensors[0]!.secondMomentFlushed.firstStep * 1000).toBeCloseTo(6e-4 * Math.sqrt(2 / Math.PI) * 1000, 3);
    expect(few.verdict).toBe("at-risk");
    const some = checkOptimizer(adam, plan("binary16"), gradient({ shape: "gaussian", rms: bound / 3e-3 }));
    expect(some.tensors[0]!.secondMomentFlushed.firstStep * 1000).toBeCloseTo(3e-3 * Math.sqrt(2 / Math.PI) * 1000, 2);
    expect(some.verdict).toBe("fails");
  });
});

describe("checkOptimizer: the per-tensor list", () => {
  it("lists every weight tensor paired with its gradient, in the prediction's order (no option cuts it)", () => {
    const layer = (i: number): TensorPrediction[] => [
      { ...tensor(`dense-${i}/weight`, "weight", constant(0.05)), layer: `dense-${i}`, layerIndex: i },
      { ...tensor(`dense-${i}/weight-gradient`, "weight-gradient", constant(1e-2 * (i + 1))), layer: `dense-${i}`, layerIndex: i },
    ];
    const three: Prediction = { specName: "test", tensors: [...layer(0), ...layer(1), ...layer(2)], hazards: [], assumptions: [] };
    const result = checkOptimizer(adam, plan("binary16"), three);
    expect(result.tensors.map((t) => [t.weight, t.gradient])).toEqual([
      ["dense-0/weight", "dense-0/weight-gradient"],
      ["dense-1/weight", "dense-1/weight-gradient"],
      ["dense-2/weight", "dense-2/weight-gradient"],
    ]);
  });
});


describe("checkOptimizer: flushed second moments graded as their hazard grades them", () => {
  // README.md's thresholds table: a share of nonzero elements flushed to zero (Adam's second moment included) is at
  // risk above 1% and fails above 10%, or above the thresholds given; measured at the weight gradient of smallest
  // rms, start or end, as the optimizer-second-moment hazard is. Epsilon 1e-4 is a binary16 normal number
  // (IEEE 754-2019: smallest normal 2^-14), so only the second moments are judged.
  const kept: OptimizerSpec = { ...adam, epsilon: 1e-4 };
  // (1 − β2)·g² flushes in binary16 for |g| ≤ √(2^-25/0.001) (DESIGN.md §5 item 5; IEEE 754-2019 binary16)
  const bound = Math.sqrt(2 ** -25 / 1e-3);
  // standard normal quantiles (Abramowitz & Stegun 1964, table 26.1): P(|Z| ≤ 0.2533) = 0.2, P(|Z| ≤ 0.0627) = 0.05,
  // and P(|Z| ≤ x) ≈ x·√(2/π) for small x (A&S 7.1.5): P(|Z| ≤ 0.00627) ≈ 0.005
  const rmsFor = { "20%": bound / 0.2533, "5%": bound / 0.0627, "0.5%": bound / 0.00627 } as const;
  const gaussian = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "gaussian", rms, log2Spread: 0 });
  const gradients = (start: keyof typeof rmsFor, end: keyof typeof rmsFor = start): Prediction => ({
    specName: "test",
    tensors: [
      tensor("dense-0/weight", "weight", constant(0.05)),
      { ...tensor("dense-0/weight-gradient", "weight-gradient", gaussian(rmsFor[start])), end: gaussian(rmsFor[end]) },
    ],
    hazards: [],
    assumptions: [],
  });
  const states = plan("binary16");

  it.each([
    ["20%", {}, "fails"],
    ["20%", { flushedAtRisk: 0.1, flushedFails: 0.5 }, "at-risk"],
    ["5%", {}, "at-risk"],
    ["5%", { flushedAtRisk: 0.001, flushedFails: 0.03 }, "fails"],
    ["5%", { flushedAtRisk: 0.1, flushedFails: 0.5 }, "fits"],
    ["0.5%", {}, "fits"],
  ] as const)("%s flushed, thresholds %o: %s", (share, thresholds, expected) => {
    const result = checkOptimizer(kept, states, gradients(share), undefined, [], { ...DEFAULT_THRESHOLDS, ...thresholds });
    expect(result.epsilon?.vanishes).toBe(false);
    expect(result.verdict).toBe(expected);
    expect(result.reasons.length).toBe(expected === "fits" ? 0 : 1);
  });

  it("the default thresholds are the risk thresholds' flushed shares", () => {
    expect(checkOptimizer(kept, states, gradients("20%")).verdict).toBe("fails");
    expect(checkOptimizer(kept, states, gradients("5%")).verdict).toBe("at-risk");
  });

  it("judged at the smaller of the start and end gradients, as the hazard's site is", () => {
    const early = checkOptimizer(kept, states, gradients("20%", "0.5%"));
    expect(early.verdict).toBe("fails");
    expect(early.reasons[0]).toMatch(/^20\.\d% of the second moments of dense-0 flush to zero in binary16/);
    // binary32 states keep (1 − β2)·g² down to 2^-150 (IEEE 754-2019 binary32): a share below 1e-10 of these flush,
    // under the sentences' display floor of 1e-8 (src/risk/words.ts), so it reads "less than 1e-6%"
    expect(early.remedies).toHaveLength(1);
    expect(early.remedies[0]).toMatch(
      /^hold the optimizer states in binary32 instead of binary16 \(optimizer-states: binary32 in the plan\): less than 1e-6% of the second moments flush at the first step instead of 20\.\d% \(\+4 bytes per parameter for the two states\)$/,
    );
    expect(checkOptimizer(kept, states, gradients("0.5%", "20%")).verdict).toBe("fails");
  });

  it("told by the hazard instead of in reasons when the caller reports it, still counting in the verdict", () => {
    const told = checkOptimizer(kept, states, gradients("20%"), undefined, ["optimizer-second-moment"]);
    expect(told.reasons).toEqual([]);
    expect(told.reportedAsHazards).toEqual(["optimizer-second-moment"]);
    expect(told.verdict).toBe("fails");
  });
});

describe("checkOptimizer: zero second moments per step are counted across every weight gradient", () => {
  // README.md's thresholds table: one expected zero second moment per step in the whole network fails; three weight
  // gradients with 0.5 exact zeros each (0.0005 of 1000, constant |g| = 1e-2 above the flush bound ≈ 5.46e-3) give 1.5
  const gradient = (id: string, zeroFraction: number, elements = 1000): TensorPrediction => ({
    ...tensor(id, "weight-gradient", { elements, zeroFraction, shape: "constant", rms: 1e-2, log2Spread: 0 }),
    layer: id.split("/")[0] as string,
  });
  const net = (zeroFraction: number): Prediction => ({
    specName: "test",
    tensors: [
      tensor("a/weight", "weight", constant(0.05)),
      gradient("a/weight-gradient", zeroFraction),
      gradient("b/weight-gradient", zeroFraction),
      gradient("c/weight-gradient", 2 * zeroFraction),
    ],
    hazards: [],
    assumptions: [],
  });

  it("each tensor below one but 2 in all fails, naming the tensor giving most; 0.8 in all is at risk", () => {
    const fails = checkOptimizer(adam, plan("binary16"), net(0.0005));
    expect(fails.verdict).toBe("fails");
    // the count in three significant digits as the hazard's sentence writes it (risk/words.ts plainNumber): not "2.00"
    expect(fails.reasons.join(" ")).toContain("about 2 second moments are 0 per step (most in c/weight-gradient)");
    expect(checkOptimizer(adam, plan("binary16"), net(0.0002)).verdict).toBe("at-risk");
  });

  it("writes a count of millions as the hazard does, 4.94e6, not toPrecision's 4.94e+6", () => {
    // 1e7 elements each, 0.1234 of them zero in a and b, 0.2468 in c: 4.936e6 in all
    const tensors = [gradient("a/weight-gradient", 0.1234, 1e7), gradient("b/weight-gradient", 0.1234, 1e7), gradient("c/weight-gradient", 0.2468, 1e7)];
    const big: Prediction = { ...net(0), tensors: [tensor("a/weight", "weight", constant(0.05)), ...tensors] };
    const text = checkOptimizer(adam, plan("binary16"), big).reasons.join(" ");
    expect(text).toContain("about 4.94e6 second moments are 0 per step (most in c/weight-gradient)");
    expect(text).not.toContain("e+");
  });
});

describe("checkOptimizer: bfloat16 states, figures and verdict on one bound", () => {
  // bfloat16 has binary32's exponent range (IEEE 754-2019 Table 3.5: emin −126) with 7 fraction bits, so its
  // smallest normal is 2^-126 and its smallest subnormal 2^-133; its subnormals are taken to flush (SCIENCE.md §1.2)
  const beta2 = adam.betas[1];

  it("a first-step second moment between 2^-134 and 2^-126 is counted flushed in the figures and in the verdict", () => {
    // (1 − β2)·g² = 2^-130: a subnormal bfloat16 would keep, flushed where subnormals flush
    const g = Math.sqrt(2 ** -130 / (1 - beta2));
    const result = checkOptimizer(adam, plan("bfloat16"), prediction(g));
    const figures = result.tensors[0]!.secondMomentFlushed;
    expect(figures.firstStep).toBe(1);
    // settled, v ≈ g² = 2^-130/(1 − β2) ≈ 2^-120 stays normal
    expect(figures.settled).toBe(0);
    // every second moment flushed at the first step is past flushedFails (10%): the verdict and its sentence agree
    expect(result.verdict).toBe("fails");
    expect(result.reasons.join(" ")).toMatch(/100% of the second moments of dense-0 flush to zero in bfloat16 at the first step/);
  });

  it("just above 2^-126 neither the figures nor the verdict count it", () => {
    const g = Math.sqrt((2 ** -126 * 1.01) / (1 - beta2));
    const result = checkOptimizer(adam, plan("bfloat16"), prediction(g));
    expect(result.tensors[0]!.secondMomentFlushed.firstStep).toBe(0);
    expect(result.reasons.join(" ")).not.toMatch(/second moments/);
  });

  it("a first moment (1 − β1)·g below 2^-126 is counted flushed", () => {
    // (1 − 0.9)·g = 2^-130
    const result = checkOptimizer(adam, plan("bfloat16"), prediction(2 ** -130 / (1 - adam.betas[0])));
    expect(result.tensors[0]!.firstMomentFlushed).toBe(1);
  });

  it("an epsilon among bfloat16's subnormals vanishes, and the remedy names the smallest normal", () => {
    // 2^-130 lies between the smallest subnormal 2^-133 and the smallest normal 2^-126 ≈ 1.1754943508222875e-38
    const result = checkOptimizer({ ...adam, epsilon: 2 ** -130 }, plan("bfloat16"), prediction(1e-2));
    expect(result.epsilon).toEqual({ value: 2 ** -130, stored: 0, vanishes: true });
    expect(result.remedies.join(" ")).toMatch(/raise epsilon to at least 1\.18e-38/);
  });
});

describe("checkOptimizer: gradient clipping", () => {
  // 10^4 gradient elements of magnitude 0.1: global norm √(10^4·0.01) = 10 (derived). Clipping to 0.1 scales every
  // gradient by 0.1/10 = 0.01 (common practice: g·c/‖g‖ when ‖g‖ > c)
  const clipTo = (clipNorm: number | undefined, kind: OptimizerSpec["kind"] = "sgd"): OptimizerSpec => ({
    ...adam,
    kind,
    learningRate: { peak: 1e-2, end: 1e-2 },
    ...(clipNorm === undefined ? {} : { clipNorm }),
  });
  const net: Prediction = {
    specName: "test",
    tensors: [
      tensor("dense-0/weight", "weight", { ...constant(1), elements: 1e4 }),
      tensor("dense-0/weight-gradient", "weight-gradient", { ...constant(0.1), elements: 1e4 }),
    ],
    hazards: [],
    assumptions: [],
  };
  const noMaster = { ...plan("binary32"), masterWeights: "none" as const };

  it("SGD: an update of 1e-2·0.1 = 1e-3 survives half an ulp of 1.0 in binary16 (2^-11 = 4.9e-4, IEEE 754-2019 p = 11); clipped by 0.01 it is 1e-5 and lost", () => {
    const free = checkOptimizer(clipTo(undefined), noMaster, net);
    expect(free.tensors[0]!.updates[0]!.planned).toBe(0);
    expect(free.tensors[0]!.updates[0]).not.toHaveProperty("clipped");
    const clipped = checkOptimizer(clipTo(0.1), noMaster, net);
    const update = clipped.tensors[0]!.updates[0]!;
    expect(update.clipped?.globalNorm).toBeCloseTo(10, 12);
    expect(update.clipped?.factor).toBeCloseTo(0.01, 12);
    expect(update.updateRms).toBeCloseTo(1e-5, 15);
    expect(update.planned).toBe(1);
    expect(clipped.reasons[0]).toContain("The gradients are clipped there: clip-norm 0.1 against a predicted global norm of 10 scales them by 0.01.");
    // a clip norm above the global norm changes nothing
    expect(checkOptimizer(clipTo(20), noMaster, net).tensors[0]!.updates[0]).toEqual(free.tensors[0]!.updates[0]);
  });

  it("Adam's update m̂/(√v̂ + ε) keeps its size under a common factor while ε is negligible (Kingma & Ba 2015, Algorithm 1): clipped to 1e-3, ε = 1e-8 moves it by 1e-5", () => {
    const free = checkOptimizer(clipTo(undefined, "adam"), noMaster, net).tensors[0]!.updates[0]!;
    const clipped = checkOptimizer(clipTo(0.1, "adam"), noMaster, net).tensors[0]!.updates[0]!;
    expect(clipped.clipped?.factor).toBeCloseTo(0.01, 12);
    // lr·1e-3/(1e-3 + 1e-8) against lr·0.1/(0.1 + 1e-8): a relative change of about 1e-5 (derived)
    expect(Math.abs(clipped.updateRms / free.updateRms - 1)).toBeLessThan(1.1e-5);
    expect(clipped.planned).toBe(free.planned);
  });
});
