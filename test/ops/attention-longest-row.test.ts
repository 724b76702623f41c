/**
 * Causal attention's probability-weighted values: the accumulation is judged at the longest row, not the mean one.
 */
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { judgePrediction } from "../../src/risk/index.js";
import { parseSpec } from "../../src/spec/index.js";

// an invented log reader: one causal attention layer over 1,024 positions, accumulating in binary16
const SPEC = `name: ledger-reader
input: { tokens: 1024 }
training:
  batch: 2
  loss: { kind: cross-entropy, classes: 64, reduction: mean }
precision: { activations: bfloat16, weights: bfloat16, gradients: bfloat16, optimizer-states: binary32, master-weights: binary32, accumulate: binary16 }
layers:
  - { type: embedding, vocabulary: 64, width: 32 }
  - { type: attention, heads: 2, head-width: 16, causal: true }
  - { type: dense, width: 64, bias: false }
`;

describe("causal attention's weighted values", () => {
  it("sum up to P keys: the last row of a causal mask attends to all 1,024 (√1024·2^-11 = 0.0156, not the mean row's 512.5 keys)", () => {
    const parsed = parseSpec(SPEC, "reader.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const graph = buildGraph(parsed.spec);
    if (!graph.ok) throw new Error(graph.issues.map((i) => i.message).join("; "));
    const prediction = predict(graph.graph, parsed.spec);
    // a causal mask lets row i attend to keys 0..i (Vaswani et al. 2017 §3.2.3): the last row has all P of them
    const values = prediction.hazards.find((s) => s.kind === "accumulation" && s.gradient !== true && s.detail.startsWith("probability-weighted values"));
    expect(values?.terms).toBe(1024);
    const check = judgePrediction(parsed.spec, prediction).hazards.find((h) => h.detail === values?.detail);
    // binary16's unit roundoff 2^-11 (IEEE 754-2019 Table 3.5)
    expect(check?.evaluations.find((e) => e.measure === "relative-error")?.value).toBe(Math.sqrt(1024) * 2 ** -11);
  });
});
