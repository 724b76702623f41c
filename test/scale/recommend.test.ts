import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../../src/magnitude/types.js";
import { lossScaleAnswer, withWeighedPick } from "../../src/scale/recommend.js";
import type { PrecisionPlan } from "../../src/spec/types.js";
import { halfPlan } from "../magnitude/build-spec.js";

const plan: PrecisionPlan = { ...halfPlan, name: "test" };

function gradient(id: string, profile: MagnitudeProfile): TensorPrediction {
  return {
    id,
    layer: id.split("/")[0]!,
    layerIndex: 0,
    family: "dense",
    role: "activation-gradient",
    slot: "gradients",
    shape: [profile.elements],
    start: profile,
    end: profile,
    ledger: [],
    source: "predicted",
  };
}

const prediction = (...tensors: TensorPrediction[]): Prediction => ({ specName: "test", tensors, hazards: [], assumptions: [] });

describe("lossScaleAnswer", () => {
  // Micikevicius et al. 2018 §3.2: activation gradients of a detector sat mostly below binary16's subnormal range,
  // and a loss scale of 8 (3 binades) sufficed. Gradients centred 3 binades below 2^-24, tightly spread
  // (log-normal, half a binade), need S with 2^-27·S above the flush bound 2^-25 for nearly all their energy.
  it("puts the lower edge near 8 for gradients centred 3 binades below 2^-24", () => {
    const g = gradient("detector-head/activation-gradient", {
      elements: 1e6,
      zeroFraction: 0.67, // the paper's histogram: about two thirds exact zeros, which scaling does not change
      shape: "log-normal",
      rms: 2 ** -27,
      log2Spread: 0,
      elementLog2Spread: 0.5,
    });
    const answer = lossScaleAnswer(prediction(g), plan);
    expect(answer.window.empty).toBe(false);
    expect(answer.needed).toBe(true);
    const lower = 2 ** answer.window.lowestLog2!;
    expect(lower).toBeGreaterThanOrEqual(8);
    expect(lower).toBeLessThanOrEqual(16); // within one binade of the paper's 8
    expect(answer.pick).not.toBeNull();
    expect(answer.window.lowerEdgeSetBy).toBe("detector-head/activation-gradient");
  });

  // Constructed so that the edges can be computed by hand: "large" has every element at 2^10, so it overflows
  // binary16 (≥ 65520) from S = 2^6 on; "tiny" has every element at 2^-40, flushed until 2^-40·S > 2^-25, i.e.
  // S ≥ 2^16. The window is empty by 11 binades (5 against 16). bfloat16 (flush-to-zero below 2^-126 by default) keeps both
  // unscaled; a dynamic scale overflows constantly above 2^5 and flushes "tiny" below 2^16.
  it("reports an empty window, the tensors that pull apart, and ranks remedies by computed effect", () => {
    const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });
    const answer = lossScaleAnswer(prediction(gradient("large/activation-gradient", constant(2 ** 10)), gradient("tiny/activation-gradient", constant(2 ** -40))), plan, {
      steps: 5000,
    });
    expect(answer.window.empty).toBe(true);
    expect(answer.window.highestLog2).toBe(5);
    expect(answer.window.lowestLog2).toBe(16);
    expect(answer.window.gapBinades).toBe(11);
    expect(answer.sentences[0]).toContain("large/activation-gradient");
    expect(answer.sentences[0]).toContain("tiny/activation-gradient");
    const kinds = answer.remedies.map((r) => [r.kind, r.works]);
    expect(kinds).toContainEqual(["bfloat16-gradients", true]);
    expect(kinds).toContainEqual(["dynamic-scale", false]);
    const hold = answer.remedies.filter((r) => r.kind === "hold-in-binary32" && r.works);
    expect(hold.map((r) => r.tensors)).toContainEqual(["tiny/activation-gradient"]);
    expect(hold.map((r) => r.tensors)).toContainEqual(["large/activation-gradient"]);
  });

  it("finds that holding one named tensor in binary32 is the only fix when bfloat16 cannot hold it either", () => {
    const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });
    // "tiny" at 2^-200 is below even bfloat16's smallest subnormal 2^-133 and would need S ≥ 2^176 in binary16,
    // beyond the searched scales (up to 2^64) in either format
    const answer = lossScaleAnswer(prediction(gradient("body/activation-gradient", constant(1)), gradient("tiny/activation-gradient", constant(2 ** -200))), plan, {
      steps: 2000,
    });
    expect(answer.window.empty).toBe(true);
    const working = answer.remedies.filter((r) => r.works);
    expect(working).toHaveLength(1);
    expect(working[0]!.kind).toBe("hold-in-binary32");
    expect(working[0]!.tensors).toEqual(["tiny/activation-gradient"]);
    expect(working[0]!.window!.unscaledFits).toBe(true);
    // no spec key holds one tensor in binary32: the remedy says where it is done instead of naming a key
    expect(working[0]!.sentence).toMatch(/No spec key states a format for one tensor \(a plan sets one per role\): this is done in the training code/);
  });

  it("says no scale is needed only when 1 is the pick, and that the gradients would also train unscaled when 1 leaves no more findings than another pick", () => {
    // rms 1e-2 with half a binade of spread: far from binary16's largest finite 65504 and its subnormals below 2^-14
    // (IEEE 754-2019 Table 3.5), so the window reaches both sides of 1
    const g = gradient("g/activation-gradient", { elements: 1e4, zeroFraction: 0, shape: "gaussian", rms: 1e-2, log2Spread: 0.3 });
    const answer = lossScaleAnswer(prediction(g), plan);
    expect(answer.window.unscaledFits).toBe(true);
    expect(answer.dynamic).toBeNull();
    // the window alone (no per-tensor judgement) says 1 lies in it, and no more
    expect(answer.sentences[0]).toMatch(/^1 \(no scaling\) lies in the binary16 window/);
    expect(answer.sentences.join(" ")).not.toMatch(/need no loss scale/);
    const centre = answer.window.pickLog2!;
    const none = { fails: 0, atRisk: 0, overflowSide: 0, conditional: 0 };
    // judged: 1 leaves nothing, as the pick does
    const asGood = withWeighedPick(answer, centre, { centreLog2: centre, atCentre: none, atPick: none, unscaled: none });
    expect(asGood.needed).toBe(false);
    // the pick is the centre, not 1: 1 is told as a choice that also serves, never as "no loss scale needed"
    expect(asGood.sentences[0]).toMatch(/^binary16 gradients would also train unscaled: /);
    expect(asGood.sentences[0]).toMatch(new RegExp(`, so it is the pick\\.$`));
    expect(asGood.sentences.join(" ")).not.toMatch(/need no loss scale/);
    // the same weighing with 1 as the pick: then the gradients need no scale
    const atOne = withWeighedPick(answer, 0, { centreLog2: centre, atCentre: none, atPick: none, unscaled: none });
    expect(atOne.window.pickLog2).toBe(0);
    expect(atOne.sentences[0]).toMatch(/^binary16 gradients need no loss scale: .*and 1 \(no scaling\) is the pick/);
    // judged: 1 leaves 3 findings at risk the pick does not
    const worse = withWeighedPick(answer, centre, { centreLog2: centre, atCentre: none, atPick: none, unscaled: { fails: 0, atRisk: 3, overflowSide: 0, conditional: 0 } });
    expect(worse.needed).toBe(true);
    expect(worse.sentences.join(" ")).not.toMatch(/need no loss scale/);
    expect(worse.sentences.join(" ")).toContain("1 (no scaling) lies in the window too, but would leave 3 findings at risk");
  });
});

