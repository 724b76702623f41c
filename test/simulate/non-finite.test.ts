import { describe, expect, it } from "vitest";
import { renderSimulationHtml, renderSimulationJson, renderSimulationText } from "../../src/cli/simulate.js";
import { FORMATS } from "../../src/formats/index.js";
import { measureTensor } from "../../src/simulate/stats.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";

// the rms, largest magnitude and quantiles are of the finite nonzero elements; an infinite or NaN element has no
// magnitude to add, so a tensor of overflowed values has none of them to show, and its share outside is said beside them
describe("measureTensor counts the elements left out of the magnitudes", () => {
  it("gives the share infinite or NaN, and the rms of the finite ones only", () => {
    const stats = measureTensor(Float64Array.from([3, -4, Infinity, NaN]), FORMATS.binary32, {});
    // rms of 3 and 4: sqrt((9 + 16) / 2) (definition of the root mean square, common practice)
    expect(stats.rms).toBeCloseTo(Math.sqrt(12.5), 12);
    // 2 of the 4 elements (Infinity and NaN, counted from the input above); none of 1 and 2
    expect(stats.nonFiniteFraction).toBe(0.5);
    expect(measureTensor(Float64Array.from([1, 2]), FORMATS.binary32, {}).nonFiniteFraction).toBe(0);
  });

  it("a tensor whose every element is infinite has no finite magnitude and says so", () => {
    const stats = measureTensor(Float64Array.from([Infinity, -Infinity, Infinity]), FORMATS.binary16, {});
    // all 3 elements infinite, none zero (counted from the input)
    expect(stats.nonFiniteFraction).toBe(1);
    expect(stats.zeroFraction).toBe(0);
  });
});

function spec(text: string): NetworkSpec {
  const parsed = parseSpec(text, "loud-inputs.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

// inputs at 1e6 stored in binary16: most pass its largest finite, 65504 (IEEE 754-2019 Table 3.5), and become
// infinite; every sum of the next layer meets one of them and is infinite or NaN in the binary64 run
const LOUD = `name: loud-inputs
input: { features: 16, scale: 1000000.0 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 4 }
  optimizer: { kind: sgd, learning-rate: { peak: 0.1, end: 0.1 }, warmup-steps: 2 }
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
  - { type: dense, name: classes, width: 4, init: { kind: normal, std: 0.01 } }
`;

describe("simulate's outputs do not show rms 0 for a tensor whose values all overflowed", async () => {
  const { simulate } = await import("../../src/simulate/index.js");
  const { predict } = await import("../../src/magnitude/index.js");
  const s = spec(LOUD);
  const report = simulate(s, { predict });
  const id = "dense-0/pre-activation";

  it("measures no finite element in the layer after the overflowed inputs", () => {
    const t = report.result.tensors.find((x) => x.id === id)!;
    // every sum meets an infinite stored input (the note above LOUD): 100% infinite or NaN
    expect(t.median.nonFiniteFraction).toBe(1);
    const input = report.result.tensors.find((x) => x.id === "input/activation")!;
    // the inputs themselves are finite in binary64 (they overflow only once stored): their rms is measured, near the
    // spec's input scale 1e6 (invented for the demo) and above binary16's 65504 (IEEE 754-2019 Table 3.5)
    expect(input.median.nonFiniteFraction).toBe(0);
    expect(input.median.rms).toBeGreaterThan(65504);
  });

  it("text: 'none finite' in place of rms 0, and the share infinite or NaN in its own column", () => {
    const text = renderSimulationText(report, { all: true });
    const line = text.split("\n").find((l) => l.startsWith(`${id} `))!;
    expect(line).toContain("none finite");
    expect(line).not.toMatch(/-inf/);
    expect(text).toMatch(/non-finite/);
    // zeros 0%, non-finite 100%, flushed pred (any), flushed 0%, subnormal 0%, subnormal noise 0, overflow 100% (a non-finite
    // value counts as overflowed): the shares measured above, in the table's column order (src/cli/simulate.ts
    // renderSimulationText)
    expect(line).toMatch(/\s0%\s+100%\s+\S+\s+0%\s+0%\s+0\s+100%$/);
    // nothing finite to set against the prediction: named as not compared, not listed as the model's disagreement
    expect(text).toMatch(new RegExp(`Not compared, \\d+ tensors? with no finite element in the run \\(after an overflow upstream, which is the finding\\): [^\\n]*${id.replace("/", "\\/")}`));
    expect(text).not.toContain(`  - ${id}: measured rms: none finite`);
  });

  it("JSON: rms, max and quantiles null, and the share infinite or NaN", () => {
    const json = JSON.parse(renderSimulationJson(report)) as { tensors: { id: string; measured: { rms: number | null; max: number | null; quantiles: number[] | null; nonFiniteFraction: number } }[] };
    const m = json.tensors.find((t) => t.id === id)!.measured;
    expect(m.rms).toBeNull();
    expect(m.max).toBeNull();
    expect(m.quantiles).toBeNull();
    expect(m.nonFiniteFraction).toBe(1);
    // binary16's largest finite, 65504 (IEEE 754-2019 Table 3.5)
    expect(json.tensors.find((t) => t.id === "input/activation")!.measured.rms).toBeGreaterThan(65504);
  });

  it("page: the row's title and a mark say none finite", () => {
    const html = renderSimulationHtml(report);
    expect(html).toMatch(/<title>dense-0\/pre-activation: predicted rms [^<]*, measured: none finite \(100% infinite or NaN\)/);
    expect(html).toMatch(/class="nonfinite"[^>]*>[^<]*100%/);
  });
});
