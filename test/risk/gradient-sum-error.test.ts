/**
 * The rounding error of gradients summed across accumulation steps and workers, judged as an accumulation is: √n·u
 * for n terms of random sign in a format of unit roundoff u (Higham & Mary 2019, "A New Approach to Probabilistic
 * Rounding Error Analysis", Theorem 2.4: λ√n·u with high probability; from memory, unconfirmed), n·u at worst
 * (Higham 2002, Accuracy and Stability of Numerical Algorithms, §4.2, recursive summation; from memory), against the
 * accumulation thresholds of README.md's table (at risk above 1e-2, fails above 1e-1).
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import type { HazardSite, MagnitudeProfile } from "../../src/magnitude/types.js";
import { evaluateHazard, type CheckResult, type HazardContext } from "../../src/risk/index.js";
import { scaledFindings } from "../../src/scale/pick.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { BFLOAT16_FTZ, BINARY32 } from "./limits.js";
import { context as baseContext, profile as baseProfile } from "./hazard-sites.js";

// four workers averaging their gradients, inputs of 4096 elements at rms 1e-3
const profile = (partial: Partial<MagnitudeProfile>): MagnitudeProfile => baseProfile({ elements: 4096, rms: 1e-3, ...partial });
const context = (partial: Partial<HazardContext> = {}): HazardContext => baseContext({ workerGradients: "average", workers: 4, ...partial });

function sum(terms: number): HazardSite {
  return { kind: "gradient-sum", layer: "reader", tensor: "reader/weight-gradient", input: profile({}), terms, guarded: false, detail: "test site" };
}

function errorOf(site: HazardSite, ctx: HazardContext) {
  const judged = evaluateHazard(site, ctx);
  return { evaluation: judged.evaluations.find((e) => e.measure === "relative-error"), finding: judged.findings.find((f) => f.kind === "accumulation-error") };
}

function load(path: string, edit: (text: string) => string = (t) => t): NetworkSpec {
  const parsed = parseSpec(edit(readFileSync(path, "utf8")), path);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

function sumErrors(result: CheckResult) {
  return result.hazards.filter((h) => h.kind === "gradient-sum").flatMap((h) => h.findings.filter((f) => f.kind === "accumulation-error"));
}

describe("the rounding error of a gradient sum", () => {
  it("4096 contributions held in bfloat16 (u = 2^-8): √4096·2^-8 = 0.25, past the 1e-1 at which an accumulation fails", () => {
    // bfloat16 keeps 8 significant bits, u = 2^-8 (Intel, bfloat16 – Hardware Numerics Definition, 2018)
    const { evaluation, finding } = errorOf(sum(4096), context({ gradients: BFLOAT16_FTZ }));
    expect(evaluation?.value).toBe(0.25);
    expect(evaluation?.format).toBe("bfloat16");
    expect(evaluation?.heldIn).toBe("gradientSums");
    expect(evaluation?.verdict).toBe("fails");
    expect(finding?.severity).toBe("fails");
    expect(finding?.threshold).toBe(0.1);
    expect(evaluation?.sentence).toBe(
      "Summed in bfloat16, the gradient format, the 4096 gradient contributions of reader/weight-gradient carry a relative " +
        "rounding error of about √n·u = 0.25 (fails): sum them in binary32 (`gradient-sums: binary32` in the plan), or sum at most 6 contributions " +
        "(fewer accumulation steps or workers).",
    );
  });

  it("800,000 contributions held in binary16 (u = 2^-11, IEEE 754-2019 Table 3.5, p = 11): √800000·2^-11 = 0.4367 fails", () => {
    const { evaluation } = errorOf(sum(800_000), context());
    expect(evaluation?.value).toBeCloseTo(Math.sqrt(800_000) / 2048, 12);
    expect(evaluation?.value).toBeCloseTo(0.43673, 5);
    expect(evaluation?.verdict).toBe("fails");
    // n ≤ (1e-2 / 2^-11)² = 419.4 keeps √n·u within the at-risk threshold (own algebra from the rule above)
    expect(evaluation?.sentence).toContain("sum at most 419 contributions");
  });

  it("follows the accumulation rule and thresholds: in bfloat16 6 terms fit (0.00957), 7 are at risk (0.01034), as an accumulation of as many", () => {
    for (const [terms, verdict] of [[6, "fits"], [7, "at-risk"], [163, "at-risk"], [656, "fails"]] as const) {
      const gradientSum = errorOf(sum(terms), context({ gradients: BFLOAT16_FTZ })).evaluation;
      const accumulation = evaluateHazard({ ...sum(terms), kind: "accumulation", tensor: undefined }, context({ accumulate: BFLOAT16_FTZ })).evaluations.find(
        (e) => e.measure === "relative-error",
      );
      expect(gradientSum?.value).toBeCloseTo(Math.sqrt(terms) * 2 ** -8, 15);
      expect(gradientSum?.value).toBe(accumulation?.value);
      expect(gradientSum?.verdict).toBe(verdict);
      expect(accumulation?.verdict).toBe(verdict);
    }
  });

  it("is judged in the gradient format, not the plan's accumulate format (the plan names no other format for the sum)", () => {
    const held = errorOf(sum(4096), context({ gradients: BFLOAT16_FTZ, accumulate: BINARY32 })).evaluation;
    expect(held?.format).toBe("bfloat16");
    // binary32 gradients: √4096·2^-24 = 3.8e-6 fits (C limits, FLT_EPSILON = 2^-23)
    const wide = errorOf(sum(4096), context({ gradients: BINARY32 })).evaluation;
    expect(wide?.value).toBe(64 * 2 ** -24);
    expect(wide?.verdict).toBe("fits");
    expect(wide?.sentence).not.toContain("at most");
  });

  it("keeps the overflow evaluation first and adds the error last, with or without the division's flush", () => {
    const summed = evaluateHazard(sum(64), context({ workerGradients: "sum" })).evaluations.map((e) => e.measure);
    const averaged = evaluateHazard(sum(64), context()).evaluations.map((e) => e.measure);
    expect(summed).toEqual(["overflow-risk", "relative-error"]);
    expect(averaged).toEqual(["overflow-risk", "flushed-energy", "relative-error"]);
  });
});

describe("gradient sums in checks of whole specs", () => {
  const HAZARDS = "test/fixtures/specs/hazards";

  it("a purpose-built spec summing 4 workers × 1024 steps in bfloat16 fails on the sums' rounding error; gradients in binary32 fit", () => {
    const spec = load(`${HAZARDS}/gradient-sum-bfloat16.yaml`);
    const result = check(spec);
    const errors = sumErrors(result);
    expect(errors.length).toBeGreaterThan(0);
    for (const f of errors) {
      expect(f.format).toBe("bfloat16");
      expect(f.value).toBe(0.25);
      expect(f.severity).toBe("fails");
    }
    expect(result.formats.find((f) => f.format === "bfloat16")?.verdict).toBe("fails");
    expect(result.verdict).toBe("fails");
    const wide = check(spec, { plan: "gradients-binary32" });
    expect(sumErrors(wide)).toEqual([]);
    expect(wide.verdict).toBe("fits");
  });

  it("a purpose-built spec summing 800,000 contributions in binary16 fails; the loss-scale pick does not count the error, which no scale moves", () => {
    const result = check(load(`${HAZARDS}/gradient-sum-binary16.yaml`));
    const errors = sumErrors(result);
    expect(errors.length).toBeGreaterThan(0);
    for (const f of errors) expect(f.value).toBeCloseTo(Math.sqrt(800_000) / 2048, 12);
    expect(result.verdict).toBe("fails");
    // every finding that moves with the scale is gone at the pick; the sums' rounding errors stay
    expect(scaledFindings(result, "binary16")).toEqual({ fails: 0, atRisk: 0, overflowSide: 0, conditional: 0 });
    expect(result.lossScaleAnswer?.weighing?.unscaled?.fails).toBe(0);
  });

  it("transformer-encoder with 1024 accumulation steps × 4 workers: bfloat16 gradient sums fail (√4096·2^-8 = 0.25)", () => {
    const result = check(load("specs/transformer-encoder.yaml", (t) => t.replace("accumulation-steps: 2", "accumulation-steps: 1024")));
    const errors = sumErrors(result);
    expect(errors.length).toBeGreaterThan(0);
    expect(errors.every((f) => f.format === "bfloat16" && f.value === 0.25 && f.severity === "fails")).toBe(true);
    expect(result.verdict).toBe("fails");
  });

  it("wide-classifier with 8 workers × 100,000 accumulation steps: binary16 gradient sums fail (√800000·2^-11 = 0.437)", () => {
    const result = check(load("specs/wide-classifier.yaml", (t) => t.replace("accumulation-steps: 1", "accumulation-steps: 100000")));
    const errors = sumErrors(result);
    expect(errors.length).toBeGreaterThan(0);
    expect(errors.every((f) => f.format === "binary16" && f.severity === "fails")).toBe(true);
    expect(result.verdict).toBe("fails");
  });
});
