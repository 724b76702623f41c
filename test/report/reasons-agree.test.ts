import { readdirSync, readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { findingsWorstFirst } from "../../src/report/summary.js";
import { parseSpec } from "../../src/spec/index.js";

// A format's reason for a kind of finding tells the worst finding of that kind; the Markdown and HTML lists of findings
// and a batch row's worst tensor take the first of findingsWorstFirst. Where several subjects share the worst value
// (repeated blocks), every output has to name the same one, or a reader sees two different "worst" tensors.
describe("the reasons name the tensor the lists of findings put first", () => {
  const files = readdirSync("specs").filter((name) => name.endsWith(".yaml"));

  it.each(files)("%s", (file) => {
    const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
    if (!parsed.ok) throw new Error(`specs/${file} does not parse`);
    const result = check(parsed.spec);
    const ordered = findingsWorstFirst(result);
    for (const format of result.formats) {
      for (const kind of new Set(format.findings.map((finding) => finding.kind))) {
        const first = ordered.find((finding) => finding.format === format.format && finding.kind === kind);
        expect(format.reasons.some((reason) => reason.startsWith(first!.sentence.replace(/\.$/, "")))).toBe(true);
      }
    }
  });

  it("names the first of four blocks whose attention probabilities flush alike", () => {
    // an invented frame tagger: four identical attention blocks, no scaling of the logits, 1500 positions; a layer norm
    // with ε = 0 hands each block's attention the same unit-variance input, so the four blocks flush exactly alike (with
    // the default ε their variances differ from the eighth digit on, ε against a growing residual stream, and so do
    // their row moments); subnormals flushed (flush bound 2^-14, IEEE 754-2019 binary16 smallest normal), so the rows lose
    // more than 1% of their probability mass and each block has a finding
    const text = [
      "name: harbour-radio",
      "input: { features: 80, positions: 1500, scale: 4.0 }",
      "training: { batch: 16, loss: { kind: cross-entropy, classes: 64 } }",
      "precision: { activations: binary16, flush-subnormals: true }",
      "layers:",
      "  - { type: dense, name: frontend, width: 256, init: he-normal }",
      "  - type: repeat",
      "    name: enc",
      "    times: 4",
      "    layers:",
      "      - { type: residual, name: att, branch: [{ type: layer-norm, epsilon: 0 }, { type: attention, heads: 4, head-width: 64, scaling: none }] }",
      "  - { type: dense, name: phones, width: 64 }",
    ].join("\n");
    const parsed = parseSpec(text, "harbour-radio.yaml");
    if (!parsed.ok) throw new Error("the inline spec does not parse");
    const result = check(parsed.spec);
    const flushed = result.formats[0]!.findings.filter((f) => f.kind === "probability-mass-flushed" && f.subject.endsWith("activation:probabilities"));
    expect(new Set(flushed.map((f) => f.value)).size).toBe(1);
    expect(flushed.length).toBe(4);
    const reason = result.formats[0]!.reasons.find((r) => r.includes("activation:probabilities"));
    expect(reason).toContain("enc.0.att.attention-1/activation:probabilities");
    expect(findingsWorstFirst(result).find((f) => f.kind === "probability-mass-flushed")!.subject).toBe("enc.0.att.attention-1/activation:probabilities");
  });
});
