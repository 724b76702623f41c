import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

function load(name: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${name}`, "utf8"), `specs/${name}`);
  if (!parsed.ok) throw new Error(`specs/${name} does not load`);
  return parsed.spec;
}

// The loss is a reduction held in the accumulate format (Micikevicius et al. 2018 §3.3: reductions in FP32), so it is
// judged there; each format's count of tensors is the tensors it judged, and the counts add up to the tensors judged.
describe("each format counts the tensors it judged", () => {
  it("cnn-batchnorm: the loss counts in binary32 (accumulation), not in binary16 (its activations slot)", () => {
    const result = check(load("cnn-batchnorm.yaml"));
    const loss = result.tensors.filter((t) => t.role === "loss");
    expect(loss.length).toBe(1);
    expect(loss[0]!.risks.filter((r) => r.judged).map((r) => r.format)).toEqual(["binary32"]);
    const count = (format: string) => result.formats.find((f) => f.format === format)!.tensorsJudged;
    expect(count("binary32")).toBe(1);
    expect(count("binary16")).toBe(result.tensors.length - 1);
  });

  it("with --format bfloat16 the loss is judged in no format, and no format counts it", () => {
    const result = check(load("transformer-encoder.yaml"), { formats: ["bfloat16"] });
    const judged = result.tensors.reduce((n, t) => n + t.risks.filter((r) => r.judged).length, 0);
    expect(result.formats.reduce((n, f) => n + f.tensorsJudged, 0)).toBe(judged);
  });
});
