import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predictForCheck } from "../../src/magnitude/predict.js";
import type { CheckOptions, CheckResult, LossScaleWindowSummary } from "../../src/risk/index.js";
import { judgePrediction, judgePredictionAgain } from "../../src/risk/judge.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// check judges a network again when the weighed loss-scale pick moves; judgePredictionAgain keeps what no scale moves
// from the first judgement (tensors of unscaled roles, sites that are not scaled). Its result must be judgePrediction's
// at the new scale, field for field: an optimisation, not a rule, so the reference is judgePrediction itself. Each case
// also asserts that something was kept and that the scale moved something, so neither side of the comparison is empty.
function loaded(name: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${name}`, "utf8"), `specs/${name}`);
  if (!parsed.ok) throw new Error(`specs/${name} does not load`);
  return parsed.spec;
}

function windowAt(spec: NetworkSpec, pickLog2: number): LossScaleWindowSummary {
  return {
    format: spec.precision.gradients,
    lowestLog2: pickLog2 - 8,
    highestLog2: pickLog2 + 8,
    pickLog2,
    empty: false,
    upperEdgeSetBy: null,
    lowerEdgeSetBy: null,
  };
}

const specs = ["deep-relu-glorot.yaml", "deep-relu-he.yaml", "residual-mlp-unscaled.yaml", "transformer-encoder.yaml", "cnn-batchnorm.yaml", "wide-classifier.yaml"];
const optionSets: [string, CheckOptions][] = [
  ["the plan's formats", {}],
  ["three formats, every format reported, ledgers kept", { formats: ["binary16", "bfloat16", "e5m2"], everyFormat: true, ledger: true }],
];

describe("judgePredictionAgain gives judgePrediction's result at the new scale", () => {
  for (const name of specs) {
    for (const [label, base] of optionSets) {
      it(`${name}, ${label}: 2^4 judged again at 2^12`, () => {
        const spec = loaded(name);
        const built = buildGraph(spec);
        if (!built.ok) throw new Error("no graph");
        const prediction = predictForCheck(built.graph, spec);
        const at = (k: number): CheckOptions => ({ ...base, lossScaleWindows: [windowAt(spec, k)] });
        const earlier: CheckResult = judgePrediction(spec, prediction, at(4));
        const again = judgePredictionAgain(earlier, spec, prediction, at(12));
        const fresh = judgePrediction(spec, prediction, at(12));
        expect(JSON.parse(JSON.stringify(again))).toEqual(JSON.parse(JSON.stringify(fresh)));
        const kept = again.tensors.filter((t, i) => t === earlier.tensors[i]).length;
        const keptSites = again.hazards.filter((h, i) => h === earlier.hazards[i]).length;
        expect(kept).toBeGreaterThan(0);
        expect(keptSites).toBeGreaterThan(0);
        // the gradients were judged afresh, at a scale 2^8 apart
        expect(again.tensors.some((t, i) => t.role === "activation-gradient" && t !== earlier.tensors[i])).toBe(true);
        expect(JSON.stringify(earlier.tensors)).not.toEqual(JSON.stringify(again.tensors));
      });
    }
  }
});
