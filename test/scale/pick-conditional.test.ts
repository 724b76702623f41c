import { describe, expect, it } from "vitest";
import { check, type CheckAnswer } from "../../src/check.js";
import { fewerFindings } from "../../src/scale/pick.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// The pick of the loss scale weighs the scaled loss wherever the plan holds it, and weighs a finding that holds only
// where an implementation keeps the loss in the activation format (the plan accumulates in a wider one; README
// "Verdicts": at most at risk) after every finding that holds as planned (README "Loss scale"; the rule is ours).

function spec(yaml: string, name: string): NetworkSpec {
  const parsed = parseSpec(yaml, name);
  if (!parsed.ok) throw new Error(`${name} does not load: ${parsed.issues.map((i) => i.message).join("; ")}`);
  return parsed.spec;
}

// the findings at risk of a check that hold as planned: every one but the scaled loss in the activation format
function realFindings(result: CheckAnswer): string[] {
  const plan = result.plan;
  return result.formats
    .flatMap((f) => f.findings)
    .filter((f) => !(f.kind === "loss-value-overflow" && f.format === plan.activations && plan.activations !== plan.accumulate))
    .map((f) => `${f.kind} ${f.subject}`);
}

// An invented scenario: a river-sediment sensor network classifying traces into 20 grain classes in 8-bit formats
// without scale factors (e4m3 forward, e5m2 gradients), accumulating in binary32. ReLU units: behind GELU units the
// gradients flush more than 1% in e5m2 at every scale that keeps the scaled loss under 448 (their scale mixture), and
// the pick rightly keeps the centre there.
const EIGHT_BIT = spec(
  `name: sediment-fp8
input: { features: 512 }
training:
  batch: 256
  loss: { kind: cross-entropy, classes: 20 }
  optimizer: { kind: adam, learning-rate: 1.0e-3 }
  horizon: { steps: 50000, final-loss: 0.3 }
precision: { name: fp8-raw, activations: e4m3, weights: e4m3, gradients: e5m2, scaling: none }
layers:
  - { type: repeat, times: 6, layers: [ { type: dense, width: 1024, init: he-normal }, relu ] }
  - { type: dense, width: 20 }
`,
  "sediment-fp8.yaml",
);

// An invented scenario: a causal decoder over 8192-token ledger records, binary16 storage, binary32 accumulation.
const DECODER = spec(
  `name: ledger-decoder
input: { tokens: 8192 }
training:
  batch: 4
  loss: { kind: cross-entropy, classes: 16000, reduction: mean }
  optimizer: { kind: adamw, learning-rate: { peak: 3.0e-4, end: 3.0e-5 }, warmup-steps: 1000, betas: [0.9, 0.95], weight-decay: 0.1 }
  horizon: { steps: 50000, final-loss: 2.0, weight-growth: 1.5 }
precision: { name: half, activations: binary16, weights: binary16, gradients: binary16 }
blocks:
  block:
    - type: residual
      branch:
        - rms-norm
        - { type: attention, heads: 8, head-width: 64, causal: true, init: { kind: normal, std: 0.02 }, output-init: { kind: normal, std: 0.004 } }
    - type: residual
      branch:
        - rms-norm
        - { type: gated-feed-forward, hidden: 1408, init: { kind: normal, std: 0.02 }, output-init: { kind: normal, std: 0.004 } }
layers:
  - { type: embedding, vocabulary: 16000, width: 512, init: { kind: normal, std: 0.02 } }
  - { type: repeat, times: 8, layers: [ { type: use, block: block } ] }
  - rms-norm
  - { type: dense, width: 16000, bias: false, init: { kind: normal, std: 0.02 } }
`,
  "ledger-decoder.yaml",
);

describe("the scaled loss in the pick of the loss scale", () => {
  it("e4m3 activations, e5m2 gradients: the pick keeps the scaled loss below e4m3's largest finite value", () => {
    const result = check(EIGHT_BIT);
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    expect(weighing).toBeDefined();
    // the loss of a uniform guess over 20 classes is ln 20 ≈ 3.0; e4m3's largest finite value is 448 (OCP 8-bit
    // floating point specification v1.0, Table 1), so the window's centre 2^10 puts it far past: 3.0·1024 > 448
    const loss = result.tensors.find((t) => t.role === "loss")!;
    const unscaledMax = loss.statistics.start.max / loss.statistics.factor;
    expect(unscaledMax * 2 ** weighing.centreLog2).toBeGreaterThan(448);
    expect(weighing.atCentre.conditional).toBe(1);
    // the pick keeps it below 448 (the scale is a power of two, so the product is exact), with no finding of the scaled
    // loss left in e4m3
    expect(unscaledMax * result.lossScale.value).toBeLessThan(448);
    expect(result.hazards.find((h) => h.kind === "loss-value")!.findings.filter((f) => f.format === "e4m3")).toEqual([]);
    expect(weighing.atPick).toEqual({ fails: 0, atRisk: 0, overflowSide: 0, conditional: 0 });
  });

  it("a conditional finding of the scaled loss does not outrank gradient findings that hold as planned", () => {
    const result = check(DECODER);
    const weighing = result.lossScaleAnswer!.weighing!;
    // the pick leaves only the conditional finding: the scaled loss past 65504 (binary16's largest finite value,
    // IEEE 754-2019 Table 3.5) if it is kept in binary16, though the plan sums it in binary32
    expect(weighing.atPick.atRisk - weighing.atPick.conditional).toBe(0);
    expect(realFindings(result)).toEqual([]);
    // 2^12, where the old weighing went to avoid it, leaves real subnormal-noise findings on gradients
    const lower = check(DECODER, { lossScale: 2 ** 12 });
    expect(realFindings(lower).some((f) => f.startsWith("subnormal-values") && f.includes("activation-gradient"))).toBe(true);
  });

  it("orders counts: failing, then the overflow side as planned, then at risk as planned, then the conditional ones", () => {
    const conditionalOnly = { fails: 0, atRisk: 1, overflowSide: 1, conditional: 1 };
    const fourReal = { fails: 0, atRisk: 4, overflowSide: 0, conditional: 0 };
    expect(fewerFindings(conditionalOnly, fourReal)).toBe(true);
    expect(fewerFindings(fourReal, conditionalOnly)).toBe(false);
    // a failing finding still decides first
    expect(fewerFindings({ fails: 1, atRisk: 0, overflowSide: 0, conditional: 0 }, { fails: 0, atRisk: 5, overflowSide: 5, conditional: 5 })).toBe(false);
    // among as many real findings, fewer conditional ones are better
    expect(fewerFindings({ fails: 0, atRisk: 1, overflowSide: 0, conditional: 0 }, { fails: 0, atRisk: 2, overflowSide: 1, conditional: 1 })).toBe(true);
  });
});
