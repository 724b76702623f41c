/**
 * The sums of the backward pass (a transposed map's products, a weight gradient's sum over batch × positions), sited by
 * the backward rules and judged in the accumulate format at the loss scale (src/risk/hazards.ts gradientAccumulation).
 */
import { f16round } from "@petamoriken/float16";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import type { Prediction } from "../../src/magnitude/types.js";
import { createRandom } from "../../src/numeric/index.js";
import { evaluateHazard, isScaledSite, judgePrediction, scaledSubjects } from "../../src/risk/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { context, profile, site } from "./hazard-sites.js";
import { BINARY16, BINARY32 } from "./limits.js";

// an invented station-reading classifier: a huge batch with the loss summed, accumulating in binary16
const WIDE = `name: kiln-sorter
input: { features: 16 }
training:
  batch: 65536
  loss: { kind: cross-entropy, classes: 10, reduction: sum }
precision: { activations: binary16, weights: binary16, gradients: binary16, optimizer-states: binary32, master-weights: binary32, accumulate: binary16 }
layers:
  - { type: dense, width: 32, init: he-normal }
  - relu
  - { type: dense, width: 10 }
`;

function parsed(text: string): NetworkSpec {
  const result = parseSpec(text, "kiln.yaml");
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return result.spec;
}

function predicted(spec: NetworkSpec): Prediction {
  const graph = buildGraph(spec);
  if (!graph.ok) throw new Error(graph.issues.map((i) => i.message).join("; "));
  return predict(graph.graph, spec);
}

describe("backward sums in the accumulate format", () => {
  it("a weight gradient summed over 65,536 batch terms in binary16 carries √n·u = 0.125 and fails", () => {
    const spec = parsed(WIDE);
    const prediction = predicted(spec);
    const sums = prediction.hazards.filter((s) => s.gradient === true);
    // each dense layer: its weight gradient over batch × positions, and δ_in = Wᵀ·δ_out over its fan-out; none below
    // the network's input, where no gradient is computed
    expect(sums.map((s) => [s.layer, s.tensor, s.terms])).toEqual([
      ["dense-2", "dense-2/weight-gradient", 65536],
      ["dense-2", undefined, 10],
      ["dense-0", "dense-0/weight-gradient", 65536],
    ]);
    const judged = judgePrediction(spec, prediction);
    const check = judged.hazards.find((h) => h.gradient === true && h.findings.some((f) => f.subject === "dense-0/weight-gradient"));
    const error = check?.evaluations.find((e) => e.measure === "relative-error");
    // binary16: p = 11, u = 2^-11 (IEEE 754-2019 Table 3.5); √65536·2^-11 = 0.125, above the 1e-1 at which an
    // accumulation fails (README, Verdicts)
    expect(error?.value).toBe(0.125);
    expect(error?.verdict).toBe("fails");
    expect(check?.findings.find((f) => f.kind === "accumulation-error")?.sentence).toContain("dense-0/weight-gradient accumulates 65536 terms in binary16");
  });

  it("judges the share of the terms' squared norm that rounds to zero in binary16 as f16round finds it", () => {
    // Gaussian terms of rms 2^-24 (binary16's smallest subnormal, IEEE 754-2019 Table 3.5): those at or below 2^-25
    // round to zero (ties to even), measured on draws with @petamoriken/float16's f16round
    const rms = 2 ** -24;
    const random = createRandom(2026);
    let all = 0;
    let lost = 0;
    for (let i = 0; i < 400_000; i++) {
      const t = rms * random.normal();
      all += t * t;
      if (f16round(t) === 0) lost += t * t;
    }
    const check = evaluateHazard(
      site({ kind: "accumulation", gradient: true, terms: 64, input: profile({ rms, elements: 64 * 1024 }) }),
      context({ accumulate: BINARY16 }),
    );
    const flushed = check.evaluations.find((e) => e.measure === "flushed-energy");
    expect(Math.abs((flushed?.value ?? 0) - lost / all) / (lost / all)).toBeLessThan(0.03);
    expect(flushed?.criticalLevel).toBe(2 ** -25);
  });

  it("terms far below the flush bound are lost: a sequential binary16 sum of them is 0, and the check fails it", () => {
    const random = createRandom(7);
    const rms = 2 ** -28;
    let sum = 0;
    let exact = 0;
    for (let i = 0; i < 4096; i++) {
      const t = rms * random.normal();
      // each addition rounded to the destination format (IEEE 754-2019 §4.3), here binary16 by f16round
      sum = f16round(sum + t);
      exact += t;
    }
    expect(Math.abs(sum)).toBe(0);
    expect(exact).not.toBe(0);
    const check = evaluateHazard(site({ kind: "accumulation", gradient: true, terms: 4096, input: profile({ rms, elements: 4096 }) }), context({ accumulate: BINARY16 }));
    const flushed = check.evaluations.find((e) => e.measure === "flushed-energy");
    expect(flushed?.value).toBeGreaterThan(0.99);
    expect(check.findings.map((f) => [f.kind, f.severity])).toContainEqual(["gradient-energy-flushed", "fails"]);
    // a binary32 accumulator keeps them: its flush bound is 2^-150 (C limits)
    expect(evaluateHazard(site({ kind: "accumulation", gradient: true, terms: 4096, input: profile({ rms, elements: 4096 }) }), context({ accumulate: BINARY32 })).findings).toEqual([]);
  });

  it("judges the terms at the loss scale, as gradient tensors are, and moves with it in the pick", () => {
    const terms = profile({ rms: 2 ** -24, elements: 4096 });
    const scaled = evaluateHazard(site({ kind: "accumulation", gradient: true, terms: 64, input: terms }), context({ accumulate: BINARY16, lossScale: 2 ** 6 }));
    const moved = evaluateHazard(site({ kind: "accumulation", gradient: true, terms: 64, input: profile({ rms: 2 ** -18, elements: 4096 }) }), context({ accumulate: BINARY16 }));
    const share = (c: typeof scaled) => c.evaluations.find((e) => e.measure === "flushed-energy")?.value;
    expect(share(scaled)).toBe(share(moved));
    // the flush level in the terms' own units: the bound divided by the scale
    expect(scaled.evaluations.find((e) => e.measure === "flushed-energy")?.criticalLevel).toBe(2 ** -31);
    // a forward sum is not scaled
    const forward = evaluateHazard(site({ kind: "accumulation", terms: 64, input: terms }), context({ accumulate: BINARY16, lossScale: 2 ** 6 }));
    expect(forward.evaluations.some((e) => e.measure === "flushed-energy")).toBe(false);
    expect(isScaledSite("accumulation", true)).toBe(true);
    expect(isScaledSite("accumulation")).toBe(false);
    const spec = parsed(WIDE);
    const subjects = scaledSubjects(spec, predicted(spec));
    expect(subjects.sites.filter((s) => s.site.gradient === true)).toHaveLength(3);
  });
});
