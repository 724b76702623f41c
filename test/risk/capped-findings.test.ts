/**
 * Findings whose severity is capped at "at risk" (an overflow only an implementation keeping norm statistics or the loss
 * in the activation format would meet; gradients divided by the worker count before the sum) carry the threshold of the
 * severity they have, the at-risk one, even when their value passes the "fails" threshold (README.md, Verdicts: an
 * overflow only a non-widening implementation would meet is at most "at risk"; JSON `threshold`).
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { DEFAULT_THRESHOLDS, evaluateHazard, type Finding } from "../../src/risk/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { BINARY16, BINARY32 } from "./limits.js";
import { context, profile, site } from "./hazard-sites.js";

function only(findings: readonly Finding[], kind: Finding["kind"]): Finding {
  const found = findings.filter((f) => f.kind === kind);
  expect(found).toHaveLength(1);
  return found[0]!;
}

describe("a finding capped at 'at risk' carries the at-risk threshold", () => {
  it("a norm's sum of squares past binary16 in the activation format only: value 1 > 1e-2, at risk, threshold 1e-6", () => {
    // 4096 · 4.2² = 72253 passes binary16's overflow threshold 65520 in every row (IEEE 754-2019 binary16; DESIGN.md §5
    // item 7: rms √(65504/4096) = 4.0); accumulated in binary32 it fits, so only the activation format's finding stands
    const judged = evaluateHazard(site({ kind: "norm-sum-of-squares", terms: 4096, input: profile({ rms: 4.2, elements: 4096 * 16 }) }), context());
    const finding = only(judged.findings, "norm-sum-overflow");
    expect(finding.value).toBeGreaterThan(DEFAULT_THRESHOLDS.overflowFails);
    expect(finding.severity).toBe("at-risk");
    expect(finding.threshold).toBe(DEFAULT_THRESHOLDS.overflowAtRisk);
  });

  it("the same sum held in a binary16 accumulate format fails, with the fails threshold 1e-2", () => {
    const judged = evaluateHazard(
      site({ kind: "norm-sum-of-squares", terms: 4096, input: profile({ rms: 4.2, elements: 4096 * 16 }) }),
      context({ activations: BINARY32, accumulate: BINARY16 }),
    );
    const finding = only(judged.findings, "norm-sum-overflow");
    expect(finding.severity).toBe("fails");
    expect(finding.threshold).toBe(DEFAULT_THRESHOLDS.overflowFails);
  });

  it("a loss of 1e5 kept in binary16 activations (past 65520) with a binary32 accumulate format: at risk, threshold 1e-6", () => {
    const judged = evaluateHazard(site({ kind: "loss-value", layer: "loss", input: profile({ shape: "constant", rms: 1e5 }) }), context());
    const finding = only(judged.findings, "loss-value-overflow");
    expect(finding.value).toBe(1);
    expect(finding.severity).toBe("at-risk");
    expect(finding.threshold).toBe(DEFAULT_THRESHOLDS.overflowAtRisk);
  });

  it("gradients of rms 1e-7 divided by 64 workers before the sum flush in binary16 (bound 2^-25): at risk, threshold 1e-4", () => {
    // 1e-7/64 = 1.6e-9 sits far below binary16's flush bound 2^-25 = 2.98e-8 (IEEE 754-2019 binary16), so nearly all
    // of the squared norm the undivided gradients keep is lost: a value past the 1e-2 at which energy fails
    const judged = evaluateHazard(
      site({ kind: "gradient-sum", terms: 64, input: profile({ rms: 1e-7, elements: 1e6 }) }),
      context({ workers: 64, workerGradients: "average" }),
    );
    const finding = only(judged.findings, "gradient-sum-flush");
    expect(finding.value).toBeGreaterThan(DEFAULT_THRESHOLDS.energyFails);
    expect(finding.severity).toBe("at-risk");
    expect(finding.threshold).toBe(DEFAULT_THRESHOLDS.energyAtRisk);
  });

  it("cnn-batchnorm: every operation finding's threshold is the one of its severity, and its value passes it", () => {
    const path = "specs/cnn-batchnorm.yaml";
    const parsed = parseSpec(readFileSync(path, "utf8"), path);
    if (!parsed.ok) throw new Error(`${path} does not load`);
    const result = check(parsed.spec);
    const t = result.thresholds;
    // the kinds judged against each pair of thresholds (README.md, Verdicts)
    const pairs: Partial<Record<Finding["kind"], [number, number]>> = {
      "norm-sum-overflow": [t.overflowAtRisk, t.overflowFails],
      "loss-value-overflow": [t.overflowAtRisk, t.overflowFails],
      "gradient-sum-overflow": [t.overflowAtRisk, t.overflowFails],
      "accumulation-overflow": [t.overflowAtRisk, t.overflowFails],
      "softmax-exp-overflow": [t.overflowAtRisk, t.overflowFails],
      "gradient-sum-flush": [t.energyAtRisk, t.energyFails],
      "accumulation-error": [t.accumulationAtRisk, t.accumulationFails],
    };
    const findings = result.hazards.flatMap((h) => h.findings).filter((f) => pairs[f.kind] !== undefined);
    // the batch norms of the first stage overflow binary16 only where their statistics stay in it (0.397 and more)
    expect(findings.some((f) => f.kind === "norm-sum-overflow" && f.value > t.overflowFails && f.severity === "at-risk")).toBe(true);
    for (const f of findings) {
      const [atRisk, fails] = pairs[f.kind]!;
      expect(f.threshold).toBe(f.severity === "fails" ? fails : atRisk);
      expect(f.value).toBeGreaterThan(f.threshold);
    }
  });
});
