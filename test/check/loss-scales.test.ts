import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check, needsLossScale, unscaledReason, type CheckAnswer, type LossScaleItem } from "../../src/check.js";
import { parseSpec } from "../../src/spec/index.js";
import { renderCheckText } from "../../src/report/check-text.js";
import type { NetworkSpec, PrecisionPlan } from "../../src/spec/types.js";

// `CheckAnswer.lossScales`: one item per gradient format the check speaks about, worked out once in src/check.ts.
// Which formats take no loss scale: binary32 has an 8-bit exponent field (emin −126) and binary16 a 5-bit one (emin −14)
// (IEEE 754-2019 Table 3.5); bfloat16 keeps binary32's 8 exponent bits in 16 (bfloat16 hardware numerics definition, 2018, as in
// test/formats/reference.ts);
// e5m2 and e4m3 have 5 and 4 exponent bits (OCP 8-bit floating point specification rev. 1.0), and per-tensor or
// per-block scale factors take the loss scale's place (OCP microscaling formats specification v1.0 for blocks).

function load(path: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(path, "utf8"), path);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

const spec = load("specs/wide-classifier.yaml");

function withPlan(edit: Partial<PrecisionPlan>): NetworkSpec {
  return { ...spec, precision: { ...spec.precision, ...edit } };
}

// the parts of an item that are data about the status, the answer reduced to its format
function shape(item: LossScaleItem): unknown {
  return item.status === "not-needed"
    ? { format: item.format, status: item.status, reason: item.reason }
    : { format: item.format, status: item.status, answerFormat: item.answer.format };
}

function answers(result: CheckAnswer) {
  return [result.lossScaleAnswer, ...(result.moreLossScaleAnswers ?? [])].filter((a) => a !== null);
}

describe("unscaledReason", () => {
  it("gives the kind and the clause for each format that takes no scale, and null for those that need one", () => {
    expect(unscaledReason({ ...spec.precision, gradients: "bfloat16" })).toEqual({
      kind: "wide-range",
      sentence: "gradients are held in bfloat16, which has binary32's exponent range",
    });
    expect(unscaledReason({ ...spec.precision, gradients: "binary32" })).toEqual({ kind: "binary32-or-wider", sentence: "gradients are held in binary32" });
    expect(unscaledReason({ ...spec.precision, gradients: "e4m3", scaling: "tensor" })).toEqual({
      kind: "scale-factors",
      sentence: "gradients are held in e4m3 with per-tensor scale factors",
    });
    expect(unscaledReason({ ...spec.precision, gradients: "e5m2", scaling: "block" })?.sentence).toBe("gradients are held in e5m2 with per-block scale factors");
    for (const gradients of ["binary16", "e5m2", "e4m3"] as const) {
      expect(unscaledReason({ ...spec.precision, gradients, scaling: "none" })).toBeNull();
      expect(needsLossScale({ ...spec.precision, gradients, scaling: "none" })).toBe(true);
    }
  });
});

describe("CheckAnswer.lossScales", () => {
  it("a binary16 plan: one window item, the plan's answer", () => {
    const result = check(spec);
    expect(result.lossScales.map(shape)).toEqual([{ format: "binary16", status: "window", answerFormat: "binary16" }]);
    const item = result.lossScales[0]!;
    expect(item.status === "window" && item.answer).toBe(result.lossScaleAnswer);
    expect(result.lossScaleAnswer!.window.empty).toBe(false);
  });

  it("a bfloat16 plan: one not-needed item with the exponent range as its reason, and no answer", () => {
    const result = check(spec, { plan: "mixed-bfloat16" });
    expect(result.lossScaleAnswer).toBeNull();
    expect(result.lossScales.map(shape)).toEqual([
      {
        format: "bfloat16",
        status: "not-needed",
        reason: { kind: "wide-range", sentence: "gradients are held in bfloat16, which has binary32's exponent range" },
      },
    ]);
  });

  it("8-bit gradients without scale factors need a scale: the item carries e5m2's answer", () => {
    const result = check(withPlan({ gradients: "e5m2", scaling: "none" }));
    expect(result.lossScales).toHaveLength(1);
    const item = result.lossScales[0]!;
    expect(item.format).toBe("e5m2");
    expect(item.status).not.toBe("not-needed");
    if (item.status === "not-needed") return;
    expect(item.answer).toBe(result.lossScaleAnswer);
    expect(item.status).toBe(item.answer.window.empty ? "empty" : "window");
  });

  it("8-bit gradients with per-tensor scale factors: not needed, and the scale factors are the reason", () => {
    const result = check(withPlan({ gradients: "e5m2", scaling: "tensor" }));
    expect(result.lossScaleAnswer).toBeNull();
    expect(result.lossScales.map(shape)).toEqual([
      {
        format: "e5m2",
        status: "not-needed",
        reason: { kind: "scale-factors", sentence: "gradients are held in e5m2 with per-tensor scale factors" },
      },
    ]);
  });

  // a plan written in e4m3 without scale factors: what-if 8-bit formats keep that choice (a binary16 plan makes none)
  const unscaled = withPlan({ activations: "e4m3", weights: "e4m3", gradients: "e4m3", scaling: "none" });

  it("--format binary16,e5m2 on a plan without scale factors: two items, in the order of the formats, each with its own answer", () => {
    const result = check(unscaled, { formats: ["binary16", "e5m2"] });
    expect(result.lossScales.map(shape)).toEqual([
      { format: "binary16", status: "window", answerFormat: "binary16" },
      { format: "e5m2", status: expect.stringMatching(/^(window|empty)$/), answerFormat: "e5m2" },
    ]);
    // the same answer objects as the fields kept for compatibility
    expect(result.lossScales.map((item) => (item.status === "not-needed" ? null : item.answer))).toEqual(answers(result));
    expect(result.lossScales[0]!.status !== "not-needed" && result.lossScales[0]!.answer).toBe(result.lossScaleAnswer);
    expect(result.lossScales[1]!.status !== "not-needed" && result.lossScales[1]!.answer).toBe(result.moreLossScaleAnswers?.[0]);
  });

  it("--format bfloat16,e5m2 on a plan without scale factors: a not-needed item first, then e5m2's answer, which is still lossScaleAnswer", () => {
    const result = check(unscaled, { formats: ["bfloat16", "e5m2"] });
    expect(result.lossScales.map((item) => [item.format, item.status === "not-needed" ? item.reason.kind : "answer"])).toEqual([
      ["bfloat16", "wide-range"],
      ["e5m2", "answer"],
    ]);
    expect(result.lossScaleAnswer?.format).toBe("e5m2");
    expect(result.moreLossScaleAnswers).toBeUndefined();
  });

  it("--format e5m2 on the binary16 plan: e5m2 takes the spec's default per-tensor scale factors, so no loss scale", () => {
    // scale factors apply to 8-bit formats only (OCP 8-bit specification; src/spec/normalize.ts gives a plan naming one
    // per-tensor factors by default): the binary16 plan's "none" is no choice about them
    const result = check(spec, { formats: ["e5m2"] });
    expect(result.lossScales.map((item) => [item.format, item.status === "not-needed" ? item.reason.kind : "answer"])).toEqual([["e5m2", "scale-factors"]]);
    expect(result.lossScaleAnswer).toBeNull();
  });
});

