import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

function withScale(scale: number): NetworkSpec {
  const parsed = parseSpec(readFileSync("specs/wide-classifier.yaml", "utf8"), "specs/wide-classifier.yaml");
  if (!parsed.ok) throw new Error("the example does not load");
  return { ...parsed.spec, precision: { ...parsed.spec.precision, lossScale: scale } };
}

// A scale outside the window is below its flush edge or above its overflow edge; the answer says which, by how many
// binades, and which tensor sets that edge (the edges as the window search found them).
describe("a given loss scale outside the window says on which side", () => {
  it("below the flush edge", () => {
    const answer = check(withScale(2)).lossScaleAnswer!;
    const w = answer.window;
    expect(w.lowestLog2).toBeGreaterThan(1);
    expect(answer.sentences.join(" ")).toContain(`is outside the window`);
    expect(answer.sentences.join(" ")).toContain(`: ${w.lowestLog2! - 1} binades below it, where ${w.lowerEdgeSetBy} flushes beyond the tolerance.`);
  });

  it("above the overflow edge", () => {
    const answer = check(withScale(2 ** 30)).lossScaleAnswer!;
    const w = answer.window;
    expect(w.highestLog2).toBeLessThan(30);
    expect(answer.sentences.join(" ")).toContain(`: ${30 - w.highestLog2!} binades above it, where ${w.upperEdgeSetBy} overflows beyond the budget.`);
  });

  it("inside says nothing of a side", () => {
    const answer = check(withScale(2 ** 10)).lossScaleAnswer!;
    expect(answer.requested?.inside).toBe(true);
    expect(answer.sentences.join(" ")).not.toMatch(/binades? (below|above) it/);
  });
});

// `--loss-scale` (check's lossScale option) is a given scale as much as the plan's own: it is compared with the window
// the same way, and wins over the plan's, as it does in the judgement.
describe("a loss scale given to check is compared with the window too", () => {
  const example = (): NetworkSpec => {
    const parsed = parseSpec(readFileSync("specs/wide-classifier.yaml", "utf8"), "specs/wide-classifier.yaml");
    if (!parsed.ok) throw new Error("the example does not load");
    return parsed.spec;
  };

  it("2^30 from the options: outside, above the overflow edge, in the answer and in the header", () => {
    const result = check(example(), { lossScale: 2 ** 30 });
    const answer = result.lossScaleAnswer!;
    const w = answer.window;
    expect(answer.requested).toEqual({ scale: 2 ** 30, inside: false, origin: "option" });
    expect(answer.sentences.join(" ")).toContain(`The given loss scale 2^30 is outside the window`);
    expect(answer.sentences.join(" ")).toContain(`: ${30 - w.highestLog2!} binades above it, where ${w.upperEdgeSetBy} overflows beyond the budget.`);
    // the judgement at 2^30 agrees: gradients overflow binary16 there (largest finite 65504, IEEE 754-2019 Table 3.5)
    expect(result.tensors.some((t) => t.risks.some((r) => r.format === "binary16" && r.findings.some((f) => f.kind === "overflow")))).toBe(true);
    expect(renderCheckText(result, { width: 1000 })).toContain(
      `loss scale: 2^30 (from the command line), ${30 - w.highestLog2!} binades above the window 2^${w.lowestLog2} to 2^${w.highestLog2} (see Loss scale).`,
    );
  });

  it("the options' scale wins over the plan's", () => {
    const spec = example();
    const answer = check({ ...spec, precision: { ...spec.precision, lossScale: 2 ** 10 } }, { lossScale: 2 ** 30 }).lossScaleAnswer!;
    expect(answer.requested).toEqual({ scale: 2 ** 30, inside: false, origin: "option" });
    const planOnly = check({ ...spec, precision: { ...spec.precision, lossScale: 2 ** 10 } }).lossScaleAnswer!;
    expect(planOnly.requested).toEqual({ scale: 2 ** 10, inside: true, origin: "plan" });
    expect(planOnly.sentences.join(" ")).toContain("The spec's loss scale 2^10 is inside the window");
  });
});
