/**
 * compare's built-in plans sum gradients alike: every one in binary32 where workers × accumulation steps > 1, with the
 * sum buffer counted alike, so bfloat16 is not judged on a narrow sum the 8-bit plan is spared. Expected values: the
 * sum's relative rounding error √n·u for terms of random sign (Higham & Mary 2019, Theorem 2.4), u = 2^-8 in bfloat16
 * and 2^-24 in binary32 (IEEE 754-2019 §3.6, precision 8 and 24 bits); bytes per element 2 (bfloat16, binary16),
 * 4 (binary32), IEEE 754-2019 Table 3.5.
 */
import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { comparePlans, STANDARD_PLANS } from "../../src/compare.js";
import { renderCompareText } from "../../src/report/compare-text.js";
import { parseSpec } from "../../src/spec/index.js";

const FILE = "test/fixtures/specs/hazards/gradient-sum-bfloat16.yaml";

function load(text = readFileSync(FILE, "utf8")) {
  const parsed = parseSpec(text, FILE);
  if (!parsed.ok) throw new Error("the fixture does not load");
  return parsed.spec;
}

describe("compare's built-in plans sum gradients in binary32 alike", () => {
  // 4 workers × 1024 accumulation steps (the fixture's header)
  const spec = load();
  const comparison = comparePlans(spec, { plans: STANDARD_PLANS });
  const outcome = (name: string) => comparison.outcomes.find((o) => o.plan.name === name)!;

  it("every built-in plan names binary32 for its gradient sums", () => {
    for (const plan of STANDARD_PLANS) expect(plan.gradientSums ?? plan.gradients, plan.name).toBe("binary32");
    expect(comparison.gradientContributions).toBe(4 * 1024);
  });

  it("so no built-in plan carries the narrow sum's √n·u finding: √4096 · 2^-24 = 3.8e-6 in binary32, where bfloat16's 2^-8 gave 0.25", () => {
    expect(Math.sqrt(4096) * 2 ** -8).toBe(0.25);
    expect(Math.sqrt(4096) * 2 ** -24).toBeLessThan(1e-2);
    for (const name of ["bfloat16 with master copy", "bfloat16 only", "binary16 with master copy"]) {
      const reasons = outcome(name).firstProblem ?? "";
      expect(reasons, name).not.toMatch(/Summed in (bfloat16|binary16), the gradient format/);
    }
    // the fixture's own plan, summing in its bfloat16 gradient format as written, keeps the finding
    const own = comparePlans(spec, { plans: [spec.precision] }).outcomes[0]!;
    expect(own.verdict).toBe("fails");
    expect(own.firstProblem).toMatch(/Summed in bfloat16, the gradient format, the 4096 gradient contributions/);
  });

  it("and each pays for its binary32 sum buffer as the 8-bit plan does: 4 bytes per parameter beside narrower gradients", () => {
    // SGD keeps no state (common practice): weights + master copy + gradients + sum buffer
    expect(outcome("binary16 with master copy").cost.bytesPerParameter).toBe(2 + 4 + 2 + 4);
    expect(outcome("bfloat16 with master copy").cost.bytesPerParameter).toBe(2 + 4 + 2 + 4);
    expect(outcome("bfloat16 only").cost.bytesPerParameter).toBe(2 + 2 + 4);
    expect(outcome("8-bit with scale factors").cost.bytesPerParameter).toBe(1 + 4 + 1 + 4);
    // binary32 gradients are their own sum: no buffer
    expect(outcome("binary32").cost.bytesPerParameter).toBe(4 + 4);
  });

  it("the text says how the plans sum", () => {
    const text = renderCompareText(comparison).replace(/\s+/g, " ");
    expect(text).toContain("the built-in plans sum the 4096 gradient contributions of an update (workers × accumulation steps) in binary32");
  });
});

describe("with one contribution nothing is summed", () => {
  const single = load(readFileSync(FILE, "utf8").replace("workers: 4", "workers: 1").replace("accumulation-steps: 1024", "accumulation-steps: 1"));

  it("no sum buffer is counted, and the text says nothing of sums", () => {
    const comparison = comparePlans(single, { plans: STANDARD_PLANS });
    expect(comparison.gradientContributions).toBe(1);
    expect(comparison.outcomes.find((o) => o.plan.name === "bfloat16 with master copy")!.cost.bytesPerParameter).toBe(2 + 4 + 2);
    expect(renderCompareText(comparison)).not.toContain("gradient sums:");
  });

  it("a spec plan that repeats a built-in one but for its (unused) sum format is listed once", () => {
    const builtIn = STANDARD_PLANS.find((p) => p.name === "binary16 with master copy")!;
    const { gradientSums: _sums, ...own } = { ...builtIn, name: "mine" };
    const comparison = comparePlans({ ...single, precision: own, plans: [] });
    expect(comparison.outcomes.map((o) => o.plan.name)).toContain("mine");
    expect(comparison.outcomes.map((o) => o.plan.name)).not.toContain("binary16 with master copy");
  });
});
