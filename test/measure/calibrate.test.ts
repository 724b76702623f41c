/**
 * Calibration from measured weights and recorded statistics. Weight files come from the independent writer
 * (writers.ts); the expected ratios follow the forward rules the engine cites: a dense layer's output second moment is
 * q_in·fan_in·var_w (Poole et al. 2016, length map), so weights 4× larger give outputs 4× larger in rms; a norm layer
 * resets the scale to its gain (layer definitions), so weights before it leave its output unchanged.
 */
import { afterAll, describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import type { Prediction } from "../../src/magnitude/types.js";
import {
  applyMeasurements,
  calibrateGraph,
  parseRecordedStatistics,
  readWeightFiles,
  weightTensorId,
} from "../../src/measure/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { encode, npyBytes, safetensorsBytes, scratch } from "./writers.js";

const files = scratch();
afterAll(() => files.cleanup());

const SPEC = `
name: calibration-probe
description: a small invented regression net for calibration tests
input: { features: 64, scale: 1.0 }
training:
  batch: 32
  loss: { kind: mean-squared-error, reduction: mean, target-scale: 1.0 }
  optimizer: { kind: sgd, learning-rate: { peak: 1.0e-3, end: 1.0e-3 } }
layers:
  - type: dense
    name: fc1
    width: 32
    init: he-normal
  - relu
  - type: dense
    name: fc2
    width: 16
    init: he-normal
  - type: layer-norm
    name: ln
  - type: dense
    name: head
    width: 8
    init: lecun-normal
`;

function spec(): NetworkSpec {
  const parsed = parseSpec(SPEC, "probe.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

/** A deterministic weight matrix with rms `rms` (alternating signs, a spread of magnitudes). */
function weights(rows: number, columns: number, rms: number, seed = 1): number[] {
  const raw = Array.from({ length: rows * columns }, (_, i) => ((i * 7919 + seed * 104729) % 1000) / 1000 - 0.4995);
  const current = Math.sqrt(raw.reduce((s, x) => s + x * x, 0) / raw.length);
  return raw.map((x) => Math.fround((x * rms) / current));
}

async function calibrated(scale: number, names: Record<string, string> = {}, gain?: number[]) {
  const fc1 = weights(32, 64, 0.05).map((x) => x * scale);
  const fc2 = weights(16, 32, 0.07, 2);
  const entries = [
    { name: "model.fc1.weight", dtype: "F32", shape: [32, 64], data: encode("F32", fc1) },
    { name: "fc2.weight", dtype: "F32", shape: [16, 32], data: encode("F32", fc2) },
    { name: "optimizer.step", dtype: "I32", shape: [1], data: encode("I32", [7]) },
    { name: "unrelated.table", dtype: "F32", shape: [3], data: encode("F32", [1, 2, 3]) },
  ];
  if (gain) entries.push({ name: "ln.weight", dtype: "F32", shape: [16], data: encode("F32", gain) });
  const path = files.write(`weights-${scale}-${gain ? "gain" : "plain"}.safetensors`, safetensorsBytes(entries));
  const s = spec();
  const built = buildGraph(s);
  if (!built.ok) throw new Error("graph");
  const data = await readWeightFiles([path], s.source);
  const calibration = calibrateGraph(built.graph, data, names);
  const applied = applyMeasurements(predict(calibration.graph, s), calibration);
  return { calibration, prediction: applied.prediction, report: applied.report, base: predict(built.graph, s) };
}

function rmsOf(prediction: Prediction, id: string): number {
  const tensor = prediction.tensors.find((t) => t.id === id);
  if (!tensor) throw new Error(`no tensor ${id}; have ${prediction.tensors.map((t) => t.id).join(", ")}`);
  // rms over all elements: the nonzero rms times sqrt(1 - zero share)
  return tensor.start.rms * Math.sqrt(1 - tensor.start.zeroFraction);
}

describe("calibrateGraph with a weights file", () => {
  it("matches by the default rule (exact and with a model prefix), reports what matched, what did not and what was unused", async () => {
    const { calibration } = await calibrated(1);
    expect(calibration.matches.map((m) => [m.id, m.tensor, m.rule])).toEqual([
      ["fc1/weight", "model.fc1.weight", "default"],
      ["fc2/weight", "fc2.weight", "default"],
    ]);
    // dense layers have biases by default; none are in the file
    expect(calibration.unmatched.map((u) => u.id)).toEqual(["fc1/weight:bias", "fc2/weight:bias", "ln/weight:gain", "ln/weight:bias", "head/weight", "head/weight:bias"]);
    expect(calibration.unused.map((u) => u.tensor)).toEqual(["unrelated.table"]);
    expect(calibration.matches[0]!.rms).toBeCloseTo(0.05, 6);
  });

  it("predictions use the measured weight rms: 4× the weights give 4× the next dense layer's output rms", async () => {
    const one = await calibrated(1);
    const four = await calibrated(4);
    const outputs = one.prediction.tensors.filter((t) => t.layer === "fc1" && t.role !== "weight" && t.slot === "activations").map((t) => t.id);
    expect(outputs.length).toBeGreaterThan(0);
    for (const id of outputs) expect(rmsOf(four.prediction, id) / rmsOf(one.prediction, id)).toBeCloseTo(4, 9);
    // fc2 is linear in its input: its output moves by 4 too
    const fc2Out = one.prediction.tensors.find((t) => t.layer === "fc2" && t.slot === "activations")!.id;
    expect(rmsOf(four.prediction, fc2Out) / rmsOf(one.prediction, fc2Out)).toBeCloseTo(4, 9);
    // the layer norm resets the scale to its gain: its output does not move (up to var/(var + ε) with ε = 1e-5)
    const lnOut = one.prediction.tensors.find((t) => t.layer === "ln" && t.slot === "activations")!.id;
    expect(rmsOf(four.prediction, lnOut) / rmsOf(one.prediction, lnOut)).toBeCloseTo(1, 3);
  });

  it("a measured dense weight rms replaces He initialisation: output rms = input rms · sqrt(fan_in) · rms_w (Poole et al. 2016)", async () => {
    const { prediction, base } = await calibrated(1);
    const id = prediction.tensors.find((t) => t.layer === "fc1" && t.slot === "activations")!.id;
    // He: var_w = 2/64, input rms 1 → output rms sqrt(64 · 2/64) = sqrt 2; measured rms 0.05 → sqrt(64) · 0.05 = 0.4.
    // Both carry the same finite-width median-draw factor (it depends on the widths only), so the ratio is exact.
    expect(rmsOf(prediction, id) / rmsOf(base, id)).toBeCloseTo(0.4 / Math.SQRT2, 9);
  });

  it("marks measured weight profiles as measured and leaves the others predicted", async () => {
    const { prediction, report } = await calibrated(1);
    expect(report.measured.sort()).toEqual(["fc1/weight", "fc2/weight"]);
    const sources = Object.fromEntries(prediction.tensors.filter((t) => t.role === "weight").map((t) => [t.id, t.source]));
    expect(sources).toMatchObject({ "fc1/weight": "measured", "fc2/weight": "measured", "head/weight": "predicted" });
    const fc1 = prediction.tensors.find((t) => t.id === "fc1/weight")!;
    expect(fc1.start.rms).toBeCloseTo(0.05, 6);
    expect(prediction.assumptions.some((a) => /measured/.test(a))).toBe(true);
  });

  it("a measured norm gain sets the norm's output scale (gain² · normalised variance)", async () => {
    const gain = Array.from({ length: 16 }, (_, i) => (i === 3 ? 12 : 2));
    const { prediction, calibration, base } = await calibrated(1, {}, gain);
    expect(calibration.matches.map((m) => m.id)).toContain("ln/weight:gain");
    const lnOut = prediction.tensors.find((t) => t.layer === "ln" && t.slot === "activations")!.id;
    const gainRms = Math.sqrt(gain.reduce((s, g) => s + g * g, 0) / gain.length);
    // up to the var/(var + ε) factor of the normalisation
    expect(rmsOf(prediction, lnOut) / rmsOf(base, lnOut)).toBeCloseTo(gainRms, 2);
    const profile = prediction.tensors.find((t) => t.id === "ln/weight:gain")!.start;
    expect(profile).toMatchObject({ shape: "bounded", bound: 12 });
  });

  it("the names map: a layer name to a tensor, or to a prefix; wrong element counts are refused", async () => {
    const { calibration } = await calibrated(1, { head: "fc2.weight", fc1: "model.fc1" });
    // fc2.weight is matched by fc2 (forward order); named for head too, it may be shared (tied weights), but it holds
    // 16·32 elements where head's weight needs 128, so it is refused for head by its size
    expect(calibration.matches.find((m) => m.layer === "fc1")).toMatchObject({ tensor: "model.fc1.weight", rule: "names" });
    expect(calibration.matches.find((m) => m.layer === "fc2")).toMatchObject({ tensor: "fc2.weight", rule: "default" });
    expect(calibration.issues.find((i) => i.tensor === "fc2.weight")?.message).toMatch(/has 512 elements \[16, 32\] but head\/weight needs 128/);
    const wrong = await calibrated(1, { "head/weight": "unrelated.table" });
    expect(wrong.calibration.issues.find((i) => i.tensor === "unrelated.table")?.message).toMatch(/has 3 elements \[3\] but head\/weight needs 128/);
  });

  it("weightTensorId follows the engine's ids", () => {
    expect(weightTensorId("fc1", "weight")).toBe("fc1/weight");
    expect(weightTensorId("ln", "gain")).toBe("ln/weight:gain");
  });

  it("relative weight paths are read from the spec's folder; .npy files work as single tensors", async () => {
    files.write("fc2.weight.npy", npyBytes(1, "<f4", [16, 32], encode("F32", weights(16, 32, 0.5))));
    const data = await readWeightFiles(["fc2.weight.npy", "missing-*.safetensors"], `${files.dir}/spec.yaml`);
    expect(data.tensors.map((t) => t.name)).toEqual(["fc2.weight"]);
    expect(data.issues.map((i) => i.message)).toEqual(["no file matches this pattern"]);
  });
});

describe("recorded statistics", () => {
  const csv = [
    "tensor,role,rms,max,zero_fraction,elements,q50,q99",
    "fc1,pre-activation,3.0,,0,1024,,",
    '"fc2",pre-activation,0.5,40,,,0.3,1.2',
    "nowhere,activation,1,,,,,",
  ].join("\n");

  it("CSV: parses the documented layout (RFC 4180 quoting, empty optional cells)", () => {
    const parsed = parseRecordedStatistics(csv, "stats.csv");
    expect(parsed.ok).toBe(true);
    if (!parsed.ok) return;
    expect(parsed.statistics[0]).toMatchObject({ tensor: "fc1", role: "pre-activation", rms: 3, zeroFraction: 0, elements: 1024 });
    expect(parsed.statistics[1]).toMatchObject({ tensor: "fc2", max: 40, quantiles: [{ q: 0.5, magnitude: 0.3 }, { q: 0.99, magnitude: 1.2 }] });
  });

  it("JSON: the same layout as objects", () => {
    const parsed = parseRecordedStatistics(
      JSON.stringify({ tensors: [{ tensor: "fc1/weight", role: "weight", rms: 0.1, quantiles: { "0.5": 0.07, "0.999": 0.3 } }] }),
      "stats.json",
    );
    expect(parsed).toEqual({ ok: true, statistics: [{ tensor: "fc1/weight", role: "weight", rms: 0.1, quantiles: [{ q: 0.5, magnitude: 0.07 }, { q: 0.999, magnitude: 0.3 }], at: "tensors[0]" }] });
  });

  it("problems name the line and column (CSV) or the path (JSON), and list what is accepted", () => {
    const bad = parseRecordedStatistics("tensor,role,rms,colour\nfc1,activation,1,red\n", "s.csv");
    expect(bad).toEqual({ ok: false, issues: [{ file: "s.csv", line: 1, column: 4, message: expect.stringMatching(/unknown column "colour"; accepted: tensor, role, rms/) }] });
    const values = parseRecordedStatistics("tensor,role,rms\nfc1,activations,-1\n", "s.csv");
    expect(values.ok ? [] : values.issues.map((i) => [i.line, i.column, i.message])).toEqual([
      [2, 2, expect.stringMatching(/^role: expected one of activation, pre-activation/)],
      [2, 3, expect.stringMatching(/^rms: expected a finite number ≥ 0, got -1/)],
    ]);
    const json = parseRecordedStatistics('{"tensors":[{"tensor":"a","role":"loss","rms":"big"}]}', "s.json");
    expect(json.ok ? [] : json.issues.map((i) => i.path)).toEqual(["tensors[0].rms"]);
    const quote = parseRecordedStatistics('tensor,role,rms\n"fc1,activation,1\n', "s.csv");
    expect(quote.ok ? undefined : quote.issues[0]).toMatchObject({ line: 2, column: 1, message: "a quoted field is never closed" });
  });

  it("override the named profiles, mark them measured, and report the ones that match nothing", async () => {
    const s = spec();
    const built = buildGraph(s);
    if (!built.ok) throw new Error("graph");
    const prediction = predict(built.graph, s);
    const parsed = parseRecordedStatistics(csv, "stats.csv");
    if (!parsed.ok) throw new Error("parse");
    const { prediction: out, report } = applyMeasurements(prediction, undefined, parsed.statistics);
    const fc1 = out.tensors.find((t) => t.layer === "fc1" && t.role === "pre-activation")!;
    expect(fc1.source).toBe("measured");
    expect(fc1.start.rms).toBe(3);
    const before = prediction.tensors.find((t) => t.id === fc1.id)!;
    expect(fc1.end.rms / before.end.rms).toBeCloseTo(3 / before.start.rms, 9);
    // a max of 40 at rms 0.5 over many elements is far past a Gaussian's extreme: a log-normal tail
    const fc2 = out.tensors.find((t) => t.layer === "fc2" && t.role === "pre-activation")!;
    expect(fc2.start.shape).toBe("log-normal");
    expect(report.unusedStatistics.map((u) => u.tensor)).toEqual(["nowhere"]);
    expect(out.tensors.filter((t) => t.source === "measured").length).toBe(2);
  });

  it("a row whose layer and role fit several tensors is not used, and says which it could mean", () => {
    const s = spec();
    const built = buildGraph(s);
    if (!built.ok) throw new Error("graph");
    const prediction = predict(built.graph, s);
    // fc1 has two weight gradients, the matrix's and the bias's: the row cannot tell which
    const parsed = parseRecordedStatistics("tensor,role,rms\nfc1,weight-gradient,0.01\nfc1/weight-gradient:bias,weight-gradient,0.02\nnowhere,activation,1\n", "stats.csv");
    if (!parsed.ok) throw new Error("parse");
    const { prediction: out, report } = applyMeasurements(prediction, undefined, parsed.statistics);
    expect(report.unusedStatistics).toEqual([
      {
        tensor: "fc1",
        role: "weight-gradient",
        at: "line 2",
        candidates: ["fc1/weight-gradient", "fc1/weight-gradient:bias"],
        sentence: "fc1 (weight-gradient, line 2) fits 2 tensors (fc1/weight-gradient, fc1/weight-gradient:bias): name one by its id",
      },
      { tensor: "nowhere", role: "activation", at: "line 4", candidates: [], sentence: "nowhere (activation, line 4) matches no tensor" },
    ]);
    // the row naming one by its id is used
    expect(out.tensors.filter((t) => t.source === "measured").map((t) => t.id)).toEqual(["fc1/weight-gradient:bias"]);
    expect(out.assumptions.join(" ")).toContain("2 recorded rows are not used: fc1 (weight-gradient, line 2) fits 2 tensors");
  });
});

describe("calibrateGraph names map", () => {
  it("looks up only the map's own keys: a layer named toString is matched by the default rule", async () => {
    const parsed = parseSpec(SPEC.replace("name: fc2", "name: toString"), "probe.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const built = buildGraph(parsed.spec);
    if (!built.ok) throw new Error("graph");
    const path = files.write("weights-tostring.safetensors", safetensorsBytes([{ name: "toString.weight", dtype: "F32", shape: [16, 32], data: encode("F32", weights(16, 32, 0.07)) }]));
    const calibration = calibrateGraph(built.graph, await readWeightFiles([path], parsed.spec.source), {});
    expect(calibration.matches.map((m) => [m.id, m.tensor, m.rule])).toEqual([["toString/weight", "toString.weight", "default"]]);
    for (const u of calibration.unmatched) for (const tried of u.tried) expect(typeof tried).toBe("string");
  });
});
