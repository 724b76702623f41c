import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { simulatedFinding, simulationExitCode } from "../../src/cli/simulate.js";
import { runSimulation } from "../../src/simulate/index.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";

function spec(text: string): NetworkSpec {
  const parsed = parseSpec(text, "loss-value.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

// a summed cross-entropy over `batch` examples of 10 classes: about batch · ln 10 at the start (a uniform guess costs
// ln(classes) per example, common practice): 147 for 64 examples, 589 for 256
const summed = (activations: string, lossScale: string, batch = 64, scaling = "") => `name: summed-loss
input: { features: 16, scale: 1.0 }
training:
  batch: ${batch}
  loss: { kind: cross-entropy, classes: 10, reduction: sum }
  optimizer: { kind: sgd, learning-rate: { peak: 0.1, end: 0.1 }, warmup-steps: 2 }
precision:
  name: plan
  activations: ${activations}
  weights: binary32
  gradients: binary32
  optimizer-states: binary32
  master-weights: none
  accumulate: binary32
  loss-scale: ${lossScale}${scaling}
layers:
  - { type: dense, width: 16, init: he-normal }
  - relu
  - { type: dense, name: classes, width: 10, init: { kind: normal, std: 0.01 } }
`;

function lossRow(s: NetworkSpec) {
  const result = runSimulation(s, { round: false });
  const row = result.tensors.find((t) => t.id === "loss/loss");
  if (row === undefined) throw new Error("no loss row");
  return { result, row, loss: result.initialLoss[0] as number };
}

function checkFlagsLossValue(s: NetworkSpec): boolean {
  return check(s).formats.some((f) => f.findings.some((x) => x.kind === "loss-value-overflow"));
}

describe("simulate judges the loss value as check does: the loss times the loss scale", () => {
  it("a summed loss that overflows binary16 only once scaled is counted as an overflow, as check flags it", () => {
    const s = spec(summed("binary16", "1024"));
    const { result, row, loss } = lossRow(s);
    // the loss itself fits binary16; 1024 times it does not (65504, IEEE 754-2019 Table 3.5)
    expect(loss).toBeLessThan(65504);
    expect(1024 * loss).toBeGreaterThan(65504);
    expect(checkFlagsLossValue(s)).toBe(true);
    // the loss is one value: its overflow share is all or nothing, here all of it
    expect(row.median.counts.overflowed + row.median.counts.saturated + row.median.counts.nonFinite).toBe(1);
    expect(simulatedFinding(row.median.counts)).toBe(true);
    // listed, not an exit code: the run keeps the loss in binary64, and check calls a loss overflowing the activation
    // format at risk only ("if the loss is kept in the activation format")
    expect(simulationExitCode(result)).toBe(0);
    // the magnitudes stay those of the loss itself, compared with its prediction (the rms of one value is its magnitude,
    // common practice); the shares say what they were taken at: the plan's loss scale, 1024 (invented for the demo)
    expect(row.median.rms).toBeCloseTo(loss, 12);
    expect(row.countsScaledBy).toBe(1024);
  });

  // without scale factors: with them a value of its own is scaled into the range whatever its size
  it("a summed loss past e4m3's range that a scale below 1 brings inside is not counted, as check does not flag it", () => {
    const s = spec(summed("e4m3", "0.25", 256, "\n  scaling: none"));
    const { result, row, loss } = lossRow(s);
    // e4m3's largest finite is 448 (OCP 8-bit spec): the loss passes it, a quarter of it does not
    expect(loss).toBeGreaterThan(448);
    expect(0.25 * loss).toBeLessThan(448);
    expect(checkFlagsLossValue(s)).toBe(false);
    expect(row.median.counts.overflowed + row.median.counts.saturated + row.median.counts.nonFinite).toBe(0);
    expect(result.tensors.filter((t) => t.id !== "loss/loss").every((t) => t.median.counts.overflowed + t.median.counts.saturated === 0)).toBe(true);
  });
});

describe("simulate's report of the scaled loss", () => {
  it("says in text and JSON that the loss's shares are of the scaled loss", async () => {
    const { renderSimulationJson, renderSimulationText } = await import("../../src/cli/simulate.js");
    const s = spec(summed("binary16", "1024"));
    const report = { result: runSimulation(s, { round: false }) };
    const text = renderSimulationText(report);
    // the plan's scale 1024 = 2^10
    expect(text).toMatch(/loss\/loss: the shares are of the loss times the loss scale 2\^10 \([\d.e+]+\) kept in the activation format/);
    const json = JSON.parse(renderSimulationJson(report)) as { tensors: { id: string; countsScaledBy?: number }[] };
    expect(json.tensors.find((t) => t.id === "loss/loss")?.countsScaledBy).toBe(1024);
  });
});

// activations in binary32, the loss summed in binary16: check's loss-value rule judges the scaled loss in both formats
// (src/risk/hazards.ts lossValue) and, in the accumulate format, can say "fails"
const accumulating = (accumulate: string, lossScale: string) =>
  summed("binary32", lossScale).replace("  accumulate: binary32", `  accumulate: ${accumulate}`);

describe("simulate counts the scaled loss in the accumulate format too, as check judges it there", () => {
  it("a summed loss that overflows a binary16 accumulator once scaled is counted there, and sets the exit code as check's fails", () => {
    const s = spec(accumulating("binary16", "1024"));
    const { result, row, loss } = lossRow(s);
    // 64 examples · ln 10 ≈ 147 (common practice) fits binary16; 1024 times it passes 65504 (IEEE 754-2019 Table 3.5)
    expect(loss).toBeLessThan(65504);
    expect(1024 * loss).toBeGreaterThan(65504);
    const finding = check(s).formats.find((f) => f.format === "binary16")?.findings.find((x) => x.kind === "loss-value-overflow");
    expect(finding?.severity).toBe("fails");
    // binary32 holds it (its largest finite is about 3.4e38, IEEE 754-2019 Table 3.5): nothing in the activation format
    expect(row.median.counts.format).toBe("binary32");
    expect(row.median.counts.overflowed).toBe(0);
    // the one value of the sum overflows: a share of 1
    expect(row.median.accumulateCounts).toMatchObject({ format: "binary16", overflowed: 1 });
    expect(simulatedFinding(row.median.accumulateCounts!)).toBe(true);
    expect(simulationExitCode(result)).toBe(1);
  });

  it("a loss that a binary16 accumulator holds once scaled is not counted; an accumulate format equal to the activations' is not counted twice", () => {
    const held = lossRow(spec(accumulating("binary16", "64")));
    // 64 · 147 ≈ 9,400 < 65504
    expect(64 * held.loss).toBeLessThan(65504);
    expect(held.row.median.accumulateCounts).toMatchObject({ format: "binary16", overflowed: 0, saturated: 0, nonFinite: 0 });
    expect(simulationExitCode(held.result)).toBe(0);
    // check judges the loss once when both formats are the same (the activation format, at risk at most)
    expect(lossRow(spec(accumulating("binary16", "1024").replace("activations: binary32", "activations: binary16"))).row.median.accumulateCounts).toBeUndefined();
  });

  it("with activations and accumulation both binary16, the one count is the sum's: an overflow check says fails sets the exit code", async () => {
    const s = spec(accumulating("binary16", "1024").replace("activations: binary32", "activations: binary16"));
    const { result, row, loss } = lossRow(s);
    // 1024 · ≈147 passes 65504 (IEEE 754-2019 Table 3.5)
    expect(1024 * loss).toBeGreaterThan(65504);
    const finding = check(s).formats.find((f) => f.format === "binary16")?.findings.find((x) => x.kind === "loss-value-overflow");
    expect(finding?.severity).toBe("fails");
    expect(row.median.accumulateCounts).toBeUndefined();
    // the one value of the sum overflows: a share of 1
    expect(row.median.counts).toMatchObject({ format: "binary16", overflowed: 1 });
    expect(simulationExitCode(result)).toBe(1);
    const { renderSimulationText } = await import("../../src/cli/simulate.js");
    expect(renderSimulationText({ result })).toMatch(/which is also the accumulate format it is summed in, .*only an overflow of the sum \(which check says fails\) sets the exit code/);
    // at 64 the sum fits (64 · 147 ≈ 9,400 < 65504): exit 0
    expect(simulationExitCode(lossRow(spec(accumulating("binary16", "64").replace("activations: binary32", "activations: binary16"))).result)).toBe(0);
  });

  it("text lists the sum on a line of its own under the loss; JSON has it under measured.accumulateCounts", async () => {
    const { renderSimulationJson, renderSimulationText } = await import("../../src/cli/simulate.js");
    const report = { result: runSimulation(spec(accumulating("binary16", "1024")), { round: false }) };
    const lines = renderSimulationText(report).split("\n");
    const at = lines.findIndex((l) => l.startsWith("loss/loss "));
    expect(at).toBeGreaterThan(0);
    // 1024 · ≈147 passes 65504 (IEEE 754-2019 Table 3.5): the sum's one value, 100%, in the overflow column
    expect(lines[at + 1]).toMatch(/^loss\/loss \(accumulate\)\s+binary16\s.*100(\.0)?%$/);
    expect(lines.join("\n")).toMatch(/summed in the accumulate format, binary16, .*only an overflow of the sum \(which check says fails\) sets the exit code/);
    const json = JSON.parse(renderSimulationJson(report)) as { tensors: { id: string; measured: { accumulateCounts?: { overflowed: number } } }[] };
    // the same one value, a share of 1
    expect(json.tensors.find((t) => t.id === "loss/loss")?.measured.accumulateCounts?.overflowed).toBe(1);
  });
});

describe("simulate's page (--html) gives the scaled loss's shares as the text does", () => {
  it("lists the loss and, on a line of its own, the sum in the accumulate format with its overflow share", async () => {
    const { renderSimulationHtml } = await import("../../src/cli/simulate.js");
    const report = { result: runSimulation(spec(accumulating("binary16", "1024")), { round: false }) };
    const html = renderSimulationHtml(report);
    // 1024 · (64 · ln 10 ≈ 147) passes binary16's 65504 (IEEE 754-2019 Table 3.5): the one summed value overflows
    const row = /<tr><td>loss\/loss \(accumulate\)<\/td><td>binary16<\/td>(.*?)<\/tr>/.exec(html);
    expect(row?.[1]).toMatch(/<td>100(\.0)?%<\/td>$/);
    // binary32 holds it (largest finite about 3.4e38, IEEE 754-2019 Table 3.5): the activation format's line shows none
    expect(html).toMatch(/<tr><td>loss\/loss<\/td><td>binary32<\/td>(<td>0%<\/td>){3}<\/tr>/);
    expect(html).toMatch(/summed in the accumulate format, binary16, .*only an overflow of the sum \(which check says fails\) sets the exit code/);
  });

  // check judges the loss as a sum in the accumulate format whatever the scale (src/risk/hazards.ts lossValue), so the
  // page always has the loss's table; with the sum in the activation format itself it holds one line
  it("at loss scale 1 with the sum in the activation format itself: one line, no (accumulate) line, and the note says so", async () => {
    const { renderSimulationHtml } = await import("../../src/cli/simulate.js");
    const report = { result: runSimulation(spec(summed("binary32", "1")), { round: false }) };
    const html = renderSimulationHtml(report);
    // 64 · ln 10 ≈ 147 (common practice) is a normal binary32 value (IEEE 754-2019 Table 3.5): no share anywhere
    expect(html).toMatch(/<table class="loss">.*\n<tr><td>loss\/loss<\/td><td>binary32<\/td>(<td>0%<\/td>){3}<\/tr><\/table>/);
    expect(html).not.toContain("loss/loss (accumulate)");
    expect(html).toContain("the shares are of the loss kept in the activation format, which is also the accumulate format it is summed in");
  });
});
