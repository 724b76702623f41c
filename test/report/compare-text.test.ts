import { describe, expect, it } from "vitest";
import { comparePlans, STANDARD_PLANS } from "../../src/compare.js";
import { renderCompareText } from "../../src/report/compare-text.js";
import { parseSpec } from "../../src/spec/index.js";

// An invented regressor on raw sensor columns in grams; with subnormals flushed no static binary16 loss scale fits it.
const text = [
  "name: orchard-crates",
  "input: { features: 37, scale: 2500 }",
  "training:",
  "  batch: 128",
  "  loss: { kind: mean-squared-error, target-scale: 40000, reduction: sum }",
  "  optimizer: { kind: sgd, learning-rate: 1.0e-6 }",
  "  horizon: { steps: 5000, final-loss: 1.0e4 }",
  "precision: { name: flushing, activations: binary16, flush-subnormals: true }",
  "layers: [{ type: dense, width: 64, init: he-normal }, relu, { type: dense, width: 64, init: he-normal }, relu, { type: dense, width: 1 }]",
].join("\n");

describe("the compare table's loss-scale column", () => {
  it("tells a plan that needs no scale from one that no static scale fits, in the batch table's words", () => {
    const parsed = parseSpec(text, "orchard.yaml");
    if (!parsed.ok) throw new Error("does not parse");
    const comparison = comparePlans(parsed.spec, { plans: [STANDARD_PLANS[0]!, parsed.spec.precision] });
    const flushing = comparison.outcomes.find((o) => o.plan.name === "flushing")!;
    expect(flushing.lossScaleAnswer!.window.empty).toBe(true);
    const lines = renderCompareText(comparison).split("\n");
    const row = (name: string) => lines.find((line) => line.includes(` ${name} `) || line.includes(` ${name}  `))!;
    expect(row("binary32")).toMatch(/ fits +not needed /);
    expect(row("flushing (spec)")).toMatch(/ fails +none fits /);
  });
});
