import { describe, expect, it } from "vitest";
import { getFormat, roundTo } from "../../src/formats/index.js";
import type { FormatName } from "../../src/formats/names.js";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../../src/magnitude/types.js";
import { checkOptimizer } from "../../src/scale/optimizer.js";
import type { OptimizerSpec, PrecisionPlan } from "../../src/spec/types.js";

// Every case uses constant profiles (every element of the same size), so each lost share is exactly 0 or 1 and
// the remedy sentences can be pinned whole. A weight of 1.0 lies in the binade [1, 2): in a format of precision
// p its ulp is 2^(1−p) and an update below half of it, 2^−p, is lost (IEEE 754-2019 §4.3.1, round to nearest even).

function adam(peak: number, weightDecay = 0): OptimizerSpec {
  return {
    kind: weightDecay > 0 ? "adamw" : "adam",
    learningRate: { peak, end: peak },
    warmupSteps: 0,
    momentum: 0,
    betas: [0.9, 0.999],
    // Adam's step is lr·|g|/(|g| + ε) (Kingma & Ba 2015, Algorithm 1): ε = 2^-100, beside gradients of 2^-16 or more,
    // leaves it lr to the last bit of binary64, so every step below is lr; it still rounds to 0 in binary16 (IEEE 754-2019)
    epsilon: 2 ** -100,
    weightDecay,
  };
}

function plan(weights: FormatName, master: PrecisionPlan["masterWeights"], states: FormatName = "binary32", flushSubnormals = false): PrecisionPlan {
  return {
    name: "test",
    activations: "binary16",
    weights,
    gradients: "binary16",
    optimizerStates: states,
    masterWeights: master,
    accumulate: "binary32",
    overflow: "saturate",
    flushSubnormals,
    scaling: "none",
  };
}

const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });

function tensor(id: string, role: TensorPrediction["role"], profile: MagnitudeProfile): TensorPrediction {
  return { id, layer: "dense-0", layerIndex: 0, family: "dense", role, slot: role === "weight" ? "weights" : "gradients", shape: [profile.elements], start: profile, end: profile, ledger: [], source: "predicted" };
}

/** one weight tensor of 1.0s and its gradient (0.1 unless given: its second moment stays nonzero in binary16) */
function prediction(gradient = 0.1): Prediction {
  return {
    specName: "test",
    tensors: [tensor("dense-0/weight", "weight", constant(1)), tensor("dense-0/weight-gradient", "weight-gradient", constant(gradient))],
    hazards: [],
    assumptions: [],
  };
}

const FORMAT = /\b(binary16|bfloat16|binary32|binary64|tf32|e4m3|e5m2)\b/;

