/**
 * The order of a verdict's reasons (src/risk/verdict.ts judge): what matters to a user reading them first. The rule is
 * a product decision (common practice: a report leads with its worst and widest problems), so these cases check it
 * on invented findings.
 */
import { describe, expect, it } from "vitest";
import { judge, type Finding } from "../../src/risk/index.js";

const base = { format: "binary16" as const, source: "tensor" as const, threshold: 0 };

function findings(kind: Finding["kind"], severity: Finding["severity"], subjects: readonly string[], sentence: string, value = 1): Finding[] {
  return subjects.map((subject) => ({ ...base, kind, severity, subject, value, sentence: `${sentence} ${subject}.` }));
}

describe("judge: the order of reasons", () => {
  it("within a severity, a kind covering more subjects comes before one covering fewer, whatever the catalogue order", () => {
    const verdict = judge([
      ...findings("little-headroom", "at-risk", ["t13"], "Thin headroom on", 0.98),
      ...findings("overflow", "at-risk", ["a", "b", "c", "d"], "Overflow in", 0.5),
      ...findings("subnormal-values", "at-risk", ["s1", "s2", "s3"], "Subnormals in", 0.3),
    ]);
    expect(verdict.reasons.map((r) => r.split(" ")[0])).toEqual(["Overflow", "Subnormals", "Thin"]);
  });

  it("a value past a limit comes before a thin margin covering as many subjects (little headroom is inside the range)", () => {
    const verdict = judge([
      ...findings("little-headroom", "at-risk", ["t13"], "Thin headroom on", 0.98),
      ...findings("loss-value-overflow", "at-risk", ["loss"], "The loss overflows at"),
    ]);
    expect(verdict.reasons).toEqual(["The loss overflows at loss.", "Thin headroom on t13."]);
  });

  it("severity still comes first: one failing subject before many at risk", () => {
    const verdict = judge([
      ...findings("subnormal-values", "at-risk", ["s1", "s2", "s3"], "Subnormals in"),
      ...findings("little-headroom", "fails", ["t1"], "No headroom on"),
    ]);
    expect(verdict.reasons[0]).toBe("No headroom on t1.");
  });
});
