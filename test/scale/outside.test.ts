import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
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