/** The ways a remedy can repeat the plan: the same format on both sides of "instead of", or the same share. */
function repeatsPlan(remedy: string, planned: PrecisionPlan): string | null {
  for (const clause of remedy.split(/[;:(]/)) {
    const formats = /(\w+)\b[^;]*? instead of (\w+)/.exec(clause);
    if (formats && FORMAT.test(formats[1]!) && formats[1] === formats[2]) return `format ${formats[1]} on both sides`;
    const shares = /([\d.e+-]+)%[^;]*? instead of ([\d.e+-]+)%/.exec(clause);
    if (shares && !(Number(shares[1]) < Number(shares[2]))) return `share ${shares[1]}% not below ${shares[2]}%`;
  }
  const update = planned.masterWeights === "none" ? planned.weights : planned.masterWeights;
  // a master copy in the very format that already receives the update
  if (new RegExp(`^(keep )?an? ${update} master copy`).test(remedy)) return `a ${update} master copy, as planned`;
  if (new RegExp(`optimizer states in ${planned.optimizerStates}\\b`).test(remedy)) return `states in ${planned.optimizerStates}, as planned`;
  return null;
}

describe("checkOptimizer remedies when the plan already keeps a binary32 master copy", () => {
  // Adam's first step moves every weight by lr (Kingma & Ba 2015, step size): 2^-30 is below half an ulp of 1.0
  // in binary32 (2^-24, IEEE 754-2019 binary32 p = 24) but above it with compensated summation, which carries
  // about twice the precision, 2^-48 (Kahan 1965; common practice)
  const result = checkOptimizer(adam(2 ** -30), plan("binary16", "binary32"), prediction());

  it("names the loss against the master copy", () => {
    expect(result.verdict).toBe("fails");
    expect(result.reasons).toEqual([
      "The updates to dense-0/weight lose 100% of their squared norm against half an ulp of the binary32 master copy at the peak learning rate.",
    ]);
  });

  it("proposes compensated summation and stochastic rounding with their computed effects, not the master copy it has", () => {
    expect(result.remedies).toEqual([
      "compensated (Kahan) summation into the binary32 master copy: 0% of the update's squared norm lost instead of 100% (+4 bytes per parameter for the compensation buffer)",
      // stochastic rounding is unbiased (Gupta et al. 2015); with q = 2^-30 / 2^-23 = 2^-7 of an ulp the binomial
      // noise falls below 10% after 100·(1 − q)/q = 12700 steps (common practice)
      "round the weight update stochastically into the binary32 master copy: nothing lost in expectation; the rounding noise of dense-0/weight averages below 10% after about 12700 steps (no extra memory)",
    ]);
    expect(result.remedies.join(" ")).not.toMatch(/binary32 master copy instead of/);
    expect(result.tensors[0]!.updates[0]).toMatchObject({ planned: 1, withBinary32Master: 1, compensated: 0, stochasticStepsToAverage: 12700 });
  });

  it("drops compensated summation when it would lose as much as the plan", () => {
    // 2^-50 is below 2^-48 too: compensated summation keeps nothing, so only stochastic rounding remains;
    // q = 2^-50 / 2^-23 = 2^-27: 100·(2^27 − 1) ≈ 1.34e10 steps
    const tiny = checkOptimizer(adam(2 ** -50), plan("binary16", "binary32"), prediction());
    expect(tiny.reasons[0]).toMatch(/^The updates to dense-0\/weight lose 100% of their squared norm/);
    expect(tiny.remedies).toHaveLength(1);
    expect(tiny.remedies[0]).toMatch(/^round the weight update stochastically into the binary32 master copy: nothing lost in expectation; the rounding noise of dense-0\/weight averages below 10% after about 1\.34e10 steps \(no extra memory\)$/);
  });

  it("sets the steps stochastic rounding needs against the planned training steps: past the horizon it does not work", () => {
    // the same 1.34e10 steps as above (q = 2^-27): more than 20000 planned steps, so the remedy says it does not work
    // there, as the loss scale's remedies do
    const short = checkOptimizer(adam(2 ** -50), plan("binary16", "binary32"), prediction(), 20000);
    expect(short.remedies).toEqual([
      "does not work: round the weight update stochastically into the binary32 master copy: nothing lost in expectation, but the rounding noise of dense-0/weight averages below 10% only after about 1.34e10 steps, more than the 20000 planned (no extra memory)",
    ]);
    // told after the remedies that work: into a bfloat16 master copy lr 2^-20 needs 100·(2^13 − 1) = 819100 steps
    // (q = 2^-20 / 2^-7 = 2^-13), more than 20000; a binary32 master copy keeps it (half an ulp 2^-24)
    const ordered = checkOptimizer(adam(2 ** -20), plan("binary16", "bfloat16"), prediction(), 20000).remedies;
    expect(ordered[0]).toMatch(/^a binary32 master copy instead of bfloat16 \(master-weights: binary32 in the plan\): 0% /);
    expect(ordered.at(-1)).toMatch(/^does not work: round the weight update stochastically into the bfloat16 master copy: .* after about 819100 steps, more than the 20000 planned/);
    // 12700 steps (q = 2^-7) fit in 20000 planned steps: the plain sentence
    const fits = checkOptimizer(adam(2 ** -30), plan("binary16", "binary32"), prediction(), 20000);
    expect(fits.remedies.some((r) => r.endsWith("averages below 10% after about 12700 steps (no extra memory)"))).toBe(true);
  });

  it("with stored binary32 weights and no master copy, does not propose a binary32 master copy", () => {
    const single = checkOptimizer(adam(2 ** -30), plan("binary32", "none"), prediction());
    expect(single.remedies).toEqual([
      "compensated (Kahan) summation into the stored binary32 weights: 0% of the update's squared norm lost instead of 100% (+4 bytes per parameter for the compensation buffer)",
      "round the weight update stochastically: nothing lost in expectation; the rounding noise of dense-0/weight averages below 10% after about 12700 steps (no extra memory)",
    ]);
  });
});

describe("checkOptimizer remedies when the master copy is narrower than binary32", () => {
  it("a bfloat16 master copy: a binary32 one instead, compensated summation, stochastic rounding", () => {
    // lr 2^-12 is below half an ulp of 1.0 in bfloat16 (2^-8, p = 8; common practice), above it in binary32 and
    // with compensated summation into bfloat16 (about 2p = 16 bits: 2^-16; Kahan 1965)
    const result = checkOptimizer(adam(2 ** -12), plan("binary16", "bfloat16"), prediction());
    expect(result.reasons[0]).toBe(
      "The updates to dense-0/weight lose 100% of their squared norm against half an ulp of the bfloat16 master copy at the peak learning rate.",
    );
    expect(result.remedies).toEqual([
      // bfloat16 takes 2 bytes, binary32 4: 2 more per parameter
      "a binary32 master copy instead of bfloat16 (master-weights: binary32 in the plan): 0% of the update's squared norm lost instead of 100% (+2 bytes per parameter)",
      "compensated (Kahan) summation into the bfloat16 master copy: 0% of the update's squared norm lost instead of 100% (+2 bytes per parameter for the compensation buffer)",
      // q = 2^-12 / 2^-7 = 2^-5: 100·31 = 3100 steps (binomial counting; Gupta et al. 2015 for the rounding)
      "round the weight update stochastically into the bfloat16 master copy: nothing lost in expectation; the rounding noise of dense-0/weight averages below 10% after about 3100 steps (no extra memory)",
    ]);
  });

  it("a binary16 master copy of e4m3 weights: a binary32 one instead", () => {
    // binary16 p = 11 (IEEE 754-2019): half an ulp of 1.0 is 2^-11; lr 2^-14 is lost, kept in binary32
    const result = checkOptimizer(adam(2 ** -14), plan("e4m3", "binary16"), prediction());
    expect(result.remedies[0]).toBe("a binary32 master copy instead of binary16 (master-weights: binary32 in the plan): 0% of the update's squared norm lost instead of 100% (+2 bytes per parameter)");
    // q = 2^-14 / 2^-10 = 1/16: 100·15 = 1500 steps
    expect(result.remedies).toContain(
      "round the weight update stochastically into the binary16 master copy: nothing lost in expectation; the rounding noise of dense-0/weight averages below 10% after about 1500 steps (no extra memory)",
    );
  });

  it("no master copy of binary16 weights: keep a binary32 one", () => {
    const result = checkOptimizer(adam(2 ** -14), plan("binary16", "none"), prediction());
    expect(result.remedies[0]).toBe("keep a binary32 master copy of the weights (master-weights: binary32 in the plan): 0% of the update's squared norm lost instead of 100% (+4 bytes per parameter)");
  });
});

describe("checkOptimizer: decay steps of a schedule that ends at learning rate 0", () => {
  it("are judged at the peak learning rate, not counted as lost at 0 where no decay step is taken", () => {
    // AdamW decays by lr·λ (Loshchilov & Hutter 2019): peak 2^-3 × λ 2^-11 = 2^-14 of each weight, below half an ulp
    // in binary16 (2^-11 of a weight near 1, IEEE 754-2019 p = 11): lost; at lr 0 there is no step at all
    const toZero: OptimizerSpec = { ...adam(2 ** -3, 2 ** -11), learningRate: { peak: 2 ** -3, end: 0 } };
    const result = checkOptimizer(toZero, plan("binary16", "none"), prediction());
    expect(result.reasons).toEqual([
      "weight decay steps (learning rate × decay = 6.1e-5 of each weight) are lost for 100% of the weights in binary16 at the peak learning rate.",
    ]);
    // kept at the peak (2^-3 × 2^-3 = 2^-6, above half an ulp): no decay finding, where 0 used to read as 100% lost
    const kept: OptimizerSpec = { ...adam(2 ** -3, 2 ** -3), learningRate: { peak: 2 ** -3, end: 0 } };
    expect(checkOptimizer(kept, plan("binary16", "none"), prediction()).reasons.join(" ")).not.toContain("weight decay");
  });
});

describe("checkOptimizer remedies for decay steps, second moments and epsilon", () => {
  it("lost decay steps get remedies with their computed shares", () => {
    // AdamW subtracts lr·λ·w (Loshchilov & Hutter 2019): lr 2^-3 (kept) × λ 2^-11 = 2^-14 of each weight, below
    // half an ulp in binary16 (2^-11 to 2^-10 of the weight) for every weight, above it in binary32 (2^-24)
    const result = checkOptimizer(adam(2 ** -3, 2 ** -11), plan("binary16", "none"), prediction());
    expect(result.reasons).toEqual([
      // 2^-14 = 6.103515625e-5 (exact), in three significant digits without a trailing zero as every sentence writes numbers
      "weight decay steps (learning rate × decay = 6.1e-5 of each weight) are lost for 100% of the weights in binary16 at the end learning rate.",
    ]);
    expect(result.remedies).toEqual([
      "keep a binary32 master copy of the weights (master-weights: binary32 in the plan): weight decay steps lost for 0% of the weights instead of 100% (+4 bytes per parameter)",
      // compensated binary16 carries about 22 bits: 2^-14 is kept (Kahan 1965)
      "compensated (Kahan) summation into the stored binary16 weights: weight decay steps lost for 0% of the weights instead of 100% (+2 bytes per parameter for the compensation buffer)",
      // q = 2^-14 / 2^-10 = 1/16 for a weight of 1.0: 1500 steps
      "round the weight update stochastically: nothing lost in expectation; the rounding noise of the decay steps averages below 10% after about 1500 steps (no extra memory)",
    ]);
  });

  it("binary16 states: binary32 states with the share that still flushes, and the epsilon to raise to", () => {
    // (1 − β2)·g² = 1e-3·1e-6 = 1e-9 is below half binary16's smallest subnormal (2^-25 ≈ 2.98e-8, IEEE 754-2019),
    // a normal number in binary32
    const result = checkOptimizer(adam(1e-3), plan("binary16", "binary32", "binary16"), prediction(1e-3));
    expect(result.remedies).toEqual([
      // Adam keeps two states per parameter (Kingma & Ba 2015): 2 × (4 − 2) bytes more
      "hold the optimizer states in binary32 instead of binary16 (optimizer-states: binary32 in the plan): 0% of the second moments flush at the first step instead of 100% (+4 bytes per parameter for the two states)",
      // 2^-24 = 5.9604644775390625e-8 is binary16's smallest subnormal (IEEE 754-2019 §3.6); printed to nearest, as
      // 5.96e-8 rounds to it (the old rule printed 5.97e-8, rounded up though 5.96e-8 is already enough)
      // every second moment flushes too, and where v̂ is 0 Adam's update is m̂/ε (Kingma & Ba 2015, Algorithm 1): a
      // kept epsilon alone does not help, which the remedy says
      "compute the update in binary32, or raise epsilon to at least 5.96e-8 (2^-24; training.optimizer.epsilon: 5.96e-8); either alone leaves 100% of the second moments flushed, where the update becomes m̂/ε instead of m̂/√v̂: hold the states in binary32 (above), which keeps both",
    ]);
    // the printed value is itself enough: round to nearest (IEEE 754-2019 §4.3.1) takes it to 2^-24, not to 0
    expect(roundTo(getFormat("binary16"), 5.96e-8)).toBe(2 ** -24);
  });

  it("second moments that keep their values: the epsilon remedy stands alone", () => {
    // (1 − β2)·g² = 1e-3·1e-2 = 1e-5, a binary16 subnormal (between 2^-24 and 2^-14, IEEE 754-2019 §3.6): kept, not flushed
    const result = checkOptimizer(adam(1e-3), plan("binary16", "binary32", "binary16"), prediction(1e-1));
    expect(result.reasons.join(" ")).not.toMatch(/second moments of .* flush/);
    expect(result.remedies).toContain("compute the update in binary32, or raise epsilon to at least 5.96e-8 (2^-24; training.optimizer.epsilon: 5.96e-8)");
  });

  it("with subnormals flushed, the epsilon to raise to is binary16's smallest normal, rounded up", () => {
    const result = checkOptimizer(adam(1e-3), plan("binary16", "binary32", "binary16", true), prediction());
    // binary16's smallest normal is 2^-14 = 6.1035e-5 (IEEE 754-2019); 6.10e-5 would flush, 6.11e-5 does not
    expect(result.remedies.some((r) => r.startsWith("compute the update in binary32, or raise epsilon to at least 6.11e-5 (just above 2^-14; training.optimizer.epsilon: 6.11e-5)"))).toBe(true);
    expect(roundTo(getFormat("binary16"), 6.11e-5, { flushSubnormals: true })).toBeGreaterThan(0);
    expect(roundTo(getFormat("binary16"), 6.1e-5, { flushSubnormals: true })).toBe(0);
  });
});

describe("no remedy repeats the plan", () => {
  it("catches the sentences this suite exists to prevent", () => {
    const p = plan("binary16", "binary32");
    expect(repeatsPlan("a binary32 master copy instead of binary32: 1.12% lost", p)).not.toBeNull();
    expect(repeatsPlan("compensated (Kahan) summation into the stored weights: 100% of the update's squared norm lost instead of 100% (+2 bytes)", p)).not.toBeNull();
    expect(repeatsPlan("hold the optimizer states in binary32 (+ their size again in bytes)", p)).not.toBeNull();
  });

  // a sweep over plans and learning rates: every remedy differs from the plan and loses less than it
  const masters: PrecisionPlan["masterWeights"][] = ["none", "bfloat16", "binary16", "binary32", "binary64"];
  const weights: FormatName[] = ["e4m3", "bfloat16", "binary16", "binary32"];
  const states: FormatName[] = ["binary16", "bfloat16", "binary32"];
  for (const master of masters) {
    it(`master copy ${master}`, () => {
      let remedies = 0;
      for (const weight of weights)
        for (const state of states)
          for (const flush of [false, true])
            for (let log2 = -4; log2 >= -64; log2 -= 6)
              for (const decay of [0, 0.1]) {
                const p = plan(weight, master, state, flush);
                const result = checkOptimizer(adam(2 ** log2, decay), p, prediction(2 ** (log2 / 4)));
                for (const remedy of result.remedies) {
                  remedies++;
                  expect(repeatsPlan(remedy, p), `${remedy} (${weight}/${master}/${state}, lr 2^${log2})`).toBeNull();
                  const update = master === "none" ? weight : master;
                  if (getFormat(update).precision >= 24) expect(remedy).not.toMatch(/binary32 master copy (instead|of the weights)/);
                }
                if (result.reasons.length > 0) expect(result.remedies.length).toBeGreaterThan(0);
              }
      expect(remedies).toBeGreaterThan(0);
    });
  }
});

describe("checkOptimizer words a share short of all", () => {
  it("says 'More than 99.9%' of the updates are lost, never 100%, when a few updates are kept", () => {
    // Gaussian weights of rms 1 and Adam's first step lr = 2^-38 into a binary32 master copy: an update is kept
    // only where it reaches half an ulp, |w| < 2^-38 · 2^24 = 2^-14 (IEEE 754-2019 binary32 p = 24), a share of about
    // 2^-14·√(2/π) = 4.87e-5 of a standard normal (its density at 0), so about 0.99995 are lost
    const gaussian: MagnitudeProfile = { elements: 1e6, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0 };
    const gaussianPrediction: Prediction = { ...prediction(), tensors: [tensor("dense-0/weight", "weight", gaussian), tensor("dense-0/weight-gradient", "weight-gradient", constant(0.1))] };
    const result = checkOptimizer(adam(2 ** -38), plan("binary16", "binary32"), gaussianPrediction);
    const lost = result.tensors[0]!.updates[0]!.planned;
    expect(1 - lost).toBeCloseTo(2 ** -14 * Math.sqrt(2 / Math.PI), 5);
    expect(lost).toBeLessThan(1);
    expect(result.reasons[0]).toMatch(/^The updates to dense-0\/weight lose more than 99\.9% of their squared norm/);
    expect(result.remedies.join(" ")).toContain("lost instead of more than 99.9%");
  });
});
