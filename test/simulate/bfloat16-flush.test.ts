import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";
import { runSimulation } from "../../src/simulate/engine.js";
import { compareWithPrediction } from "../../src/simulate/compare.js";

// An invented frost probe whose readings arrive at ~4e-39, inside bfloat16's subnormal range (2^-133 .. 2^-126, binary32's
// exponent range: IEEE 754-2019 Table 3.5). check judges bfloat16 as flushing its subnormals whatever the plan says (much
// hardware does: common practice; specs/README.md `flush-subnormals`); the simulation must store them the same way.
const RMS = 4e-39;
function frostProbe(flag: string): NetworkSpec {
  const parsed = parseSpec(
    `name: frost-probe
input: { features: 64, scale: ${RMS} }
training:
  batch: 32
  loss: { kind: mean-squared-error }
  optimizer: { kind: sgd, learning-rate: { peak: 0.01, end: 0.01 } }
precision:
  name: brain
  activations: bfloat16
  weights: bfloat16
  gradients: bfloat16
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
${flag}layers:
  - { type: dense, width: 8, init: he-normal }
`,
    "frost-probe.yaml",
  );
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

describe("bfloat16 subnormals in the simulation", () => {
  it.each([
    ["as the plan leaves them", ""],
    ["with flush-subnormals set", "  flush-subnormals: true\n"],
  ])("are flushed to zero, as check judges them (%s)", (_, flag) => {
    const spec = frostProbe(flag);
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("does not build");
    const comparison = compareWithPrediction(runSimulation(spec, { draws: 3 }), predict(built.graph, spec));
    const input = comparison.rows.find((r) => r.id === "input/activation");
    expect(input).toBeDefined();
    const m = input!.measured.median;
    // Gaussian readings: P(|x| < 2^-126) = erf(2^-126 / (rms·√2)) = 0.99670446 flush under flush-to-zero (Python's
    // math.erf); keeping the subnormals, only P(|x| < 2^-134) = 0.00916 would (half the smallest subnormal 2^-133)
    const flushToZero = 0.9967044621618405;
    // 2,048 readings per draw: a binomial share's standard error is under 0.002 there
    expect(m.counts.flushed).toBeGreaterThan(flushToZero - 0.01);
    expect(m.counts.subnormal).toBe(0);
    // the comparison's predicted share takes the same threshold
    expect(input!.predictedFlushed).toBeCloseTo(flushToZero, 6);
  });
});
