import { readdirSync, readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check, needsLossScale } from "../../src/check.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { planFormats, type CheckResult } from "../../src/risk/index.js";
import { zeroSecondMoments } from "../../src/risk/second-moments.js";
import { renderCheckText } from "../../src/report/check-text.js";

const HAZARDS = "test/fixtures/specs/hazards";

function load(path: string, edit: (text: string) => string = (t) => t): NetworkSpec {
  const parsed = parseSpec(edit(readFileSync(path, "utf8")), path);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

function kinds(result: CheckResult, format: string): string[] {
  return result.formats.find((f) => f.format === format)?.findings.map((f) => f.kind) ?? [];
}


// A vanishing epsilon told alike by its hazard, the optimizer check and the verdicts: the expected zeros per step sit
// clear of one (README.md's thresholds table: fails from one per step, at risk below), with margin. Returns the
// hazard's binary16 evaluation.
function expectEpsilonAgreement(result: ReturnType<typeof check>, expected: string) {
  const epsilon = result.hazards.find((h) => h.kind === "optimizer-constant");
  const evaluation = epsilon?.evaluations.find((e) => e.format === "binary16");
  const zeros = evaluation?.value ?? Number.NaN;
  expect(expected === "fails" ? zeros > 1.2 : zeros < 0.8).toBe(true);
  expect(epsilon?.findings.map((f) => [f.format, f.severity])).toEqual([["binary16", expected]]);
  expect(result.optimizer.epsilon?.vanishes).toBe(true);
  expect(result.optimizer.reportedAsHazards).toContain("optimizer-constant");
  expect(result.optimizer.verdict).toBe(expected);
  expect(result.formats.find((f) => f.format === "binary16")?.verdict).toBe(expected);
  expect(result.verdict).toBe(expected);
  return evaluation;
}

describe("purpose-built hazards, end to end", () => {
  it("a sum of squares over 4096 features with input rms 4.2 overflows binary16 (√(65504/4096) = 4.0; DESIGN.md §5 item 7)", () => {
    const result = check(load(`${HAZARDS}/norm-sum-of-squares.yaml`));
    const norm = result.hazards.find((h) => h.kind === "norm-sum-of-squares");
    expect(norm?.evaluations[0]?.criticalLevel).toBeCloseTo(Math.sqrt(65520 / 4096), 9);
    expect(kinds(result, "binary16")).toContain("norm-sum-overflow");
    expect(result.formats[0]?.verdict).toBe("fails");
  });

  it("the same norm with input rms 3.5 does not overflow", () => {
    const result = check(load(`${HAZARDS}/norm-sum-of-squares.yaml`, (t) => t.replace("scale: 4.2", "scale: 3.5")));
    expect(kinds(result, "binary16")).not.toContain("norm-sum-overflow");
  });

  it("unscaled logits of rms 8 overflow exp in binary16 without max subtraction (ln 65520 = 11.09; SCIENCE.md §4)", () => {
    const result = check(load(`${HAZARDS}/softmax-without-max.yaml`));
    const softmax = result.hazards.find((h) => h.kind === "softmax-exp");
    expect(softmax?.guarded).toBe(false);
    expect(softmax?.evaluations[0]?.criticalLevel).toBeCloseTo(11.090110719, 8);
    expect(kinds(result, "binary16")).toContain("softmax-exp-overflow");
    expect(result.formats[0]?.verdict).toBe("fails");
  });

  it("subtracting the row maximum removes the exp overflow", () => {
    const result = check(load(`${HAZARDS}/softmax-without-max.yaml`, (t) => t.replace("subtract-max: false", "subtract-max: true")));
    expect(kinds(result, "binary16")).not.toContain("softmax-exp-overflow");
  });

  it("Adam's epsilon 1e-8 held in binary16 is flagged (rounds to 0: SCIENCE.md §3.3)", () => {
    const result = check(load(`${HAZARDS}/adam-epsilon-binary16.yaml`));
    expect(kinds(result, "binary16")).toContain("optimizer-epsilon-flushed");
    const inBinary32 = check(load(`${HAZARDS}/adam-epsilon-binary16.yaml`, (t) => t.replace("optimizer-states: binary16", "optimizer-states: binary32")));
    expect(inBinary32.formats.flatMap((f) => f.findings.map((x) => x.kind))).not.toContain("optimizer-epsilon-flushed");
  });

  // README.md's thresholds table: a vanishing epsilon is at risk, and fails when at least one zero second moment is
  // expected per step; the optimizer check, the hazard it points to and the folded verdict must say the same
  it.each([
    ["0.5", "fails"],
    ["1.5", "at-risk"],
  ])("epsilon rounding to 0 in binary16 states, input scale %s: %s in the hazard, the optimizer check and the verdict", (scale, expected) => {
    const result = check(load(`${HAZARDS}/adam-epsilon-boundary.yaml`, (t) => t.replace("scale: 0.5", `scale: ${scale}`)));
    expectEpsilonAgreement(result, expected);
  });

  // README.md's thresholds table: a share of nonzero elements flushed to zero (Adam's second moment included) is at
  // risk above 1% and fails above 10%, or above the thresholds the caller gives; the optimizer check, the hazard it
  // points to and the folded verdict must say the same
  it.each([
    // input scale, thresholds given, expected verdict, the flushed share's bounds (the spec sits clear of each edge)
    ["0.25", {}, "fails", 0.15, 0.5],
    ["0.75", {}, "at-risk", 0.02, 0.08],
    ["8.0", {}, "fits", 0, 0.008],
    ["0.75", { flushedAtRisk: 0.001, flushedFails: 0.03 }, "fails", 0.04, 0.08],
    ["0.75", { flushedAtRisk: 0.1, flushedFails: 0.5 }, "fits", 0.04, 0.08],
    ["0.25", { flushedAtRisk: 0.1, flushedFails: 0.5 }, "at-risk", 0.15, 0.5],
  ] as const)(
    "flushed second moments in binary16 states, input scale %s, thresholds %o: %s in the hazard, the optimizer check and the verdict",
    (scale, thresholds, expected, low, high) => {
      const result = check(load(`${HAZARDS}/adam-second-moment-boundary.yaml`, (t) => t.replace("scale: 0.75", `scale: ${scale}`)), { thresholds });
      const moment = result.hazards.find((h) => h.kind === "optimizer-second-moment");
      const share = moment?.evaluations.find((e) => e.format === "binary16")?.value ?? Number.NaN;
      expect(share).toBeGreaterThan(low);
      expect(share).toBeLessThan(high);
      expect(moment?.findings.map((f) => [f.format, f.severity])).toEqual(expected === "fits" ? [] : [["binary16", expected]]);
      // epsilon 1e-4 is a binary16 normal number (IEEE 754-2019: smallest normal 2^-14 ≈ 6.1e-5), so it is kept
      expect(result.optimizer.epsilon?.vanishes).toBe(false);
      expect(result.optimizer.reportedAsHazards).toEqual(expected === "fits" ? [] : ["optimizer-second-moment"]);
      expect(result.optimizer.verdict).toBe(expected);
      expect(result.formats.find((f) => f.format === "binary16")?.verdict).toBe(expected);
      expect(result.verdict).toBe(expected);
    },
  );

  // the count that decides a division by zero per step sums over every weight gradient: three layers each below one
  // expected zero per step fail together (input scale 1.35); with all of them smaller (scale 4) the sum stays below one
  it.each([
    ["1.35", "fails"],
    ["4", "at-risk"],
  ])("epsilon rounding to 0 in binary16 states across three small layers, input scale %s: %s in the hazard, the optimizer check and the verdict", (scale, expected) => {
    const result = check(load(`${HAZARDS}/adam-epsilon-network.yaml`, (t) => t.replace("scale: 1.35", `scale: ${scale}`)));
    const evaluation = expectEpsilonAgreement(result, expected);
    // every layer alone stays below one expected zero per step (binary16 flush bound 2^-25, β2 = 0.999): only the sum decides
    const gradients = result.tensors.filter((t) => t.role === "weight-gradient");
    expect(gradients).toHaveLength(3);
    for (const t of gradients) expect(Math.max(zeroSecondMoments(t.start, 2 ** -25, 0.999), zeroSecondMoments(t.end, 2 ** -25, 0.999))).toBeLessThan(0.95);
    if (expected === "fails") {
      expect(evaluation?.sentence).toContain("most in hidden-a/weight-gradient");
    }
  });

  // the epsilon row names the layer its sentence names: the tensor giving most zero second moments, where most
  // updates divide by zero, not the weight gradient of smallest rms (the second moment's row keeps that one)
  it("a vanishing epsilon's hazard names the layer giving most zero second moments, as its sentence does", () => {
    const result = check(load(`${HAZARDS}/adam-epsilon-top-layer.yaml`));
    const gradients = result.tensors.filter((t) => t.role === "weight-gradient");
    const byId = (id: string) => gradients.find((t) => t.id === id)!;
    const classifier = byId("classifier/weight-gradient");
    const first = byId("hidden-a/weight-gradient");
    // the two differ: the classifier's gradient is the smallest, at both ends of the horizon ...
    const smallest = Math.min(...gradients.flatMap((t) => [t.start.rms, t.end.rms]));
    expect(Math.min(classifier.start.rms, classifier.end.rms)).toBe(smallest);
    // ... but its 16 elements give at most 16 zeros per step, while hidden-a's 512 give more: for a Gaussian gradient
    // of rms σ, 2Φ(b/σ) − 1 of the elements lie below b = √(2^-25/(1 − 0.999)), where (1 − β2)·g² flushes in
    // binary16 (DESIGN.md §5 item 5; Φ by Abramowitz & Stegun 26.2.17, |error| < 7.5e-8)
    const normalCdf = (x: number): number => {
      const t = 1 / (1 + 0.2316419 * x);
      const poly = t * (0.31938153 + t * (-0.356563782 + t * (1.781477937 + t * (-1.821255978 + t * 1.330274429))));
      return 1 - (Math.exp((-x * x) / 2) / Math.sqrt(2 * Math.PI)) * poly;
    };
    const bound = Math.sqrt(2 ** -25 / 0.001);
    expect(classifier.start.elements).toBe(16);
    expect(first.start.elements * (2 * normalCdf(bound / first.start.rms) - 1)).toBeGreaterThan(5 * 16);
    const epsilon = result.hazards.find((h) => h.kind === "optimizer-constant")!;
    const evaluation = epsilon.evaluations.find((e) => e.format === "binary16")!;
    expect(evaluation.sentence).toContain("(most in hidden-a/weight-gradient, about");
    expect(epsilon.layer).toBe("hidden-a");
    expect(epsilon.input).toEqual(evaluation.at === "start" ? first.start : first.end);
    expect(epsilon.findings.map((f) => [f.format, f.severity, f.subject])).toEqual([["binary16", "fails", "hidden-a"]]);
    expect(result.formats.find((f) => f.format === "binary16")?.findings.find((f) => f.kind === "optimizer-epsilon-flushed")?.subject).toBe("hidden-a");
    expect(renderCheckText(result)).toContain("optimizer epsilon, hidden-a, binary16:");
    // the optimizer check leaves the epsilon to this row; the second moment's row keeps the smallest gradient's layer
    expect(result.optimizer.reportedAsHazards).toContain("optimizer-constant");
    expect(result.hazards.find((h) => h.kind === "optimizer-second-moment")?.layer).toBe("classifier");
  });

  it("a summed loss times a loss scale of 64 overflows a binary16 accumulator", () => {
    const result = check(load(`${HAZARDS}/loss-sum-reduction.yaml`));
    expect(kinds(result, "binary16")).toContain("loss-value-overflow");
  });
});

describe("linear chains of 100 layers (1.5^100 = 4.0656e17, 0.8^100 = 2.037e-10; SCIENCE.md §4)", () => {
  it("a per-layer factor of 1.5 predicts growth that overflows binary16 but not bfloat16", () => {
    const spec = load(`${HAZARDS}/linear-chain-grow.yaml`);
    const half = check(spec);
    const brain = check(spec, { plan: "all-bfloat16" });
    // the gradient reaching the first layer has grown by 1.5 per layer over 99 layers
    const last = half.tensors.filter((t) => t.role === "activation-gradient").map((t) => t.start.rms);
    expect(Math.max(...last) / Math.min(...last)).toBeGreaterThan(1.5 ** 95);
    expect(kinds(half, "binary16")).toContain("overflow");
    expect(half.formats[0]?.verdict).toBe("fails");
    expect(kinds(brain, "bfloat16")).not.toContain("overflow");
  });

  it("a per-layer factor of 0.8 predicts gradients that flush in binary16 but not in bfloat16", () => {
    const spec = load(`${HAZARDS}/linear-chain-shrink.yaml`);
    const half = check(spec);
    const brain = check(spec, { plan: "all-bfloat16" });
    const gradients = half.tensors.filter((t) => t.role === "activation-gradient").map((t) => t.start.rms);
    expect(Math.max(...gradients) / Math.min(...gradients)).toBeGreaterThan(0.8 ** -95);
    expect(kinds(half, "binary16")).toEqual(expect.arrayContaining(["flushed-values"]));
    expect(kinds(brain, "bfloat16")).not.toContain("flushed-values");
    expect(kinds(brain, "bfloat16")).not.toContain("gradient-energy-flushed");
  });
});

describe("the recommended loss scale (Micikevicius et al. 2018 §3.2: choose S so that S·max|g| < 65504)", () => {
  it("when the plan gives none, the check searches the window and judges with its pick", () => {
    // the 0.8 chain without its loss scale: gradients span 0.8^100 ≈ 2^-32 from the top layer to the bottom one
    const spec = load(`${HAZARDS}/linear-chain-shrink.yaml`, (t) => t.replace(/^  loss-scale: 1\n/m, ""));
    const result = check(spec);
    const window = result.lossScale.window;
    expect(result.lossScale.origin).toBe("recommended");
    expect(window?.empty).toBe(false);
    expect(window?.pickLog2).not.toBeNull();
    expect(window!.pickLog2!).toBeGreaterThanOrEqual(window!.lowestLog2!);
    expect(window!.pickLog2!).toBeLessThanOrEqual(window!.highestLog2!);
    expect(result.lossScale.value).toBe(2 ** window!.pickLog2!);
    // with the pick no gradient of the chain fails on flushing in binary16 (the forward signal, which the loss
    // scale does not touch, still does); unscaled, most of them do
    const gradientFlushFailures = (r: CheckResult) =>
      r.formats[0]?.findings.filter(
        (f) => (f.kind === "flushed-values" || f.kind === "gradient-energy-flushed") && f.subject.includes("-gradient") && f.severity === "fails",
      ) ?? [];
    expect(gradientFlushFailures(result)).toEqual([]);
    expect(gradientFlushFailures(check(spec, { lossScale: 1 })).length).toBeGreaterThan(10);
  });

  it("searches only for narrow gradient formats: binary16 yes, bfloat16 no, e5m2 with per-tensor scaling no", () => {
    const plan = load(`${HAZARDS}/linear-chain-shrink.yaml`).precision;
    expect(needsLossScale(plan)).toBe(true);
    expect(needsLossScale({ ...plan, gradients: "bfloat16" })).toBe(false);
    expect(needsLossScale({ ...plan, gradients: "e5m2", scaling: "tensor" })).toBe(false);
    expect(needsLossScale({ ...plan, gradients: "e5m2", scaling: "none" })).toBe(true);
  });
});

describe("formats given: the optimizer and the loss scale count only in the plan's formats that are judged", () => {
  const SEVERITY = { fits: 0, "at-risk": 1, fails: 2 } as const;
  const worstOf = (r: CheckResult) => r.formats.reduce((w, f) => (SEVERITY[f.verdict] > SEVERITY[w] ? f.verdict : w), "fits" as CheckResult["verdict"]);
  const NOT_COUNTED = /Not counted in the verdict: binary16 is not among the formats judged\.$/;

  it("binary16 states left out by the formats: the optimizer's findings are told, not counted", () => {
    const spec = load(`${HAZARDS}/adam-epsilon-binary16.yaml`);
    // epsilon 1e-8 lies below binary16's flush bound 2^-25 and rounds to 0 (IEEE 754-2019 binary16; SCIENCE.md §3.3)
    const planned = check(spec);
    expect(planned.optimizer.epsilon?.stored).toBe(0);
    expect(planned.optimizer.verdict).toBe("fails");
    const brain = check(spec, { formats: ["bfloat16"] });
    // the plan's optimizer is still answered, in binary16 ...
    expect(brain.optimizer.stateFormat).toBe("binary16");
    expect(brain.optimizer.epsilon?.stored).toBe(0);
    expect(brain.optimizer.reasons.length).toBe(2);
    for (const reason of brain.optimizer.reasons) expect(reason).toMatch(NOT_COUNTED);
    // ... but the verdicts are those of the formats judged
    expect(brain.optimizer.verdict).toBe("fits");
    expect(brain.verdict).toBe(worstOf(brain));
    // with binary16 among the formats judged it counts again
    const both = check(spec, { formats: ["bfloat16", "binary16"] });
    expect(both.optimizer.verdict).toBe("fails");
    expect(both.verdict).toBe("fails");
  });

  it("binary16 gradients left out by the formats: an empty loss-scale window is told, not counted", () => {
    const spec = load("specs/residual-mlp-unscaled.yaml");
    const planned = check(spec);
    expect(planned.lossScaleAnswer?.window.empty).toBe(true);
    expect(planned.verdict).toBe("fails");
    const single = check(spec, { formats: ["binary32"] });
    expect(single.lossScaleAnswer?.window.empty).toBe(true);
    expect(single.lossScaleAnswer?.sentences.at(-1)).toMatch(NOT_COUNTED);
    // its clip-norm of 1 against a predicted global norm of 4.81e17 leaves Adam's updates to ε, an optimizer failure
    // in binary32 that counts; without the clip the verdict is that of the formats judged, not the binary16 window's
    expect(single.optimizer.verdict).toBe("fails");
    const { clipNorm: _clip, ...unclipped } = spec.training.optimizer;
    const free = check({ ...spec, training: { ...spec.training, optimizer: unclipped } }, { formats: ["binary32"] });
    expect(free.optimizer.verdict).toBe("fits");
    expect(free.verdict).toBe(worstOf(free));
    expect(check(spec, { formats: ["binary32", "binary16"] }).verdict).toBe("fails");
  });

  it("on every example, formats the plan does not use give the verdict of their own findings", () => {
    const examples = readdirSync("specs").filter((name) => name.endsWith(".yaml"));
    expect(examples.length).toBeGreaterThan(3);
    for (const name of examples) {
      const spec = load(`specs/${name}`);
      for (const format of (["bfloat16", "tf32"] as const).filter((f) => !planFormats(spec.precision).includes(f))) {
        const result = check(spec, { formats: [format] });
        expect(result.verdict, `${name} in ${format}`).toBe(worstOf(result));
      }
    }
  });
});

describe("names that JavaScript objects treat specially", () => {
  it("checks the layers of a block named __proto__ under their names, like any block's", () => {
    const text = [
      "input: { features: 16 }",
      "training: { batch: 8, loss: { kind: cross-entropy, classes: 4 } }",
      "blocks:",
      "  __proto__:",
      "    - { type: dense, name: inner, width: 16 }",
      "    - relu",
      "layers:",
      "  - { type: use, block: __proto__ }",
      "  - { type: dense, name: head, width: 4 }",
    ].join("\n");
    const parsed = parseSpec(text, "proto.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const layers = [...new Set(check(parsed.spec).tensors.map((t) => t.layer))];
    expect(layers).toEqual(["input", "use-0.inner", "use-0.relu-1", "head", "loss"]);
  });
});
