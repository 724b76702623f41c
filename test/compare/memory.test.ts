import { describe, expect, it } from "vitest";
import { ALL_BINARY32_PLAN, comparePlans, planCost } from "../../src/compare.js";
import { check } from "../../src/check.js";
import { renderCompareText } from "../../src/report/compare-text.js";
import { parseSpec, type NetworkSpec, type PrecisionPlan } from "../../src/spec/index.js";

// Adam keeps two states per parameter (common practice); widths in bytes: binary32 4, binary16 2, e4m3 and e5m2 1
// (IEEE 754-2019 Table 3.5; OCP 8-bit spec); with per-block scaling every 32 elements of an 8-bit tensor share one
// 8-bit E8M0 scale (OCP Microscaling v1.0: k = 32, scale type E8M0), a byte per 32 elements
const SPEC = `name: memory-columns
input: { features: 64, scale: 1.0 }
training:
  batch: 32
  loss: { kind: cross-entropy, classes: 10 }
  optimizer: { kind: adam, learning-rate: { peak: 1.0e-3, end: 1.0e-4 }, warmup-steps: 10 }
precision:
  name: block-eight
  activations: e4m3
  weights: e4m3
  gradients: e5m2
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
  scaling: block
plans:
  - name: binary32
    activations: binary16
    weights: binary16
    gradients: binary16
    optimizer-states: binary32
    master-weights: binary32
    accumulate: binary32
  - name: tensor-eight
    activations: e4m3
    weights: e4m3
    gradients: e5m2
    optimizer-states: binary32
    master-weights: binary32
    accumulate: binary32
    scaling: tensor
layers:
  - { type: dense, width: 64, init: he-normal }
  - relu
  - { type: dense, name: classes, width: 10, init: glorot-normal }
`;

function spec(): NetworkSpec {
  const parsed = parseSpec(SPEC, "memory.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

const plan = (s: NetworkSpec, name: string): PrecisionPlan => [s.precision, ...s.plans].find((p) => p.name === name)!;

describe("compare's memory column", () => {
  it("counts a block-scaled plan's E8M0 scale bytes, one per 32 elements of each 8-bit tensor", () => {
    const s = spec();
    const result = check(s);
    const block = planCost(s, plan(s, "block-eight"), result);
    // weights e4m3 1 + master 4 + gradients e5m2 1 + two binary32 states 8, plus 1/32 for each of the two 8-bit ones
    expect(block.bytesPerParameter).toBe(14 + 2 / 32);
    expect(block.bytesPerActivation).toBe(1 + 1 / 32);
    // per-tensor scale factors are one number per tensor: not counted per element
    const tensor = planCost(s, plan(s, "tensor-eight"), result);
    expect(tensor.bytesPerParameter).toBe(14);
    expect(tensor.bytesPerActivation).toBe(1);
    // the totals follow: 64·64 + 64 + 64·10 + 10 = 4,810 parameters
    expect(block.parameterBytes).toBe(4810 * (14 + 2 / 32));
  });

  it("names its baseline, all binary32, and computes the saved share against it whatever the plans are called", () => {
    const s = spec();
    const comparison = comparePlans(s, { plans: [plan(s, "binary32"), plan(s, "block-eight")] });
    // a plan called binary32 that stores binary16 is not the baseline: all binary32 was not even compared here
    expect(comparison.baseline.name).toBe("all binary32");
    const called = comparison.outcomes.find((o) => o.plan.name === "binary32")!;
    // binary16 weights 2 + master 4 + gradients 2 + states 8 = 16 per parameter as binary32's 4 + 4 + 8; activations 2 against 4
    expect(called.savedShare).toBeGreaterThan(0);
    expect(called.savedShare).toBeCloseTo(1 - (called.cost.parameterBytes + called.cost.activationBytes) / comparison.baseline.bytes, 12);
    const text = renderCompareText(comparison, { width: 200 });
    const row = text.split("\n").find((line) => /\bbinary32 \(spec\)/.test(line))!;
    expect(row).not.toMatch(/—\s*$/);
    const flowing = text.replace(/\s+/g, " ");
    expect(flowing).toMatch(/saved: against all binary32 \(every tensor in binary32, no master copy: [\d.]+ KiB\)/);
    expect(flowing).toMatch(/block-scaled 8-bit tensors also hold one scale byte per 32 elements/);
    expect(text).toMatch(/14\.06 B/);
  });
});

describe("the saved column's dash", () => {
  it("marks a plan that stores every tensor as all binary32 does, whatever it is called", () => {
    const s = spec();
    const renamed: PrecisionPlan = { ...ALL_BINARY32_PLAN, name: "full-width" };
    const comparison = comparePlans(s, { plans: [renamed, plan(s, "binary32")] });
    const full = comparison.outcomes.find((o) => o.plan.name === "full-width")!;
    expect(full.storesAsBaseline).toBe(true);
    expect(full.savedShare).toBe(0);
    expect(comparison.outcomes.find((o) => o.plan.name === "binary32")!.storesAsBaseline).toBe(false);
    const row = renderCompareText(comparison, { width: 200 }).split("\n").find((line) => line.includes("full-width"))!;
    expect(row).toMatch(/—\s*$/);
  });
});
