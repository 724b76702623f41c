import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check, needsLossScale, type CheckAnswer } from "../../src/check.js";
import { planFor, type TensorCheck, type TensorCheckRisk } from "../../src/risk/index.js";
import { DEFAULT_WINDOW_OPTIONS } from "../../src/scale/window.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { REFERENCE_FORMATS } from "../formats/reference.js";

// The what-if formats of `check --format`: each judged at the loss scale that fits its own gradients.

function load(path: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(path, "utf8"), path);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

// smallest subnormal 2^(emin − (p − 1))
function smallestSubnormalLog2(name: keyof typeof REFERENCE_FORMATS): number {
  const f = REFERENCE_FORMATS[name];
  return f.emin - (f.precision - 1);
}

const GRADIENT_ROLES = new Set(["activation-gradient", "weight-gradient", "pre-activation-gradient"]);

function gradientRisks(result: CheckAnswer, format: string): { tensor: TensorCheck; risk: TensorCheckRisk }[] {
  const rows: { tensor: TensorCheck; risk: TensorCheckRisk }[] = [];
  for (const tensor of result.tensors) {
    if (!GRADIENT_ROLES.has(tensor.role)) continue;
    for (const risk of tensor.risks) if (risk.format === format && risk.judged) rows.push({ tensor, risk });
  }
  return rows;
}

// the numbers of a tensor's risk, without the statistics that say which scale they are after
function numbers(risk: TensorCheckRisk): unknown {
  const { statistics: _statistics, ...rest } = risk;
  return rest;
}

const spec = load("specs/deep-relu-he.yaml");
// the plan written in e4m3 without scale factors: an 8-bit format put in its place keeps that choice, so e5m2 and e4m3
// gradients need a loss scale of their own (a binary16 plan makes no choice about 8-bit scale factors: see "what-if
// 8-bit formats take the spec's default scale factors" below)
const unscaled: NetworkSpec = { ...spec, precision: { ...spec.precision, activations: "e4m3", weights: "e4m3", gradients: "e4m3", scaling: "none" } };

describe("check --format e5m2 on a plan without scale factors and with no loss scale", () => {
  const plain = check(spec);
  const e5m2 = check(unscaled, { formats: ["e5m2"] });
  const plainWindow = plain.lossScaleAnswer!.window;
  const window = e5m2.lossScaleAnswer!.window;

  it("answers the loss scale for e5m2 gradients, not the plan's e4m3 ones", () => {
    expect(unscaled.precision.gradients).toBe("e4m3");
    expect(planFor(unscaled.precision, "e5m2").gradients).toBe("e5m2");
    expect(planFor(unscaled.precision, "e5m2").scaling).toBe("none");
    expect(e5m2.lossScaleAnswer?.format).toBe("e5m2");
    expect(e5m2.moreLossScaleAnswers).toBeUndefined();
    expect(e5m2.lossScale.origin).toBe("recommended");
    expect(e5m2.lossScale.window?.format).toBe("e5m2");
  });

  it("the e5m2 window's lower edge sits 8 binades above binary16's: e5m2's smallest subnormal is 2^-16, binary16's 2^-24", () => {
    // OCP 8-bit floating point specification rev. 1.0 (E5M2: emin −14, 2 fraction bits); IEEE 754-2019 Table 3.5 (binary16)
    const footroomGap = smallestSubnormalLog2("e5m2") - smallestSubnormalLog2("binary16");
    expect(footroomGap).toBe(8);
    // the lower edge is the smallest 2^k at which no gradient loses more than the tolerated share of its squared
    // norm below half the smallest subnormal (README "Loss scale"): that threshold moves by exactly 2^8
    expect(window.lowestLog2).toBe(plainWindow.lowestLog2! + footroomGap);
  });

  it("its upper edge is binary16's or one binade lower: e5m2 overflows between half and all of binary16's level", () => {
    // OCP: E5M2 max 57344 = 1.75·2^15; IEEE 754-2019: binary16 max 65504, overflowing at 65520 (round to nearest)
    const ratio = REFERENCE_FORMATS.e5m2.maxFinite / REFERENCE_FORMATS.binary16.maxFinite;
    expect(ratio).toBeGreaterThan(0.5);
    expect(ratio).toBeLessThanOrEqual(1);
    expect(window.highestLog2).toBeGreaterThanOrEqual(plainWindow.highestLog2! - 1);
    expect(window.highestLog2).toBeLessThanOrEqual(plainWindow.highestLog2!);
  });

  it("judges e5m2 gradients at e5m2's own pick, inside its window and at least the margin below its overflow edge", () => {
    expect(window.empty).toBe(false);
    const pick = window.pickLog2!;
    expect(pick).toBeGreaterThanOrEqual(window.lowestLog2!);
    // README "Loss scale": the pick is kept at least 2 binades below the overflow edge when the window allows
    if (window.highestLog2! - window.lowestLog2! >= 2 * DEFAULT_WINDOW_OPTIONS.marginBinades) {
      expect(pick).toBeLessThanOrEqual(window.highestLog2! - DEFAULT_WINDOW_OPTIONS.marginBinades);
    }
    expect(e5m2.lossScale.value).toBe(2 ** pick);
    // binary16's pick is not the one applied (the defect: e5m2 was judged at binary16's pick)
    expect(pick).not.toBe(plainWindow.pickLog2);
    const rows = gradientRisks(e5m2, "e5m2");
    expect(rows.length).toBeGreaterThan(50);
    for (const { tensor, risk } of rows) {
      expect(risk.statistics).toBeUndefined();
      expect(tensor.statistics.factor).toBe(2 ** pick);
    }
  });

  it("at that pick every e5m2 gradient keeps its flushed energy within the window's tolerance, footroom measured from 2^-16", () => {
    for (const { tensor, risk } of gradientRisks(e5m2, "e5m2")) {
      expect(risk.worst.flushedEnergy, tensor.id).toBeLessThanOrEqual(DEFAULT_WINDOW_OPTIONS.flushTolerance);
      const lows = [tensor.statistics.start.low, tensor.statistics.end.low].filter((low) => low > 0);
      if (lows.length === 0) continue;
      // footroom = log2(low quantile after the loss scale / smallest subnormal), OCP E5M2 smallest subnormal 2^-16
      expect(risk.worst.footroom, tensor.id).toBeCloseTo(Math.log2(Math.min(...lows)) - smallestSubnormalLog2("e5m2"), 9);
    }
    const budget = gradientRisks(e5m2, "e5m2").reduce((sum, { risk }) => sum + risk.worst.overflowRisk, 0);
    expect(budget).toBeLessThanOrEqual(DEFAULT_WINDOW_OPTIONS.riskBudget);
  });

  it("the assumptions name the e5m2 window the scale was picked in", () => {
    expect(e5m2.assumptions.some((a) => /recommended 2\^\d+.*no e5m2 gradient overflows/.test(a))).toBe(true);
  });
});