describe("a not-needed item beside backward sums that flush in a narrow accumulate format", () => {
  // bfloat16 gradients need no scale (binary32's exponent range), but sums accumulated in binary16 round terms below
  // half its smallest subnormal, 2^-25 ≈ 2.98e-8, to zero (IEEE 754-2019 Table 3.5: binary16 emin −14, p 11;
  // round to nearest): a loss scale would lift those terms, so "not needed" alone would contradict their remedy
  const mixed = withPlan({ activations: "bfloat16", weights: "bfloat16", gradients: "bfloat16", accumulate: "binary16" });

  function flushingSums(result: CheckAnswer): number {
    return result.hazards.filter((h) =>
      h.evaluations.some((e) => e.format === "binary16" && e.heldIn === "accumulate" && e.measure === "flushed-energy" && e.verdict !== "fits"),
    ).length;
  }

  it("the item names the accumulate format, the count of such sums and the scale they were judged at", () => {
    const result = check(mixed);
    const flushing = flushingSums(result);
    expect(flushing).toBeGreaterThan(0);
    const item = result.lossScales[0]!;
    expect(item.status).toBe("not-needed");
    if (item.status !== "not-needed") return;
    expect(item.flushedSums).toMatchObject({ format: "binary16", operations: flushing, lossScale: 1 });
    // each counted sum's own remedy names a larger loss scale, which the item no longer contradicts
    const remedies = result.hazards.flatMap((h) => h.findings).filter((f) => f.kind === "gradient-energy-flushed" && f.format === "binary16");
    expect(remedies.length).toBeGreaterThan(0);
    for (const f of remedies) expect(f.sentence).toContain("or a larger loss scale");
    expect(item.flushedSums?.sentence).toContain(`${flushing === 1 ? "1 backward sum" : `${flushing} backward sums`} accumulated in binary16`);
    expect(renderCheckText(result, { width: 1000 })).toMatch(/not needed \(gradients are held in bfloat16, which has binary32's exponent range\); but \d+ backward sums?\s+accumulated/);
  });

  it("no caveat when the sums are accumulated in binary32, or when nothing flushes in binary16", () => {
    const wide = check(withPlan({ activations: "bfloat16", weights: "bfloat16", gradients: "bfloat16", accumulate: "binary32" }));
    const item = wide.lossScales[0]!;
    expect(item.status === "not-needed" && item.flushedSums).toBe(undefined);
    expect(JSON.stringify(wide.lossScales)).not.toContain("flushedSums");
    // deep-relu-he keeps its gradients near 1 (He et al. 2015): no binary16 sum flushes
    const he = load("specs/deep-relu-he.yaml");
    const stable = check({ ...he, precision: { ...he.precision, gradients: "bfloat16", activations: "bfloat16", weights: "bfloat16", accumulate: "binary16" } });
    expect(flushingSums(stable)).toBe(0);
    expect(stable.lossScales.every((i) => i.status !== "not-needed" || i.flushedSums === undefined)).toBe(true);
  });
});