describe("the loss-scale answer's wording", () => {
  const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });
  // "large" sits at 2^17, above binary16's largest finite value 65504 (IEEE 754-2019 §3.6, binary16: emax 15, p 11), so
  // it overflows at every scale from 2^-1 up; "tiny" at 2^-80 flushes unless 2^-80·S reaches binary16's subnormal range
  // (2^-24 and above, IEEE 754-2019 §3.3): the window is empty, and a dynamic scale can only skip.
  const answer = lossScaleAnswer(prediction(gradient("large/activation-gradient", constant(2 ** 17)), gradient("tiny/activation-gradient", constant(2 ** -80))), plan, {
    steps: 2000,
  });

  it("prints powers of two beyond 2^53 in three digits, not as a double's shortest digits", () => {
    const sentence = answer.sentences[0]!;
    expect(answer.window.empty).toBe(true);
    expect(answer.window.lowestLog2).toBeGreaterThan(53);
    // 2^56 = 72057594037927936 exactly (BigInt arithmetic); String(2 ** 56) gives 72057594037927940, which is not it
    expect(String(2n ** 56n)).toBe("72057594037927936");
    expect(sentence).toContain(`needs at least 2^${answer.window.lowestLog2} = `);
    expect(sentence).not.toMatch(/= \d{17,}/);
    expect(sentence).toMatch(new RegExp(`2\\^${answer.window.lowestLog2} = \\d\\.\\d+e\\d+`));
    // below 1 in plain decimals where that reads well: 2^-2 = 0.25
    expect(sentence).toContain(`2^${answer.window.highestLog2} = ${2 ** answer.window.highestLog2!}`);
  });

  it("says the dynamic scale falls to its floor when every step overflows, with the share as a percentage", () => {
    const dynamic = answer.remedies.find((r) => r.kind === "dynamic-scale")!;
    expect(answer.dynamic!.skippedSteps).toBe(2000);
    expect(dynamic.sentence).toContain("skips 2000 of 2000 simulated steps (100%)");
    expect(dynamic.sentence).toContain("it falls to its lowest allowed scale, 1, and stays there");
    expect(dynamic.sentence).not.toContain("between 1 and 1");
  });
});