describe("what-if formats whose gradients need no loss scale", () => {
  it("bfloat16 gradients are judged unscaled: the same numbers as with an explicit loss scale of 1", () => {
    // bfloat16 shares binary32's exponent range (emin −126), so its gradients take no scale (src/check.ts needsLossScale)
    expect(needsLossScale(planFor(spec.precision, "bfloat16"))).toBe(false);
    const result = check(spec, { formats: ["bfloat16"] });
    expect(result.lossScale).toEqual({ value: 1, origin: "none" });
    expect(result.lossScaleAnswer).toBeNull();
    const explicit = check(spec, { formats: ["bfloat16"], lossScale: 1 });
    const rows = gradientRisks(result, "bfloat16");
    expect(rows.length).toBeGreaterThan(50);
    const explicitRows = gradientRisks(explicit, "bfloat16");
    rows.forEach(({ tensor, risk }, i) => {
      expect(tensor.statistics.factor).toBe(1);
      expect(risk).toEqual(explicitRows[i]?.risk);
    });
  });
});

describe("two what-if formats at once", () => {
  const alone = {
    e5m2: check(unscaled, { formats: ["e5m2"] }),
    bfloat16: check(unscaled, { formats: ["bfloat16"] }),
    e4m3: check(unscaled, { formats: ["e4m3"] }),
  };

  it("e5m2 and bfloat16: each judged at its own scale, with the numbers of each judged alone, in either order", () => {
    for (const order of [["e5m2", "bfloat16"], ["bfloat16", "e5m2"]] as const) {
      const both = check(unscaled, { formats: [...order] });
      const first = alone[order[0]];
      // the result's loss scale is the first format's; the other gives its own
      expect(both.lossScale).toEqual(first.lossScale);
      expect(both.formats[0]?.lossScale).toBeUndefined();
      expect(both.formats[1]?.lossScale).toEqual(alone[order[1]].lossScale);
      expect(both.lossScaleAnswer?.format).toBe("e5m2");
      expect(both.moreLossScaleAnswers).toBeUndefined();
      for (const format of order) {
        const rows = gradientRisks(both, format);
        const reference = gradientRisks(alone[format], format);
        expect(rows.length).toBe(reference.length);
        rows.forEach(({ tensor, risk }, i) => {
          expect(numbers(risk), `${tensor.id} in ${format}`).toEqual(numbers(reference[i]!.risk));
          // numbers after another scale than the tensor's statistics carry their own
          const factor = (risk.statistics ?? tensor.statistics).factor;
          expect(factor).toBe(alone[format].lossScale.value);
          if (risk.statistics !== undefined) expect(risk.statistics).toEqual(reference[i]!.tensor.statistics);
        });
        expect(both.formats.find((f) => f.format === format)?.verdict).toBe(alone[format].formats[0]?.verdict);
      }
    }
  });

  it("e5m2 and e4m3: one window per gradient format, each applied to its own format", () => {
    const both = check(unscaled, { formats: ["e5m2", "e4m3"] });
    const answers = [both.lossScaleAnswer, ...(both.moreLossScaleAnswers ?? [])];
    expect(answers.map((a) => a?.format)).toEqual(["e5m2", "e4m3"]);
    expect(answers[1]?.window).toEqual(alone.e4m3.lossScaleAnswer?.window);
    // OCP E4M3: smallest subnormal 2^-9, 7 binades above E5M2's 2^-16: the flush edge moves by the same 7
    expect(answers[1]!.window.lowestLog2! - answers[0]!.window.lowestLog2!).toBe(smallestSubnormalLog2("e4m3") - smallestSubnormalLog2("e5m2"));
    expect(both.formats[1]?.lossScale).toEqual(alone.e4m3.lossScale);
    expect(both.formats[1]?.verdict).toBe(alone.e4m3.formats[0]?.verdict);
    // an empty e4m3 window is about a format judged, so it counts in the verdict as it does for e4m3 alone
    expect(answers[1]?.window.empty).toBe(true);
    expect(both.verdict).toBe(alone.e4m3.verdict);
  });
});

