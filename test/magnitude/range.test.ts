/**
 * The prediction's guard on binary64's range: a tensor whose mean square leaves 2^-510..2^510 ends the prediction
 * with a PredictionRangeError naming the layer's spec path, instead of rms 0 or infinity reaching a verdict.
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { checkFile } from "../../src/check.js";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { CARRIED_MEAN_SQUARE, carriedMeanSquare, PredictionRangeError } from "../../src/magnitude/range.js";
import { parseSpec } from "../../src/spec/index.js";

function specOf(text: string) {
  const parsed = parseSpec(text, "probe.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((issue) => issue.message).join("; "));
  return parsed.spec;
}

/** An invented chain of `depth` dense layers of 32 features, lecun initialisation with `gain`. */
function chain(depth: number, gain: number, extra = ""): string {
  return `input: { features: 32 }
training:
  batch: 16
  loss: { kind: mean-squared-error }
${extra}layers:
  - { type: repeat, name: stack, times: ${depth}, layers: [ { type: dense, width: 32, init: { kind: lecun, gain: ${gain} } } ] }
`;
}

describe("carriedMeanSquare", () => {
  // binary64 holds 2^-1022..2^1023 normal (IEEE 754-2019 Table 3.5); the rules square a mean square, hence half of it
  it("takes 0 and 2^-510..2^510, and nothing else", () => {
    expect([CARRIED_MEAN_SQUARE.min, CARRIED_MEAN_SQUARE.max]).toEqual([2 ** -510, 2 ** 510]);
    expect(carriedMeanSquare(0)).toBe(true);
    expect(carriedMeanSquare(2 ** -510)).toBe(true);
    expect(carriedMeanSquare(2 ** 510)).toBe(true);
    expect((CARRIED_MEAN_SQUARE.max * CARRIED_MEAN_SQUARE.max) < Number.MAX_VALUE).toBe(true);
    expect(carriedMeanSquare(2 ** -511)).toBe(false);
    expect(carriedMeanSquare(2 ** 511)).toBe(false);
    expect(carriedMeanSquare(Infinity)).toBe(false);
    expect(carriedMeanSquare(Number.NaN)).toBe(false);
  });
});

describe("predict's range guard", () => {
  it("passes a chain whose rms stays inside (gain 10: rms 10^k after k layers, LeCun et al. 1998: var 1/fan-in)", () => {
    const spec = specOf(chain(30, 10));
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("no graph");
    const last = predict(built.graph, spec).tensors.filter((t) => t.role === "pre-activation").at(-1);
    // 10^30 after 30 layers of gain 10 on input rms 1 (the squared-error loss value, ~10^60, stays inside too), within
    // half a decade: the rms is the median draw's, a little below the mean square's root
    expect(Math.log10(last?.start.rms ?? 0)).toBeCloseTo(30, 0);
  });

  it("stops a chain that grows past 2^255 in rms at the layer that crosses, with its spec path", () => {
    // gain 10^10: rms 10^(10k) after k layers; 10^70 < 2^255 ≈ 5.8e76 < 10^80, so the eighth layer (index 7) crosses
    const spec = specOf(chain(12, 1e10));
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("no graph");
    let caught: unknown;
    try {
      predict(built.graph, spec);
    } catch (error) {
      caught = error;
    }
    expect(caught).toBeInstanceOf(PredictionRangeError);
    expect(caught).toBeInstanceOf(RangeError);
    const issues = (caught as PredictionRangeError).issues;
    expect(issues).toHaveLength(1);
    expect(issues[0]?.path).toEqual(["layers", 0, "layers", 0]);
    expect(issues[0]?.message).toMatch(/^the predicted pre-activation of stack\.7\.dense-0 grows to rms 1\.0e\+80, above 2\^255/);
  });

  it("stops a chain that shrinks past 2^-255 in rms, at the end of the horizon, naming the weight growth", () => {
    // weight growth 10^-3 per layer at the end: rms 10^(-3k); 10^-75 > 2^-255 ≈ 1.7e-77 > 10^-78, the 26th layer crosses
    const spec = specOf(chain(40, 1, "  horizon: { steps: 100, weight-growth: 0.001 }\n"));
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("no graph");
    expect(() => predict(built.graph, spec)).toThrow(
      /^the prediction leaves binary64's range: the predicted pre-activation of stack\.25\.dense-0 at the end of the horizon shrinks to rms 1\.0e-78, below 2\^-255.*training\.horizon\.weight-growth: check those values$/,
    );
  });

  it("names the loss value when the loss is what leaves the range (squared error: the loss grows as the output squared)", () => {
    // gain 10 over 70 layers: output rms 10^70 (inside), loss ~ (10^70)² = 10^140 > 2^255 (the median draw's value
    // may differ from the mean square by a small factor, so the mantissa is left open)
    const spec = specOf(chain(70, 10));
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("no graph");
    expect(() => predict(built.graph, spec)).toThrow(/^the prediction leaves binary64's range: the predicted loss value grows to rms \d\.\de\+140, above 2\^255.*training\.loss \(target-scale, reduction\)/);
  });

  it("stops an end-of-horizon tensor that underflows to exactly 0 from a nonzero start, naming the final loss first", () => {
    // a final loss of 1e-300: the loss value's mean square (1e-300)² = 1e-600 is below binary64's smallest subnormal
    // 2^-1074 ≈ 4.9e-324 (IEEE 754-2019 Table 3.5), so it is 0 at the end though it was not at the start
    const spec = specOf(chain(2, 1, "  horizon: { steps: 100, final-loss: 1e-300 }\n"));
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("no graph");
    let caught: unknown;
    try {
      predict(built.graph, spec);
    } catch (error) {
      caught = error;
    }
    expect(caught).toBeInstanceOf(PredictionRangeError);
    const issue = (caught as PredictionRangeError).issues[0];
    expect(issue?.path).toEqual(["training", "loss"]);
    expect(issue?.message).toMatch(/^the predicted loss value at the end of the horizon shrinks to rms 0, below 2\^-255, .*it compounds training\.horizon\.final-loss, /);
  });

  it("leaves a final loss of exactly 0 alone: its zero gradients at the end are the spec's own", () => {
    const spec = specOf(chain(2, 1, "  horizon: { steps: 100, final-loss: 0 }\n"));
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("no graph");
    expect(() => predict(built.graph, spec)).not.toThrow();
  });

  it("checkFile gives the problem back positioned, as it does a network that cannot be built", async () => {
    const file = "test/fixtures/specs/extremes/compounding-gain.yaml";
    expect(readFileSync(file, "utf8")).toContain("gain: 1e10");
    const result = await checkFile(file);
    expect(result.ok).toBe(false);
    if (!result.ok) expect(result.issues.map((issue) => [issue.line, issue.column, issue.path])).toEqual([[9, 7, "blocks.loud[0]"]]);
  });
});
