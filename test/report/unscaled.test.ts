import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check, needsLossScale } from "../../src/check.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { renderHtmlReport } from "../../src/report/html.js";
import { renderCheckMarkdown } from "../../src/report/markdown-check.js";
import { reportModel } from "../../src/report/report-from-check.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// Each loss-scale status worded by one rule (src/report/loss-scale.ts) in text, Markdown and HTML, with the reason
// the check gives (src/check.ts unscaledReason). bfloat16 has 8 exponent bits, binary32's range (bfloat16 hardware
// numerics definition, 2018, as in test/formats/reference.ts); an 8-bit format with per-tensor or per-block scale
// factors takes those instead (OCP 8-bit floating point specification; OCP microscaling for blocks of 32).

function example(file: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
  if (!parsed.ok) throw new Error(`specs/${file} does not parse`);
  return parsed.spec;
}
const html = (result: ReturnType<typeof check>): string => renderHtmlReport(reportModel(result, { version: "test" }));
// text on one line per sentence, so a clause is never split by the wrap
const text = (result: ReturnType<typeof check>): string => renderCheckText(result, { width: 1000 });

describe("not needed", () => {
  it("a bfloat16 what-if on a binary16 plan: the same clause, naming bfloat16, in text, Markdown and HTML", () => {
    const result = check(example("deep-relu-he.yaml"), { formats: ["bfloat16"] });
    const clause = "not needed (gradients are held in bfloat16, which has binary32's exponent range).";
    expect(text(result)).toContain(`\n  bfloat16 gradients: ${clause}\n`);
    expect(renderCheckMarkdown(result)).toContain(`\nLoss scale for bfloat16 gradients: ${clause}\n`);
    expect(html(result)).toContain(`<h3>bfloat16 gradients</h3><p>Loss scale: ${clause.replace("'", "&#39;")}`);
  });

  it("e4m3 gradients with per-tensor scale factors: the scale factors are the reason, in text too", () => {
    const spec = example("deep-relu-he.yaml");
    const scaled: NetworkSpec = { ...spec, precision: { ...spec.precision, gradients: "e4m3", scaling: "tensor" } };
    expect(needsLossScale(scaled.precision)).toBe(false);
    const result = check(scaled);
    const clause = "not needed (gradients are held in e4m3 with per-tensor scale factors).";
    expect(text(result)).toContain(`\nLoss scale\n  ${clause}\n`);
    expect(renderCheckMarkdown(result)).toContain(`\nLoss scale: ${clause}\n`);
    expect(html(result)).toContain(`<p>Loss scale: ${clause}`);
    expect(html(result)).not.toContain("binary32&#39;s exponent range");
  });
});

describe("a window", () => {
  it("the plan's binary16 gradients: pick and window worded alike in text and Markdown", () => {
    const result = check(example("deep-relu-he.yaml"));
    const w = result.lossScaleAnswer!.window;
    const clause = `pick 2^${w.pickLog2}, window 2^${w.lowestLog2}..2^${w.highestLog2}.`;
    expect(text(result)).toContain(`\nLoss scale\n  ${clause}\n`);
    expect(renderCheckMarkdown(result)).toContain(`\nLoss scale: ${clause}\n`);
    expect(html(result)).toContain(`<p>Loss scale: pick 2<sup>${w.pickLog2}</sup>, window 2<sup>${w.lowestLog2}</sup>..2<sup>${w.highestLog2}</sup>.</p>`);
  });
});

describe("an empty window", () => {
  it("deep-sigmoid's binary16 gradients: the same clause in text and Markdown, then the answer's reason", () => {
    const result = check(example("deep-sigmoid.yaml"));
    expect(result.lossScales[0]?.status).toBe("empty");
    const clause = "no static scale serves the whole horizon.";
    expect(text(result)).toContain(`\nLoss scale\n  ${clause}\n  ${result.lossScaleAnswer!.sentences[0]}\n`);
    expect(renderCheckMarkdown(result)).toContain(`\nLoss scale: ${clause} `);
    expect(html(result)).toContain(`<strong>Loss scale: ${clause}</strong>`);
  });
});
