import { describe, expect, it } from "vitest";
import { f16round } from "@petamoriken/float16";
import { renderSimulationHtml, renderSimulationJson, renderSimulationText, simulationExitCode } from "../../src/cli/simulate.js";
import { runSimulation } from "../../src/simulate/engine.js";
import type { SimulationResult } from "../../src/simulate/types.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";

function spec(text: string): NetworkSpec {
  const parsed = parseSpec(text, "pantry-labels.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

// an invented pantry-label classifier: Adam with its states in binary16
const ADAM = `name: pantry-labels
input: { features: 16, scale: 1.0 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 4 }
  optimizer: { kind: adam, learning-rate: { peak: 1.0e-3, end: 1.0e-3 }, betas: [0.9, BETA2], epsilon: EPSILON }
precision:
  name: plan
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: STATES
  master-weights: binary32
  accumulate: binary32
layers:
  - { type: dense, width: 32, init: he-normal }
  - relu
  - { type: dense, name: labels, width: 4, init: glorot-normal }
`;

function adam(epsilon: string, states: string, beta2 = "0.999"): NetworkSpec {
  return spec(ADAM.replace("EPSILON", epsilon).replace("STATES", states).replace("BETA2", beta2));
}

// β2 = 1 − 1e-12: at step 1 the second moment (1 − β2)·g² lies below binary16's half smallest subnormal 2^-25 (IEEE
// 754-2019 §3.6, binary16: emin −14, p 11, smallest subnormal 2^-24; round to nearest, §4.3.1) for every |g| below
// √(2^-25 / 1e-12) ≈ 173, so every nonzero second moment flushes; in binary32 (smallest subnormal 2^-149) only |g|
// below 2^-55 would, and none of these gradients is that small (they are measured near 0.01–1)
const FLUSHING_BETA2 = "0.999999999999";

describe("simulate holds Adam's epsilon as the optimizer states' format holds it", () => {
  it("1e-10 is 0 in binary16 and kept in binary32 (the reference rounding of @petamoriken/float16 and Math.fround)", () => {
    expect(f16round(1e-10)).toBe(0);
    expect(runSimulation(adam("1.0e-10", "binary16"), { steps: 1, lossScale: 1 }).epsilon).toEqual({ value: 1e-10, stored: f16round(1e-10) });
    expect(runSimulation(adam("1.0e-10", "binary32"), { steps: 1, lossScale: 1 }).epsilon).toEqual({ value: 1e-10, stored: Math.fround(1e-10) });
    // 1e-3 is a binary16 normal, rounded to the nearest of its values (1.0004e-3)
    expect(runSimulation(adam("1.0e-3", "binary16"), { steps: 1, lossScale: 1 }).epsilon!.stored).toBe(f16round(1e-3));
    // without rounding the run is binary64 throughout: ε as given
    expect(runSimulation(adam("1.0e-10", "binary16"), { steps: 1, lossScale: 1, round: false }).epsilon!.stored).toBe(1e-10);
  });

  it("measures the second moments flushed by the states' format (the counterpart of check's second-moment rule)", () => {
    const flushing = runSimulation(adam("1.0e-3", "binary16", FLUSHING_BETA2), { steps: 1, lossScale: 1 }).history[0]![0]!;
    // every nonzero second moment flushes in binary16 and none in binary32 (the note above FLUSHING_BETA2)
    expect(Object.keys(flushing.secondMomentsFlushed)).toContain("dense-0/weight");
    for (const share of Object.values(flushing.secondMomentsFlushed)) expect(share).toBe(1);
    const kept = runSimulation(adam("1.0e-3", "binary32", FLUSHING_BETA2), { steps: 1, lossScale: 1 }).history[0]![0]!;
    for (const share of Object.values(kept.secondMomentsFlushed)) expect(share).toBe(0);
  });

  it("an epsilon held as 0 beside flushed second moments divides by zero: every update element infinite or NaN", () => {
    // v̂ = 0 and ε = 0: m̂/0 is ±∞ where m̂ ≠ 0 and 0/0 NaN where the gradient was 0 (IEEE 754-2019 §7.3, §7.2); the
    // old run divided by the unrounded 1e-10 and gave finite updates 1e7 times the gradient
    const divided = runSimulation(adam("1.0e-10", "binary16", FLUSHING_BETA2), { steps: 1, lossScale: 1 }).history[0]![0]!;
    expect(divided.skipped).toBe(false);
    for (const share of Object.values(divided.nonFiniteUpdates)) expect(share).toBe(1);
    // the same moments with ε = 1e-3 (kept in binary16, above): the update is m̂/ε, finite
    const kept = runSimulation(adam("1.0e-3", "binary16", FLUSHING_BETA2), { steps: 1, lossScale: 1 }).history[0]![0]!;
    for (const share of Object.values(kept.nonFiniteUpdates)) expect(share).toBe(0);
  });
});

describe("simulate --steps sets exit code 1 when the run diverges (the help's and README's exit-code contract)", () => {
  const diverging = adam("1.0e-10", "binary16", FLUSHING_BETA2);

  it("the first measurement alone has no overflow: exit 0 without steps", () => {
    expect(simulationExitCode(runSimulation(diverging, { lossScale: 1 }))).toBe(0);
  });

  it("the steps diverge: infinite updates, the next step skipped, stored tensors non-finite after the steps: exit 1", () => {
    const result = runSimulation(diverging, { steps: 2, lossScale: 1 });
    const history = result.history[0]!;
    // step 1 makes the weights infinite or NaN (above); step 2's gradients are then NaN and the update is skipped
    expect(history.map((h) => h.skipped)).toEqual([false, true]);
    const after = result.tensors.find((t) => t.id === "dense-0/weight")!.after!;
    expect(after.nonFiniteFraction).toBe(1);
    expect(simulationExitCode(result)).toBe(1);
    const text = renderSimulationText({ result });
    expect(text).toContain("The run diverged, so the exit code is 1:");
    expect(text).toContain("1 step of 2 skipped (step 2 in the draw above)");
    expect(text).toContain("Adam's ε 1e-10 is held as 0 in binary16");
    expect(text).toMatch(/dense-0\/weight .* 100%$/m);
    const json = JSON.parse(renderSimulationJson({ result })) as { stepTrouble: unknown; epsilon: unknown };
    expect(json.stepTrouble).toEqual({ skippedSteps: 1, stepsWithNonFiniteUpdates: 1 });
    expect(json.epsilon).toEqual({ value: 1e-10, stored: 0 });
    // the page shows the same steps and the same divergence, naming the tensors the terminal's column marks
    const page = renderSimulationHtml({ result });
    expect(page).toContain("<h2>Optimizer steps (draw with seed 1)</h2>");
    expect(page).toContain("<td>skipped (overflow)</td>");
    expect(page).toContain("<th>most second moments flushed</th>");
    expect(page).toContain("The run diverged, so the exit code is 1:");
    expect(page).toContain("1 step of 2 skipped (step 2 in the draw above)");
    expect(page).toMatch(/After the steps, \d+ stored tensors overflowed or held infinite or NaN values: [^<]*dense-0\/weight 100%/);
    expect(page).not.toContain("the column");
    // without steps, no such section
    expect(renderSimulationHtml({ result: runSimulation(diverging, { lossScale: 1 }) })).not.toContain("Optimizer steps");
  });

  it("each of a skipped step and an overflow after the steps alone sets it", () => {
    const calm = runSimulation(adam("1.0e-3", "binary32"), { steps: 2, lossScale: 1 });
    expect(simulationExitCode(calm)).toBe(0);
    expect(renderSimulationText({ result: calm })).not.toContain("diverged");
    const skipped: SimulationResult = { ...calm, history: calm.history.map((draw) => draw.map((r, i) => (i === 0 ? { ...r, skipped: true } : r))) };
    expect(simulationExitCode(skipped)).toBe(1);
    const overflowed: SimulationResult = {
      ...calm,
      tensors: calm.tensors.map((t) =>
        t.id === "labels/pre-activation" ? { ...t, after: { ...t.after!, counts: { ...t.after!.counts, overflowed: 0.25 } } } : t,
      ),
    };
    expect(simulationExitCode(overflowed)).toBe(1);
  });
});
