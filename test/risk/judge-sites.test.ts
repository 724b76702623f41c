import { describe, expect, it } from "vitest";
import type { HazardCheck } from "../../src/risk/index.js";
import { judgePrediction } from "../../src/risk/index.js";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// The judge evaluates each operation site once when every judged format is one of the plan's (they share the plan's
// ranges), and gives each check the evaluations and findings of the judged formats, format by format in the order the
// formats are judged (src/risk/judge.ts judgeSiteOnce). Held here against the same check judged with the formats in
// another order, and with one format alone.

// an invented sorter for a parcel line's weight readings: two dense layers, gradients summed over workers and steps,
// a summed loss (so the loss value is judged in the activation and the accumulate format)
const SPEC = `name: parcel-sorter
input: { features: 48 }
training:
  batch: 64
  loss: { kind: cross-entropy, classes: 12, reduction: sum }
  workers: 4
  worker-gradients: average
  accumulation-steps: 2
precision:
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  accumulate: binary32
layers:
  - type: dense
    width: 96
    bias: true
  - relu
  - type: dense
    width: 12
    bias: true
`;

function spec(): NetworkSpec {
  const parsed = parseSpec(SPEC, "parcel-sorter.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

const s = spec();
const built = buildGraph(s);
if (!built.ok) throw new Error("does not build");
const prediction = predict(built.graph, s);

// a check's evaluations and findings of `formats`, format by format in their order
function regrouped(check: HazardCheck, formats: readonly string[]): Pick<HazardCheck, "evaluations" | "findings"> {
  return {
    evaluations: formats.flatMap((format) => check.evaluations.filter((e) => e.format === format)),
    findings: formats.flatMap((format) => check.findings.filter((f) => f.format === format)),
  };
}

describe("operation sites judged once for the plan's formats", () => {
  const planned = judgePrediction(s, prediction, { formats: ["binary16", "binary32"], lossScale: 256 });

  it("judges sites held in both formats (the loss value: activation and accumulate format)", () => {
    const loss = planned.hazards.find((h) => h.kind === "loss-value");
    expect(loss?.evaluations.map((e) => e.format)).toEqual(["binary16", "binary32", "binary32"]);
    expect(planned.hazards.filter((h) => h.kind === "gradient-sum")).toHaveLength(4);
  });

  it("orders each check's evaluations and findings by the formats as they are judged", () => {
    const reversed = judgePrediction(s, prediction, { formats: ["binary32", "binary16"], lossScale: 256 });
    expect(reversed.hazards).toHaveLength(planned.hazards.length);
    reversed.hazards.forEach((check, i) => {
      const { evaluations, findings, ...rest } = check;
      const { evaluations: _e, findings: _f, ...plannedRest } = planned.hazards[i]!;
      expect(rest).toEqual(plannedRest);
      expect({ evaluations, findings }).toEqual(regrouped(planned.hazards[i]!, ["binary32", "binary16"]));
    });
    const loss = reversed.hazards.find((h) => h.kind === "loss-value");
    expect(loss?.evaluations.map((e) => e.format)).toEqual(["binary32", "binary32", "binary16"]);
  });

  it("keeps only the judged format's evaluations and findings when one format is judged", () => {
    for (const format of ["binary16", "binary32"] as const) {
      const alone = judgePrediction(s, prediction, { formats: [format], lossScale: 256 });
      alone.hazards.forEach((check, i) => {
        expect({ evaluations: check.evaluations, findings: check.findings }).toEqual(regrouped(planned.hazards[i]!, [format]));
      });
    }
  });

  it("gives the JSON of every check its keys in one order, with `constant` only where a site has one and `gradient` only on the backward sums", () => {
    const keys = new Set(planned.hazards.map((h) => Object.keys(h).filter((k) => k !== "constant" && k !== "gradient").join(",")));
    expect(keys.size).toBe(1);
    for (const h of planned.hazards) expect("constant" in h).toBe(h.kind === "optimizer-constant");
    const backward = planned.hazards.filter((h) => "gradient" in h);
    expect(backward.length).toBeGreaterThan(0);
    for (const h of backward) expect([h.kind, h.gradient]).toEqual(["accumulation", true]);
  });
});
