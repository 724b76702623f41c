/**
 * The plan's `gradient-sums` format: the buffer the gradients of several workers and accumulation steps are summed in.
 * Its rounding error is √n·u in that buffer's format (Higham & Mary 2019, Theorem 2.4; from memory, unconfirmed), with
 * u = 2^-8 for bfloat16 (Intel, bfloat16 – Hardware Numerics Definition, 2018) and 2^-24 for binary32 (IEEE 754-2019
 * Table 3.5, p = 24), judged against the accumulation thresholds (at risk above 1e-2).
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { comparePlans, STANDARD_PLANS } from "../../src/compare.js";
import { planFor, type CheckResult } from "../../src/risk/index.js";
import { gradientSumFormat, parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

const PATH = "specs/transformer-encoder.yaml";

function load(edit: (text: string) => string = (t) => t): NetworkSpec {
  const parsed = parseSpec(edit(readFileSync(PATH, "utf8")), PATH);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

// the spec's own plan (mixed-bfloat16: 4 workers × 2 accumulation steps) with a gradient-sums line after its gradients
const withSums = (format: string) => (text: string) => text.replace("  gradients: bfloat16\n", `  gradients: bfloat16\n  gradient-sums: ${format}\n`);

function sumEvaluations(result: CheckResult) {
  return result.hazards.filter((h) => h.kind === "gradient-sum").flatMap((h) => h.evaluations.filter((e) => e.measure === "relative-error"));
}

describe("the plan's gradient-sums format", () => {
  it("is absent unless the plan names it, and the sums then follow the gradient format", () => {
    const plain = load();
    expect(plain.precision.gradientSums).toBeUndefined();
    expect(gradientSumFormat(plain.precision)).toBe("bfloat16");
    // a plan copied with other gradients keeps its sums with them
    expect(gradientSumFormat({ ...plain.precision, gradients: "binary16" })).toBe("binary16");
    expect(load(withSums("binary32")).precision.gradientSums).toBe("binary32");
  });

  it("an unknown format name is refused at its line and column", () => {
    const parsed = parseSpec(withSums("binary24")(readFileSync(PATH, "utf8")), PATH);
    expect(parsed.ok).toBe(false);
    if (parsed.ok) return;
    const line = readFileSync(PATH, "utf8").split("\n").indexOf("  gradients: bfloat16") + 2;
    expect(parsed.issues[0]).toMatchObject({ line, column: 18, path: "precision.gradient-sums" });
    expect(parsed.issues[0]?.message).toContain('unknown format "binary24"');
  });

  it("8 contributions summed in bfloat16 are at risk (√8·2^-8 = 0.0110); the remedy the sentence names, a binary32 sum buffer, brings them to √8·2^-24 and the finding goes", () => {
    const before = sumEvaluations(check(load()));
    expect(before.length).toBeGreaterThan(0);
    for (const e of before) {
      expect(e.format).toBe("bfloat16");
      expect(e.value).toBeCloseTo(Math.sqrt(8) * 2 ** -8, 12);
      expect(e.verdict).toBe("at-risk");
      expect(e.sentence).toContain("`gradient-sums: binary32` in the plan");
    }
    const result = check(load(withSums("binary32")));
    const after = sumEvaluations(result);
    expect(after.length).toBe(before.length);
    for (const e of after) {
      expect(e.format).toBe("binary32");
      expect(e.value).toBeCloseTo(Math.sqrt(8) * 2 ** -24, 18);
      expect(e.verdict).toBe("fits");
      expect(e.sentence).toContain("the plan's gradient-sums format");
    }
    expect(result.formats.find((f) => f.format === "bfloat16")?.findings.some((f) => f.kind === "accumulation-error")).toBe(false);
    expect(result.formats.find((f) => f.format === "binary32")?.holds).toContain("gradientSums");
    expect(result.formats.find((f) => f.format === "bfloat16")?.holds).not.toContain("gradientSums");
  });

  it("a format holds the sums only where contributions are summed (one worker, one step: no sum buffer)", () => {
    const single = load((t) => t.replace("  workers: 4\n", "  workers: 1\n").replace("  accumulation-steps: 2\n", "  accumulation-steps: 1\n"));
    expect(single.training.workers).toBe(1);
    expect(check(single).formats.some((f) => f.holds.includes("gradientSums"))).toBe(false);
    expect(check(load()).formats.find((f) => f.format === "bfloat16")?.holds).toContain("gradientSums");
  });

  it("a format judged in place of the plan's takes its sums only when the plan named a reduced one", () => {
    const plain = load().precision;
    expect(planFor(plain, "binary16").gradientSums).toBeUndefined();
    expect(planFor({ ...plain, gradientSums: "bfloat16" }, "binary16").gradientSums).toBe("binary16");
    expect(planFor({ ...plain, gradientSums: "binary32" }, "binary16").gradientSums).toBe("binary32");
  });

  it("a plan that sums in a format of its own stores one contribution per weight gradient in the gradient format: its window widens by the sum's growth", () => {
    // invented: a reef-sonar tagger on 256 workers that sum their gradients, 8 accumulation steps (2048 contributions)
    const text = (sums: string, workers = 256, steps = 8) =>
      [
        "name: reef-sonar",
        "input: { features: 512 }",
        "training:",
        "  batch: 1024",
        "  loss: { kind: cross-entropy, classes: 10, reduction: sum }",
        `  workers: ${workers}`,
        "  worker-gradients: sum",
        `  accumulation-steps: ${steps}`,
        "  optimizer: { kind: adam, learning-rate: 0.001 }",
        "  horizon: { steps: 10000, final-loss: 0.5 }",
        `precision: { activations: binary16, master-weights: binary32${sums === "" ? "" : `, gradient-sums: ${sums}`} }`,
        "layers:",
        "  - { type: dense, name: hidden, width: 1024, init: he-normal }",
        "  - relu",
        "  - { type: dense, name: out, width: 10, init: glorot-normal }",
      ].join("\n");
    const load = (t: string) => {
      const parsed = parseSpec(t, "reef-sonar.yaml");
      if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
      return parsed.spec;
    };
    const inPlace = check(load(text("")));
    const apart = check(load(text("binary32")));
    // each stored weight gradient is its gradient-sum site's one contribution, at the start and the end
    const sites = new Map(apart.hazards.filter((h) => h.kind === "gradient-sum").map((h) => [h.layer, h] as const));
    for (const t of apart.tensors.filter((t) => t.role === "weight-gradient")) {
      const site = inPlace.hazards.find((h) => h.kind === "gradient-sum" && h.detail.startsWith(t.id));
      expect(site, t.id).toBeDefined();
      expect(t.start.rms, t.id).toBe(site!.input.rms);
      expect(t.start.rms, t.id).toBeLessThan(inPlace.tensors.find((u) => u.id === t.id)!.start.rms);
    }
    expect(sites.size).toBe(2);
    // the overflow edge is set by a weight gradient in both: held one contribution at a time it moves up by binades
    const [a, b] = [inPlace.lossScaleAnswer!.window, apart.lossScaleAnswer!.window];
    expect(b.highestLog2! - a.highestLog2!).toBeGreaterThanOrEqual(5);
    // one worker and one step: nothing is summed, so the two plans store and judge the same
    const single = (sums: string) => check(load(text(sums, 1, 1))).lossScaleAnswer!.window;
    expect(single("binary32")).toEqual(single(""));
  });

  it("compare counts a sum buffer of its own: the standard 8-bit plan (binary32 sums) pays 4 bytes per parameter more than its e5m2 gradients", () => {
    // bytes per element: e4m3/e5m2 1 (OCP 8-bit spec), binary32 4 (IEEE 754-2019); AdamW keeps two binary32 states
    const eightBit = STANDARD_PLANS.find((p) => p.name === "8-bit with scale factors");
    expect(eightBit?.gradientSums).toBe("binary32");
    const spec = load();
    const [summed, inPlace] = comparePlans(spec, { plans: [eightBit!, { ...eightBit!, name: "8-bit, sums in e5m2", gradientSums: undefined }] }).outcomes
      .sort((a, b) => a.plan.name.localeCompare(b.plan.name));
    // weights 1 + master copy 4 + gradients 1 + states 2 × 4, and the binary32 sum buffer 4
    expect(inPlace?.plan.name).toBe("8-bit, sums in e5m2");
    expect(inPlace?.cost.bytesPerParameter).toBe(1 + 4 + 1 + 8);
    expect(summed?.cost.bytesPerParameter).toBe(1 + 4 + 1 + 8 + 4);
  });
});
