import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check, needsLossScale } from "../../src/check.js";
import { renderHtmlReport } from "../../src/report/html.js";
import { renderCheckMarkdown } from "../../src/report/markdown-check.js";
import { reportModel } from "../../src/report/report-from-check.js";
import { unscaledReason } from "../../src/report/summary.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// Why no loss scale is applied, as the Markdown and HTML outputs say it: by the gradient format actually judged.
// bfloat16 has 8 exponent bits, binary32's range (bfloat16 hardware numerics definition, 2018, from memory; SCIENCE.md
// §1.2); an 8-bit format with per-tensor or per-block scale factors takes those instead (OCP 8-bit floating point
// specification; OCP microscaling for blocks of 32).

function example(file: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
  if (!parsed.ok) throw new Error(`specs/${file} does not parse`);
  return parsed.spec;
}
const html = (result: ReturnType<typeof check>): string => renderHtmlReport(reportModel(result, { version: "test" }));

describe("unscaledReason", () => {
  it("names the format and why it takes no scale", () => {
    expect(unscaledReason("bfloat16", "none")).toBe("gradients are held in bfloat16, which has binary32's exponent range");
    expect(unscaledReason("binary32", "none")).toBe("gradients are held in binary32");
    expect(unscaledReason("e4m3", "tensor")).toBe("gradients are held in e4m3 with per-tensor scale factors");
    expect(unscaledReason("e5m2", "block")).toBe("gradients are held in e5m2 with per-block scale factors");
  });
});

describe("Markdown and HTML, when no loss scale is needed", () => {
  it("a bfloat16 what-if on a binary16 plan names bfloat16, not the plan's format", () => {
    const result = check(example("deep-relu-he.yaml"), { formats: ["bfloat16"] });
    expect(renderCheckMarkdown(result)).toContain(
      "Loss scale for bfloat16 gradients: not needed (gradients are held in bfloat16, which has binary32's exponent range).",
    );
    expect(html(result)).toContain("No loss scale is needed: gradients are held in bfloat16, which has binary32&#39;s exponent range.");
  });

  it("e4m3 gradients with per-tensor scale factors: the scale factors are the reason, not the exponent range", () => {
    const spec = example("deep-relu-he.yaml");
    const scaled: NetworkSpec = { ...spec, precision: { ...spec.precision, gradients: "e4m3", scaling: "tensor" } };
    expect(needsLossScale(scaled.precision)).toBe(false);
    const result = check(scaled);
    expect(renderCheckMarkdown(result)).toContain("Loss scale: not needed (gradients are held in e4m3 with per-tensor scale factors).");
    expect(html(result)).toContain("No loss scale is needed: gradients are held in e4m3 with per-tensor scale factors.");
    expect(html(result)).not.toContain("binary32's exponent range");
  });
});
