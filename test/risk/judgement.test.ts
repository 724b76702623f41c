/**
 * A check's verdict reasons counted run by run (src/risk/judgement.ts judgeFindings): the tensors' findings, gathered one
 * tensor after another, are counted per kind without a set of subjects. Held here to the general count, a set of every
 * finding's subject per kind (`judgeFindings(findings, 0)`, which is `judge`): on random findings whose first part comes
 * subject by subject (as judgeFormat hands them over) and whose rest repeats subjects and kinds freely (the operations'),
 * with the rest's subjects drawn partly from the first part's, the two give the same verdict and reasons, sentence for
 * sentence.
 */
import { describe, expect, it } from "vitest";
import * as fc from "fast-check";
import { judgeFindings } from "../../src/risk/judgement.js";
import { judge } from "../../src/risk/verdict.js";
import type { Finding } from "../../src/risk/types.js";

const KINDS = ["overflow", "little-headroom", "subnormal-values", "flushed-values", "gradient-sum-overflow"] as const;

const draft = fc.record({
  kind: fc.constantFrom(...KINDS),
  severity: fc.constantFrom("at-risk" as const, "fails" as const),
  value: fc.constantFrom(0.5, 1, 2, 0.001),
});

function finding(subject: string, source: Finding["source"], d: { kind: Finding["kind"]; severity: Finding["severity"]; value: number }): Finding {
  return { format: "binary16", subject, source, kind: d.kind, severity: d.severity, value: d.value, threshold: 0, sentence: `${d.kind} ${subject} ${d.value}.` };
}

// a tensor's findings: one to three, kinds possibly repeated (a subject's findings of a kind next to one another)
const tensorBlock = fc.array(draft, { minLength: 1, maxLength: 3 });

const findingsCase = fc
  .record({
    blocks: fc.array(tensorBlock, { minLength: 0, maxLength: 12 }),
    rest: fc.array(fc.record({ draft, subject: fc.nat(15), tensor: fc.boolean() }), { maxLength: 10 }),
  })
  .map(({ blocks, rest }) => {
    const findings: Finding[] = [];
    // distinct ids, made apart (not the same string objects) as a prediction's are
    blocks.forEach((block, t) => block.forEach((d) => findings.push(finding(["t", String(t)].join(""), "tensor", d))));
    const runs = findings.length;
    for (const r of rest) findings.push(finding(r.tensor ? `t${r.subject}` : `layer${r.subject % 4}`, r.tensor ? "tensor" : "hazard", r.draft));
    return { findings, runs };
  });

describe("judgeFindings: counted run by run, as the set of subjects counts", () => {
  it("gives judge's verdict and reasons wherever the first part comes subject by subject", () => {
    let counted = 0;
    fc.assert(
      fc.property(findingsCase, ({ findings, runs }) => {
        if (runs > 1) counted++;
        expect(judgeFindings(findings, runs)).toEqual(judge(findings));
        expect(judgeFindings(findings, runs)).toEqual(judgeFindings(findings, 0));
      }),
      { numRuns: 400 },
    );
    // the run-wise count is exercised, not only the set
    expect(counted).toBeGreaterThan(200);
  });

  it("counts one subject once per kind, however many of its findings there are", () => {
    const findings = [
      finding("a", "tensor", { kind: "overflow", severity: "at-risk", value: 1 }),
      finding("a", "tensor", { kind: "overflow", severity: "fails", value: 1 }),
      finding("b", "tensor", { kind: "overflow", severity: "at-risk", value: 2 }),
      finding("layer", "hazard", { kind: "overflow", severity: "at-risk", value: 0.5 }),
      finding("b", "tensor", { kind: "overflow", severity: "at-risk", value: 0.5 }),
    ];
    const judged = judgeFindings(findings, 3);
    expect(judged).toEqual(judge(findings));
    expect(judged.reasons).toEqual(["overflow a 1; 2 other tensors likewise (overflow)."]);
  });
});