describe("the bfloat16 remedy names the precision it trades", () => {
  // significant bits p (with the hidden bit): bfloat16 8, binary16 11 (IEEE 754-2019 Table 3.5 for binary16; bfloat16
  // keeps binary32's exponent and 7 fraction bits, common practice), e5m2 3 (OCP 8-bit spec: 2 mantissa bits)
  const constant = (rms: number): MagnitudeProfile => ({ elements: 1000, zeroFraction: 0, shape: "constant", rms, log2Spread: 0 });
  const pair = prediction(gradient("large/activation-gradient", constant(2 ** 10)), gradient("tiny/activation-gradient", constant(2 ** -40)));
  it.each([
    ["binary16", 11],
    ["e5m2", 3],
  ] as const)("gradients in %s: 8 significant bits instead of %i", (format, bits) => {
    const answer = lossScaleAnswer(pair, { ...plan, gradients: format }, { steps: 500 });
    const remedy = answer.remedies.find((r) => r.kind === "bfloat16-gradients")!;
    expect(remedy.works).toBe(true);
    expect(remedy.sentence).toContain(`at 8 significant bits instead of ${bits}.`);
  });
});

describe("a loss scale the spec gives", () => {
  // the window is the gradients' whole-model budget (DEFAULT_WINDOW_OPTIONS: 1e-4 overflowing steps, 0.1% of a
  // gradient's squared norm flushed, documented in README); the check's per-tensor thresholds are stricter, so
  // "inside the window" must not read as "no finding"
  const g = gradient("g/activation-gradient", { elements: 1e6, zeroFraction: 0, shape: "gaussian", rms: 2 ** -10, log2Spread: 0 });
  it("says inside or outside with the window's own limits, and that tensors are still judged", () => {
    const inside = lossScaleAnswer(prediction(g), { ...plan, lossScale: 1 });
    expect(inside.requested).toEqual({ scale: 1, inside: true, origin: "plan" });
    expect(inside.sentences).toContain(
      "The spec's loss scale 1 is inside the window (where the whole model overflows in at most 1e-4 of the steps and no gradient loses more than 0.1% of its squared norm to flushing); each tensor is still judged against its own thresholds below.",
    );
    const outside = lossScaleAnswer(prediction(g), { ...plan, lossScale: 2 ** 30 });
    expect(outside.requested?.inside).toBe(false);
    expect(outside.sentences.find((s) => s.startsWith("The spec's loss scale"))).toBe(
      "The spec's loss scale 2^30 is outside the window (where the whole model overflows in at most 1e-4 of the steps and no gradient loses more than 0.1% of its squared norm to flushing): 7 binades above it, where g/activation-gradient overflows beyond the budget.",
    );
  });
});
