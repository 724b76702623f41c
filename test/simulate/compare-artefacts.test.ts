import { describe, expect, it } from "vitest";
import { renderSimulationJson, renderSimulationText } from "../../src/cli/simulate.js";
import { predict } from "../../src/magnitude/index.js";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { forMicroBatchesRun } from "../../src/simulate/compare.js";
import { simulate } from "../../src/simulate/index.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";

function spec(text: string): NetworkSpec {
  const parsed = parseSpec(text, "ferry-timetable.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

describe("a weight gradient summed over fewer micro-batches than the spec's is predicted for those run", () => {
  it("an embedding's untouched rows: e^(−1/2) over 32 micro-batches is e^(−1/8) over 8 of them", () => {
    // 16384 lookups over 32768 rows in 32 micro-batches: e^(−1/2) untouched (Poisson occupancy, common practice); the
    // first 8 of them, 4096 lookups: e^(−1/8)
    const all = { rms: 3.25e-4, zeroFraction: Math.exp(-1 / 2), shape: "gaussian", log2Spread: 0 } as MagnitudeProfile;
    const run = forMicroBatchesRun(all, 8, 32);
    expect(run.zeroFraction).toBeCloseTo(Math.exp(-1 / 8), 12);
    // the same squared norm on fewer nonzero elements: rms·√((1 − e^(−1/2))/(1 − e^(−1/8))) = 3.25e-4·1.830
    expect(run.rms).toBeCloseTo(3.25e-4 * Math.sqrt((1 - Math.exp(-1 / 2)) / (1 - Math.exp(-1 / 8))), 12);
    expect(run.rms / all.rms).toBeCloseTo(1.83, 2);
    // all run, or no exact zeros: unchanged
    expect(forMicroBatchesRun(all, 32, 32)).toBe(all);
    expect(forMicroBatchesRun({ ...all, zeroFraction: 0 }, 8, 32).rms).toBe(3.25e-4);
  });

  // an invented ferry-timetable tagger: 512 lookups per micro-batch over 1024 rows, 16 micro-batches of which the run
  // executes 4. Untouched rows (Poisson occupancy, common practice): e^(−16·512/1024) = e^(−8) = 0.034% for all 16,
  // e^(−4·512/1024) = e^(−2) = 13.5% for the 4 run; the binomial noise over 1024·32 table elements (whole rows alike:
  // 1024 rows) is √(0.135·0.865/1024) = 0.011, well inside the 0.05 the comparison allows
  const TOKENS = `name: ferry-timetable
input: { tokens: 64 }
training:
  batch: 8
  accumulation-steps: 16
  loss: { kind: cross-entropy, classes: 4 }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  name: plan
  activations: binary32
  weights: binary32
  gradients: binary32
  optimizer-states: binary32
  master-weights: none
  accumulate: binary32
layers:
  - { type: embedding, name: stops, vocabulary: 1024, width: 32 }
  - { type: dense, name: tags, width: 4 }
`;

  it("the run's untouched rows agree with e^(−2), not e^(−8), and the table gradient is no disagreement", () => {
    const report = simulate(spec(TOKENS), { predict, microBatches: 4 });
    const row = report.comparison!.rows.find((r) => r.id === "stops/weight-gradient:table")!;
    expect(report.result.microBatches).toEqual({ run: 4, wanted: 16 });
    expect(row.predictedZeroFraction).toBeCloseTo(Math.exp(-2), 6);
    expect(row.allMicroBatches!.zeroFraction).toBeCloseTo(Math.exp(-8), 6);
    expect(Math.abs(row.measured.median.zeroFraction - Math.exp(-2))).toBeLessThan(0.05);
    expect(Math.abs(row.differenceBinades)).toBeLessThan(0.5);
    expect(row.disagrees).toBe(false);
    const text = renderSimulationText(report);
    expect(text).toContain("Weight gradients are predicted for the 4 micro-batches run, not all 16");
    const json = JSON.parse(renderSimulationJson(report)) as { tensors: { id: string; predicted?: { allMicroBatches?: { zeroFraction: number } } }[] };
    expect(json.tensors.find((t) => t.id === "stops/weight-gradient:table")!.predicted!.allMicroBatches!.zeroFraction).toBeCloseTo(Math.exp(-8), 6);
  });
});

describe("a tensor with no finite element measured is not compared", () => {
  // inputs at 1e6 stored in binary16 pass its largest finite, 65504 (IEEE 754-2019 Table 3.5): the next layer's sums
  // meet infinities and are infinite or NaN, and so is everything after it
  const LOUD = `name: loud-buoys
input: { features: 16, scale: 1000000.0 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 4 }
  optimizer: { kind: sgd, learning-rate: 0.1 }
precision:
  name: plan
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  master-weights: none
  accumulate: binary32
layers:
  - { type: dense, width: 16, init: he-normal }
  - relu
  - { type: dense, name: classes, width: 4 }
`;

  it("lists it apart with the reason, never as a disagreement", () => {
    const report = simulate(spec(LOUD), { predict });
    const comparison = report.comparison!;
    const row = comparison.rows.find((r) => r.id === "dense-0/pre-activation")!;
    expect(row.measured.median.nonFiniteFraction).toBe(1);
    expect(row.disagrees).toBe(false);
    expect(row.notCompared).toMatch(/no finite element/);
    expect(comparison.notCompared.map((r) => r.id)).toContain("dense-0/pre-activation");
    expect(comparison.disagreements.some((r) => r.measured.median.nonFiniteFraction === 1)).toBe(false);
    const json = JSON.parse(renderSimulationJson(report)) as { notCompared: string[] };
    expect(json.notCompared).toContain("dense-0/pre-activation");
  });
});
