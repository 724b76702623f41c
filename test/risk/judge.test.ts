import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../../src/magnitude/types.js";
import {
  DEFAULT_THRESHOLDS,
  evaluateHazard,
  findTensor,
  judgePrediction,
  limitsFor,
  planFor,
  planFormats,
  tensorFormatRisk,
  tensorStatistics,
  type LossScaleWindowSummary,
} from "../../src/risk/index.js";
import { trainingSites } from "../../src/risk/judge.js";
import { weightGradientsOf } from "../../src/risk/second-moments.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { check } from "../../src/check.js";

const SPEC_TEXT = `name: tiny
input: { features: 64 }
training:
  batch: 32
  loss: { kind: cross-entropy, classes: 10 }
precision:
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary16
  accumulate: binary32
layers:
  - type: dense
    width: 10
`;

function spec(text = SPEC_TEXT): NetworkSpec {
  const parsed = parseSpec(text, "tiny.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

function profile(partial: Partial<MagnitudeProfile>): MagnitudeProfile {
  return { elements: 640, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0, ...partial };
}

function tensor(id: string, partial: Partial<TensorPrediction>): TensorPrediction {
  const [layer = "", role = "activation"] = id.split("/");
  return {
    id,
    layer,
    layerIndex: 0,
    family: "dense",
    role: role as TensorPrediction["role"],
    slot: "activations",
    shape: [32, 10],
    start: profile({}),
    end: profile({}),
    ledger: [{ layer: "input", rule: "input scale 1", log2Factor: 0, source: "the spec" }],
    source: "predicted",
    ...partial,
  };
}

const PREDICTION: Prediction = {
  specName: "tiny",
  tensors: [
    tensor("dense-0/pre-activation", {}),
    tensor("dense-0/weight", { role: "weight", slot: "weights", start: profile({ rms: 0.125 }), end: profile({ rms: 0.125 }) }),
    tensor("dense-0/weight-gradient", { role: "weight-gradient", slot: "gradients", start: profile({ rms: 1e-7 }), end: profile({ rms: 1e-7 }) }),
  ],
  hazards: [],
  assumptions: ["A test prediction."],
};

describe("judgePrediction", () => {
  it("judges each format of the plan once, in plan order, with the tensors it holds", () => {
    const result = judgePrediction(spec(), PREDICTION);
    expect(result.formats.map((f) => [f.format, f.holds, f.tensorsJudged])).toEqual([
      ["binary16", ["activations", "weights", "gradients", "optimizerStates"], 3],
      ["binary32", ["accumulate"], 0],
    ]);
  });

  it("fails binary16 for a gradient at rms 1e-7 (23% flushed, SCIENCE.md §4) and for Adam's epsilon 1e-8", () => {
    const result = judgePrediction(spec(), PREDICTION);
    const binary16 = result.formats[0];
    expect(binary16?.verdict).toBe("fails");
    expect(result.verdict).toBe("fails");
    const kinds = new Set(binary16?.findings.map((f) => f.kind));
    expect(kinds.has("gradient-energy-flushed")).toBe(true);
    expect(kinds.has("flushed-values")).toBe(true);
    expect(kinds.has("optimizer-epsilon-flushed")).toBe(true);
    expect(binary16?.reasons[0]).toMatch(/^23\.4% of the nonzero elements of dense-0\/weight-gradient round to zero/);
    expect(result.formats[1]?.verdict).toBe("fits");
  });

  it("a loss scale of 2^12 lifts the gradient out of the flush range", () => {
    const result = judgePrediction(spec(), PREDICTION, { lossScale: 4096 });
    const kinds = result.formats[0]?.findings.map((f) => f.kind);
    expect(kinds).not.toContain("flushed-values");
    expect(kinds).not.toContain("gradient-energy-flushed");
    expect(result.lossScale).toEqual({ value: 4096, origin: "option" });
  });

  it("a format outside the plan stands in for the plan's reduced formats", () => {
    const plan = spec().precision;
    expect(planFormats(plan)).toEqual(["binary16", "binary32"]);
    const bf = planFor(plan, "bfloat16");
    expect([bf.activations, bf.weights, bf.gradients, bf.optimizerStates, bf.accumulate]).toEqual([
      "bfloat16",
      "bfloat16",
      "bfloat16",
      "bfloat16",
      "binary32",
    ]);
    const result = judgePrediction(spec(), PREDICTION, { formats: ["bfloat16"] });
    expect(result.formats.map((f) => [f.format, f.planned, f.verdict])).toEqual([["bfloat16", false, "fits"]]);
  });

  it("adds the training-setup hazards the prediction lacks: the loss value, Adam's epsilon and second moment", () => {
    const result = judgePrediction(spec(), PREDICTION);
    expect(result.hazards.map((h) => [h.kind, h.origin])).toEqual([
      ["loss-value", "training setup"],
      ["optimizer-constant", "training setup"],
      ["optimizer-second-moment", "training setup"],
    ]);
    // each Adam site judges one thing, so its kind names it
    const measures = (kind: string) => result.hazards.find((h) => h.kind === kind)?.evaluations.map((e) => e.measure);
    expect(new Set(measures("optimizer-constant"))).toEqual(new Set(["zero-second-moments"]));
    expect(new Set(measures("optimizer-second-moment"))).toEqual(new Set(["flushed-share"]));
    // the epsilon site is a plain site: its count's weight gradients come with the judge's context, not on the site
    const epsilon = trainingSites(spec(), PREDICTION).find((s) => s.kind === "optimizer-constant");
    expect(epsilon?.end).toBeUndefined();
    expect(Object.keys(epsilon ?? {})).not.toContain("gradients");
    expect(result.hazards.find((h) => h.kind === "optimizer-constant")?.evaluations.map((e) => e.at)).toEqual(["start"]);
  });

  it("is plain JSON-able data and carries the caution", () => {
    const result = judgePrediction(spec(), PREDICTION);
    expect(JSON.parse(JSON.stringify(result))).toEqual(result);
    expect(result.caution).toMatch(/estimates/);
    expect(result.caution).toMatch(/short run of a few hundred steps/);
  });

  it("evaluates a site once per plan: each format keeps what evaluating the site under its own plan gives", () => {
    const s = spec();
    const result = judgePrediction(s, PREDICTION, { formats: ["binary16", "binary32", "bfloat16"], lossScale: 8 });
    // the sites judged, in the result's order: the prediction's, then the training setup's (whose epsilon site
    // counts over the weight gradients of the context)
    const sites = [...PREDICTION.hazards, ...trainingSites(s, PREDICTION)];
    expect(sites).toHaveLength(result.hazards.length);
    for (let i = 0; i < result.hazards.length; i++) {
      const hazard = result.hazards[i]!;
      const site = sites[i]!;
      expect([site.kind, site.layer, site.input, site.detail]).toEqual([hazard.kind, hazard.layer, hazard.input, hazard.detail]);
      for (const format of ["binary16", "binary32", "bfloat16"] as const) {
        const plan = planFor(s.precision, format);
        const alone = evaluateHazard(
          site,
          {
            activations: limitsFor(plan, plan.activations),
            gradients: limitsFor(plan, plan.gradients),
            gradientSums: limitsFor(plan, plan.gradientSums ?? plan.gradients),
            optimizerStates: limitsFor(plan, plan.optimizerStates),
            accumulate: limitsFor(plan, plan.accumulate),
            lossScale: 8,
            beta2: s.training.optimizer.betas[1],
            workerGradients: s.training.workerGradients,
            workers: s.training.workers,
            thresholds: DEFAULT_THRESHOLDS,
            weightGradients: weightGradientsOf(PREDICTION),
          },
          hazard.origin,
        );
        expect(hazard.evaluations.filter((e) => e.format === format)).toEqual(alone.evaluations.filter((e) => e.format === format));
        expect(hazard.findings.filter((f) => f.format === format)).toEqual(alone.findings.filter((f) => f.format === format));
      }
    }
  });

  it("gives every tensor the numbers tensorStatistics and tensorFormatRisk give it alone", () => {
    const s = spec();
    const result = judgePrediction(s, PREDICTION, { lossScale: 64, everyFormat: true });
    PREDICTION.tensors.forEach((t, i) => {
      const checked = result.tensors[i];
      const statistics = tensorStatistics(t, 64, DEFAULT_THRESHOLDS);
      expect(checked?.statistics).toEqual(statistics);
      for (const risk of checked?.risks ?? []) {
        const plan = planFor(s.precision, risk.format);
        const alone = tensorFormatRisk(t, limitsFor(plan, risk.format), statistics, {
          judged: risk.judged,
          perTensorScaling: false,
          thresholds: DEFAULT_THRESHOLDS,
        });
        expect(risk).toEqual(alone);
      }
    });
  });

  it("merges given thresholds over the defaults, in the defaults' key order, and judges with them", () => {
    const result = judgePrediction(spec(), PREDICTION, { thresholds: { headroomAtRisk: 40, flushedAtRisk: 0.5 } });
    expect(Object.keys(result.thresholds)).toEqual(Object.keys(DEFAULT_THRESHOLDS));
    expect(result.thresholds).toEqual({ ...DEFAULT_THRESHOLDS, headroomAtRisk: 40, flushedAtRisk: 0.5 });
    // 40 binades of headroom asked for: every binary16 tensor that keeps a headroom is short of it
    const binary16 = result.formats.find((f) => f.format === "binary16");
    expect(binary16?.findings.some((f) => f.kind === "little-headroom")).toBe(true);
    expect(judgePrediction(spec(), PREDICTION).thresholds).toEqual(DEFAULT_THRESHOLDS);
  });

  it("gives every tensor, risk and format the same keys in the same order (one layout for each kind of result)", () => {
    const result = judgePrediction(spec(), PREDICTION, { lossScale: 64, everyFormat: true });
    const keys = (o: object) => Object.keys(o).join(",");
    expect(new Set(result.tensors.map(keys)).size).toBe(1);
    expect(new Set(result.tensors.flatMap((t) => t.risks.map(keys))).size).toBe(1);
    expect(new Set(result.formats.map(keys)).size).toBe(1);
  });

  it("gives every tensor and site arrays of its own, which a later judgement leaves as they were", () => {
    // the risks, findings and evaluations are gathered in reused module arrays and copied out; an array handed out
    // twice, or one a later call writes into, would show here
    const first = judgePrediction(spec(), PREDICTION, { everyFormat: true });
    const before = JSON.stringify(first);
    const arrays: unknown[][] = first.tensors.flatMap((t) => [t.risks, ...t.risks.map((r) => r.findings)]);
    arrays.push(...first.hazards.flatMap((h) => [h.evaluations, h.findings]));
    expect(new Set(arrays).size).toBe(arrays.length);
    expect(first.tensors.some((t) => t.risks.length === 2 && t.risks.some((r) => r.findings.length > 0))).toBe(true);
    judgePrediction(spec(), PREDICTION, { lossScale: 2 ** 12 });
    expect(JSON.stringify(first)).toBe(before);
  });

  // a window as src/scale would report it for e5m2 gradients (the numbers are the test's, not a search's)
  const e5m2Window: LossScaleWindowSummary = {
    format: "e5m2",
    lowestLog2: 8,
    highestLog2: 16,
    pickLog2: 12,
    empty: false,
    upperEdgeSetBy: "dense-0/weight-gradient",
    lowerEdgeSetBy: "dense-0/weight-gradient",
  };

  it("applies a window's pick to the formats whose plan as judged holds gradients in its format, and judges the others unscaled", () => {
    // a plan written in e4m3 without scale factors, so the what-if e5m2 keeps none and its gradients take the window
    const s = { ...spec(), precision: { ...spec().precision, activations: "e4m3", weights: "e4m3", gradients: "e4m3", scaling: "none" } } as ReturnType<typeof spec>;
    const result = judgePrediction(s, PREDICTION, { formats: ["e5m2", "bfloat16"], lossScaleWindows: [e5m2Window] });
    expect(result.lossScale).toEqual({ value: 4096, origin: "recommended", window: e5m2Window });
    expect(result.formats.map((f) => f.lossScale)).toEqual([undefined, { value: 1, origin: "none" }]);
    const gradient = PREDICTION.tensors[2]!;
    const checked = result.tensors[2]!;
    for (const [format, scale] of [["e5m2", 4096], ["bfloat16", 1]] as const) {
      const statistics = tensorStatistics(gradient, scale, DEFAULT_THRESHOLDS);
      const alone = tensorFormatRisk(gradient, limitsFor(planFor(s.precision, format), format), statistics, {
        judged: true,
        perTensorScaling: false,
        thresholds: DEFAULT_THRESHOLDS,
      });
      const risk = checked.risks.find((r) => r.format === format)!;
      const { statistics: own, ...numbers } = risk;
      expect(numbers).toEqual(alone);
      // the tensor's statistics are after the result's scale; a format judged at another carries its own
      expect(own ?? checked.statistics).toEqual(statistics);
      expect(own === undefined).toBe(scale === 4096);
    }
    // each format's operation sites are judged at its own scale, as judging it alone at that scale gives them
    const bfloat16Alone = judgePrediction(s, PREDICTION, { formats: ["bfloat16"] });
    const e5m2Alone = judgePrediction(s, PREDICTION, { formats: ["e5m2"], lossScale: 4096 });
    result.hazards.forEach((hazard, i) => {
      expect(hazard.evaluations.filter((e) => e.format === "bfloat16")).toEqual(bfloat16Alone.hazards[i]?.evaluations);
      expect(hazard.evaluations.filter((e) => e.format === "e5m2")).toEqual(e5m2Alone.hazards[i]?.evaluations);
    });
    expect(result.assumptions.some((a) => a.startsWith("bfloat16 is judged with bfloat16 gradients unscaled"))).toBe(true);
    // the 8-bit format's significand is not judged for stored tensors: e5m2 keeps 2 fraction bits, p = 3, so round to
    // nearest moves a value by up to 2^-3 of itself (OCP 8-bit floating point specification rev. 1.0; IEEE 754-2019 §2.1)
    const rounding = result.assumptions.find((a) => a.startsWith("Stored tensors are judged for their range"));
    expect(rounding).toContain("the few significand bits of e5m2 (a relative error up to 0.125 in e5m2)");
    expect(judgePrediction(s, PREDICTION, { formats: ["bfloat16"] }).assumptions.some((a) => a.startsWith("Stored tensors are judged for their range"))).toBe(false);
  });

  it("leaves a window for another gradient format unapplied, and a given scale wins over every window", () => {
    expect(judgePrediction(spec(), PREDICTION, { lossScaleWindow: e5m2Window }).lossScale).toEqual({ value: 1, origin: "none" });
    const given = judgePrediction(spec(), PREDICTION, { formats: ["e5m2", "bfloat16"], lossScaleWindows: [e5m2Window], lossScale: 8 });
    expect(given.lossScale).toEqual({ value: 8, origin: "option" });
    expect(given.formats.every((f) => f.lossScale === undefined)).toBe(true);
  });

  it("rejects an unknown format and a non-positive loss scale with a RangeError echoing the value", () => {
    expect(() => judgePrediction(spec(), PREDICTION, { formats: ["fp12" as never] })).toThrow(/"fp12"/);
    expect(() => judgePrediction(spec(), PREDICTION, { lossScale: -2 })).toThrow(/-2/);
  });
});

describe("findTensor", () => {
  const tensors = judgePrediction(spec(), PREDICTION).tensors;
  it("finds by id, by layer and role, and suggests near ids otherwise", () => {
    expect(findTensor(tensors, "dense-0/weight").ok).toBe(true);
    const byWords = findTensor(tensors, "dense-0 weight-gradient");
    expect(byWords.ok && byWords.tensor.id).toBe("dense-0/weight-gradient");
    const ambiguous = findTensor(tensors, "dense-0");
    expect(ambiguous.ok).toBe(false);
    expect(!ambiguous.ok && ambiguous.reason).toBe("ambiguous");
    const missing = findTensor(tensors, "dense-9/weight");
    expect(!missing.ok && missing.candidates[0]).toBe("dense-0/weight");
  });

  it("suggests the tensors of a layer named inside repeats by its own name, the role typed first", () => {
    const parsed = parseSpec(
      [
        "input: { features: 16 }",
        "training: { batch: 4, loss: { kind: cross-entropy, classes: 4 } }",
        "layers:",
        "  - { type: repeat, name: stack, times: 2, layers: [{ type: residual, name: hear, branch: [{ type: dense, width: 16 }] }] }",
        "  - { type: dense, name: out, width: 4 }",
      ].join("\n"),
      "r.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const all = check(parsed.spec).tensors;
    // both repeats' "hear" layers have an activation: the query names two tensors
    const lookup = findTensor(all, "hear activation");
    expect(lookup.ok).toBe(false);
    expect(!lookup.ok && lookup.reason).toBe("ambiguous");
    expect(!lookup.ok && lookup.candidates).toEqual(["stack.0.hear/activation", "stack.1.hear/activation"]);
    // a role the layers lack: their tensors are the nearest ids
    const role = findTensor(all, "hear weight");
    expect(!role.ok && role.reason).toBe("not-found");
    expect(!role.ok && role.candidates.slice(0, 2)).toEqual(["stack.0.hear/activation", "stack.0.hear/activation-gradient"]);
  });

  it("counts every tensor a query names and lists ids with their numbers in order (stack.2 before stack.10)", () => {
    const parsed = parseSpec(
      [
        "input: { features: 8 }",
        "training: { batch: 4, loss: { kind: mean-squared-error } }",
        "layers:",
        "  - { type: repeat, name: stack, times: 12, layers: [{ type: dense, name: mix, width: 8 }, relu] }",
        "  - { type: dense, name: out, width: 1 }",
      ].join("\n"),
      "s.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const all = check(parsed.spec).tensors;
    const lookup = findTensor(all, "mix weight");
    expect(!lookup.ok && lookup.reason).toBe("ambiguous");
    // twelve weights and their twelve biases (role weight, id suffix :bias)
    expect(!lookup.ok && lookup.reason === "ambiguous" && lookup.total).toBe(24);
    expect(!lookup.ok && lookup.candidates.slice(0, 3)).toEqual(["stack.0.mix/weight", "stack.0.mix/weight:bias", "stack.1.mix/weight"]);
    expect(!lookup.ok && lookup.candidates).not.toContain("stack.10.mix/weight");
    // one layer of that name: found by its name alone
    const single = findTensor(check({ ...parsed.spec, layers: parsed.spec.layers.slice(1) }).tensors, "out weight");
    expect(single.ok).toBe(true);
  });
});

describe("Adam's epsilon judged in two state formats", () => {
  // binary16 flushes (1 − β2)·g² below 2^-25 (half its smallest subnormal 2^-24, IEEE 754-2019 §3.6), i.e. |g| below
  // b = √(2^-25/0.001) ≈ 5.5e-3; e4m3 below 2^-10 (half its smallest subnormal 2^-9, OCP 8-bit spec Table 1), i.e.
  // |g| below ≈ 0.99. "narrow" (512 elements at rms 1e-3) flushes almost wholly in both; "wide" (4096 at rms 1) about
  // 0.44% in binary16 (2Φ(0.0055) − 1, 18 elements) but ~68% in e4m3 (2Φ(0.99) − 1, ~2,800): the tensor giving most
  // zero second moments differs between the formats, and each evaluation names its own.
  const gradient = (id: string, elements: number, rms: number) =>
    tensor(id, { role: "weight-gradient", slot: "gradients", shape: [elements], start: profile({ elements, rms }), end: profile({ elements, rms }) });
  const prediction: Prediction = {
    specName: "two widths",
    tensors: [gradient("narrow/weight-gradient", 512, 1e-3), gradient("wide/weight-gradient", 4096, 1)],
    hazards: [],
    assumptions: [],
  };

  it("names the top contributor per format, in the result and in the text", async () => {
    const result = judgePrediction(spec(), prediction, { formats: ["binary16", "e4m3"], lossScale: 1 });
    const epsilon = result.hazards.find((h) => h.kind === "optimizer-constant")!;
    const layerOf = (format: string) => {
      const evaluation = epsilon.evaluations.find((e) => e.format === format)!;
      return evaluation.layer ?? epsilon.layer;
    };
    expect(layerOf("binary16")).toBe("narrow");
    expect(layerOf("e4m3")).toBe("wide");
    for (const format of ["binary16", "e4m3"]) {
      const evaluation = epsilon.evaluations.find((e) => e.format === format)!;
      expect(evaluation.sentence).toContain(`(most in ${layerOf(format)}/weight-gradient`);
    }
    const { renderHazards } = await import("../../src/report/check-text.js");
    const text = renderHazards(result.hazards, true, 200);
    expect(text).toMatch(/optimizer epsilon, narrow, binary16: /);
    expect(text).toMatch(/optimizer epsilon, wide, e4m3: /);
  });
});