describe("an explicit loss scale", () => {
  it("is applied to every judged format, what-if or planned", () => {
    const result = check(spec, { formats: ["e5m2", "bfloat16", "binary16"], lossScale: 1024 });
    expect(result.lossScale).toEqual({ value: 1024, origin: "option" });
    for (const format of result.formats) {
      expect(format.lossScale).toBeUndefined();
      for (const { tensor, risk } of gradientRisks(result, format.format)) {
        expect(risk.statistics).toBeUndefined();
        expect(tensor.statistics.factor).toBe(1024);
      }
    }
  });

  it("from the plan, likewise", () => {
    const planned: NetworkSpec = { ...spec, precision: { ...spec.precision, lossScale: 64 } };
    const result = check(planned, { formats: ["e5m2", "bfloat16"] });
    expect(result.lossScale).toEqual({ value: 64, origin: "plan" });
    expect(result.formats.map((f) => f.lossScale)).toEqual([undefined, undefined]);
  });
});

describe("the plan as written", () => {
  it("keeps the result's layout: no per-format scale, no further answers, no per-risk statistics", () => {
    const result = check(spec);
    expect(result.version).toBe(2);
    expect("moreLossScaleAnswers" in result).toBe(false);
    expect(result.formats.every((f) => !("lossScale" in f))).toBe(true);
    expect(result.tensors.every((t) => t.risks.every((r) => !("statistics" in r)))).toBe(true);
    expect(result.lossScaleAnswer?.format).toBe(spec.precision.gradients);
  });
});

describe("what-if 8-bit formats take the spec's default scale factors", () => {
  // a plan without 8-bit formats makes no choice about their scale factors (they apply to 8-bit formats only); the spec
  // gives a plan naming one per-tensor factors by default (src/spec/normalize.ts, specs/README.md), so `--format e4m3`
  // on a binary16 plan is judged as the same plan written in e4m3 is
  const cnn = load("specs/cnn-batchnorm.yaml");
  const written: NetworkSpec = { ...cnn, precision: { ...cnn.precision, activations: "e4m3", weights: "e4m3", gradients: "e4m3", scaling: "tensor" } };

  it("the substituted plan has per-tensor scale factors, as the plan written with e4m3 gets them", () => {
    expect(cnn.precision.scaling).toBe("none");
    expect(planFor(cnn.precision, "e4m3").scaling).toBe("tensor");
    const text = readFileSync("specs/cnn-batchnorm.yaml", "utf8").replace(/^ {2}(activations|weights|gradients): binary16$/gm, "  $1: e4m3");
    const parsed = parseSpec(text, "cnn-e4m3.yaml");
    if (!parsed.ok) throw new Error("the e4m3 variant does not parse");
    expect(parsed.spec.precision.scaling).toBe("tensor");
  });

  it("the what-if e4m3 and the plan written in e4m3 give the same verdict and the same tensor numbers", () => {
    const whatIf = check(cnn, { formats: ["e4m3"] });
    const planned = check(written);
    const e4m3 = (result: CheckAnswer) => result.formats.find((f) => f.format === "e4m3")!;
    expect(e4m3(whatIf).verdict).toBe(e4m3(planned).verdict);
    expect(e4m3(whatIf).findings.map((f) => f.sentence)).toEqual(e4m3(planned).findings.map((f) => f.sentence));
    expect(whatIf.lossScaleAnswer).toBeNull();
    // the result says which scale factors the what-if was judged with, which its top-level plan (as written) does not
    expect(whatIf.plan.scaling).toBe("none");
    expect(e4m3(whatIf).scaling).toBe("tensor");
    expect(e4m3(planned).scaling).toBe("tensor");
    expect(whatIf.formats.find((f) => f.format === "binary16")).toBeUndefined();
    expect(check(cnn).formats.every((f) => f.scaling === undefined)).toBe(true);
    const risks = (result: CheckAnswer) => result.tensors.map((t) => t.risks.filter((r) => r.format === "e4m3").map(numbers));
    expect(risks(whatIf)).toEqual(risks(planned));
  });

  it("a plan that holds an 8-bit format keeps its own choice, none included", () => {
    expect(planFor(unscaled.precision, "e5m2").scaling).toBe("none");
    const blocks: NetworkSpec = { ...unscaled, precision: { ...unscaled.precision, scaling: "block" } };
    expect(planFor(blocks.precision, "e5m2").scaling).toBe("block");
  });
});
