import { mkdirSync, writeFileSync } from "node:fs";
import { describe, expect, test } from "vitest";
import { bandDomain, escapeHtml, renderHtmlReport } from "../../src/report/html.js";
import { demoModel, HOSTILE } from "./fixtures/demo-model.js";

const OUT = new URL("./__out__/", import.meta.url);

describe("escapeHtml (HTML Living Standard §13.1.2.6: & < > \" ' in text and attributes)", () => {
  test("escapes the five characters", () => {
    expect(escapeHtml(`<a href="x" title='y'>&</a>`)).toBe("&lt;a href=&quot;x&quot; title=&#39;y&#39;&gt;&amp;&lt;/a&gt;");
  });
});

describe("renderHtmlReport", () => {
  const html = renderHtmlReport(demoModel(HOSTILE));
  mkdirSync(OUT, { recursive: true });
  writeFileSync(new URL("demo.html", OUT), html);

  test("is one self-contained document: no scripts, no external references, a CSP that forbids scripts", () => {
    expect(html.startsWith("<!doctype html>")).toBe(true);
    expect(html).toContain(`content="default-src 'none'; style-src 'unsafe-inline'`);
    expect(html).not.toMatch(/<script/i);
    expect(html).not.toMatch(/\b(?:src|href)=/i);
    expect(html).not.toMatch(/https?:\/\/(?!www\.w3\.org\/2000\/svg)/);
    expect(html).not.toMatch(/@import|url\((?!#)/);
  });

  test("escapes every spec-provided string", () => {
    expect(html).not.toContain(HOSTILE);
    expect(html).not.toContain("<b>x");
    expect(html).toContain("&lt;script&gt;alert(1)&lt;/script&gt;&lt;b&gt;x");
  });

  test("has the verdict, both band charts, the loss-scale window, the ledger waterfall and the tables", () => {
    expect(html).toContain('<p class="verdict-word">At risk</p>');
    expect(html.match(/<svg class="chart band-chart"/g)).toHaveLength(2);
    expect(html).toContain('<svg class="chart scale-chart"');
    expect(html).toContain('<svg class="chart ledger-chart"');
    expect(html).toContain("<figcaption>Forward pass</figcaption>");
    expect(html).toContain("<figcaption>Backward pass</figcaption>");
    expect(html.match(/class="range-subnormal"/g)?.length).toBe(7);
    expect(html).toContain(">all zero<title>fc2 · weight:bias: every element is zero</title>");
    expect(html).toContain("not guarantees");
  });

  test("pattern ids are unique in the document", () => {
    const ids = [...html.matchAll(/\bid="([^"]+)"/g)].map((m) => m[1]);
    expect(new Set(ids).size).toBe(ids.length);
  });

  test("the same model gives the same bytes", () => {
    expect(renderHtmlReport(demoModel(HOSTILE))).toBe(html);
  });

  test("labels a loss scale that was not evaluated, and an empty window with its reason", () => {
    const notEvaluated = renderHtmlReport({ ...demoModel(), lossScale: { summary: { status: "not-evaluated" }, notes: [] } });
    expect(notEvaluated).toContain("<strong>Loss scale: not evaluated.</strong>");
    expect(notEvaluated).not.toContain("scale-chart");
    const notNeeded = renderHtmlReport({ ...demoModel(), lossScale: { summary: { status: "not-needed" }, notes: [] } });
    expect(notNeeded).toContain("<p>Loss scale: not needed.");
    const because = renderHtmlReport({ ...demoModel(), lossScale: { summary: { status: "not-needed", reason: { kind: "wide-range", sentence: "gradients are held in <x>" } }, notes: [] } });
    expect(because).toContain("<p>Loss scale: not needed (gradients are held in &lt;x&gt;).");
    const empty = renderHtmlReport({ ...demoModel(), lossScale: { summary: { status: "empty", sentence: "gradients <flush>" }, notes: [] } });
    expect(empty).toContain("Loss scale: no static scale serves the whole horizon.</strong> gradients &lt;flush&gt;");
  });
});

describe("bandDomain", () => {
  test("takes in the bands and the binary16 edges near them, not binary32's far edges", () => {
    const model = demoModel();
    const [lo, hi] = bandDomain(model.tensors, model.ranges);
    expect(lo).toBeLessThanOrEqual(-47);
    expect(lo).toBeGreaterThan(-126);
    expect(hi).toBeGreaterThanOrEqual(Math.log2(65504));
    expect(hi).toBeLessThan(128);
  });
});

describe("the formats table of a report", () => {
  // IEEE 754-2019 §3.6: binary16's largest finite value is (2 − 2^-10)·2^15 = 65504, below 2^16; bfloat16 (8 exponent
  // bits, 8 significant bits) (2 − 2^-7)·2^127 ≈ 3.3895e38, below 2^128. Rounding log2 of them printed 2^16 and 2^128.
  const table = async (spec: string): Promise<string> => {
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const { loadSpec } = await import("../../src/spec/index.js");
    const loaded = await loadSpec(new URL(`../../specs/${spec}`, import.meta.url).pathname);
    if (!loaded.ok) throw new Error("example does not load");
    const html = renderHtmlReport(reportModel(check(loaded.spec), { version: "test" }));
    const start = html.indexOf("smallest kept");
    return html.slice(start, html.indexOf("</table>", start));
  };

  test("gives the largest finite value itself, not a rounded power of two", async () => {
    const half = await table("cnn-batchnorm.yaml");
    expect(half).toContain(`<td class="num">65504</td>`);
    const brain = await table("transformer-encoder.yaml");
    expect(brain).toContain(`<td class="num">${((2 - 2 ** -7) * 2 ** 127).toExponential(4).replace("e+", "e")}</td>`);
    // binary32: (2 − 2^-23)·2^127, Math.fround's largest finite value
    expect(brain).toContain(`<td class="num">${(2 ** 127 * (2 - 2 ** -23)).toExponential(4).replace("e+", "e")}</td>`);
    for (const t of [half, brain]) expect(t).not.toMatch(/<sup>16<\/sup>|<sup>128<\/sup>/);
  });
});

describe("the formats table of a report judging formats in place of the plan's", () => {
  test("is headed 'Formats judged' and says the format stands in for the plan's; a plain report keeps 'Formats in the plan'", async () => {
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const { loadSpec } = await import("../../src/spec/index.js");
    const loaded = await loadSpec(new URL("../../specs/cnn-batchnorm.yaml", import.meta.url).pathname);
    if (!loaded.ok) throw new Error("example does not load");
    const other = renderHtmlReport(reportModel(check(loaded.spec, { formats: ["bfloat16"] }), { version: "test" }));
    expect(other).toContain(`<h2 id="formats">Formats judged</h2>`);
    expect(other).toContain("<td>bfloat16</td><td>in place of the plan&#39;s formats: activations, weights, gradients</td>");
    const plain = renderHtmlReport(reportModel(check(loaded.spec), { version: "test" }));
    expect(plain).toContain(`<h2 id="formats">Formats in the plan</h2>`);
  });
});

describe("the bands of 8-bit tensors with per-tensor scale factors", () => {
  test("are drawn after the scale factor, as the format receives them, and the text says so", async () => {
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const { parseSpec } = await import("../../src/spec/index.js");
    const parsed = parseSpec(
      [
        "input: { features: 256 }",
        "training: { batch: 64, loss: { kind: cross-entropy, classes: 10 } }",
        "precision: { activations: e4m3, weights: e4m3, gradients: e5m2, scaling: tensor }",
        "layers: [{ type: dense, width: 256, init: he-normal }, relu, { type: dense, width: 10 }]",
      ].join("\n"),
      "scaled.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const result = check(parsed.spec);
    const model = reportModel(result, { version: "test" });
    const tensor = result.tensors.find((t) => t.id === "dense-0/activation-gradient")!;
    const risk = tensor.risks.find((r) => r.format === "e5m2")!;
    expect(risk.scaleLog2.start).toBeGreaterThan(10);
    const band = model.tensors.find((t) => t.id === tensor.id)!;
    expect(band.scaleLog2).toBe(risk.scaleLog2.start);
    expect(band.rmsLog2).toBeCloseTo(Math.log2(tensor.statistics.start.rms) + risk.scaleLog2.start, 12);
    // e5m2's largest finite value 57344 = 1.75·2^15 (OCP 8-bit spec, Table 1): the scaled max sits below it
    expect(band.highLog2).toBeLessThan(Math.log2(57344));
    expect(renderHtmlReport(model)).toContain("drawn after that factor, as the format receives it.");
    // without scale factors nothing moves and nothing is said
    const plain = parseSpec("input: { features: 256 }\ntraining: { batch: 64, loss: { kind: cross-entropy, classes: 10 } }\nprecision: { activations: binary16 }\nlayers: [{ type: dense, width: 10 }]\n", "plain.yaml");
    if (!plain.ok) throw new Error("does not parse");
    const plainModel = reportModel(check(plain.spec), { version: "test" });
    expect(plainModel.tensors.every((t) => t.scaleLog2 === undefined)).toBe(true);
    expect(renderHtmlReport(plainModel)).not.toContain("drawn after that factor");
  });
});

describe("the verdict's reasons of a report", () => {
  test("open with a capital, the optimizer's too", async () => {
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const { parseSpec } = await import("../../src/spec/index.js");
    // AdamW's decay step lr·λ = 1e-3·0.01 = 1e-5 of a weight is below half an ulp of binary16 (2^-12 relative, IEEE
    // 754-2019 p = 11): lost without a master copy
    const parsed = parseSpec(
      [
        "input: { features: 64 }",
        "training: { batch: 32, loss: { kind: cross-entropy, classes: 10 }, optimizer: { kind: adamw, learning-rate: 1.0e-3 } }",
        "precision: { activations: binary16, master-weights: none }",
        "layers: [{ type: dense, width: 10 }]",
      ].join("\n"),
      "decay.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const result = check(parsed.spec);
    expect(result.optimizer.reasons.some((r) => r.startsWith("weight decay steps"))).toBe(true);
    const model = reportModel(result, { version: "test" });
    expect(model.reasons.some((r) => r.startsWith("Weight decay steps"))).toBe(true);
    for (const reason of model.reasons) expect(reason.charAt(0), reason).not.toMatch(/[a-z]/);
  });
});

describe("the loss-scale section of a check with no static scale", () => {
  test("gives the reason once and the remedies, as the terminal does", async () => {
    const { readFileSync } = await import("node:fs");
    const { parseSpec } = await import("../../src/spec/index.js");
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const parsed = parseSpec(readFileSync("specs/residual-mlp-unscaled.yaml", "utf8"), "specs/residual-mlp-unscaled.yaml");
    if (!parsed.ok) throw new Error("the example does not parse");
    const result = check(parsed.spec);
    const item = result.lossScales[0]!;
    expect(item.status).toBe("empty");
    if (item.status === "not-needed") return;
    const page = renderHtmlReport(reportModel(result, { version: "test" }));
    // the loss-scale section alone (the verdict above it may name the same reason)
    const html = page.slice(page.indexOf('<h2 id="scale">'), page.indexOf('<h2 id="ledger">'));
    expect(html.length).toBeGreaterThan(0);
    const reason = escapeHtml(item.answer.sentences[0]!);
    expect(html.split(reason).length - 1).toBe(1);
    expect(item.answer.remedies.length).toBeGreaterThan(0);
    item.answer.remedies.forEach((remedy, i) => {
      expect(html).toContain(escapeHtml(`${i + 1}. ${remedy.works ? "works" : "does not work"}: ${remedy.sentence}`));
    });
  });
});

describe("the ledger's sentence says which size the factors add up to", () => {
  test("the rms at the start, the end of the horizon's when it differs, and the loss scale the check applies", () => {
    const html = renderHtmlReport(demoModel("fc"));
    expect(html).toContain(
      "the tensor's rms at the start of training is 2<sup>-17</sup>, and 2<sup>-19</sup> at the end of the horizon; " +
        "the check multiplies it by the loss scale 2<sup>9</sup> before judging it.</p>",
    );
  });

  test("from a check whose worst tensor is judged at the end of the horizon", async () => {
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const { parseSpec } = await import("../../src/spec/index.js");
    // an invented 8-bit plan without scale factors, at a loss scale of its own: the gradients shrink as the loss falls to
    // 0.05 and flush
    const parsed = parseSpec(
      [
        "name: parcel-sorter",
        "input: { features: 128 }",
        "training: { batch: 256, loss: { kind: cross-entropy, classes: 12 }, horizon: { steps: 30000, final-loss: 0.05, weight-growth: 3 } }",
        "precision: { activations: e4m3, weights: e4m3, gradients: e5m2, scaling: none, loss-scale: 2 }",
        "layers: [{ type: dense, width: 128, init: he-normal }, relu, { type: dense, width: 12 }]",
      ].join("\n"),
      "parcel.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const result = check(parsed.spec, { ledger: true });
    const model = reportModel(result, { version: "test" });
    const worst = model.findings[0]!;
    expect(worst.subject).toBe(model.ledger!.subject);
    expect(result.formats.flatMap((f) => f.findings).find((f) => f.subject === worst.subject)!.at).toBe("end");
    const tensor = result.tensors.find((t) => t.id === worst.subject)!;
    const tenth = (x: number): number => Math.round(10 * Math.log2(x)) / 10;
    expect(tenth(tensor.end.rms)).not.toBe(tenth(tensor.start.rms));
    expect(renderHtmlReport(model)).toContain(
      `rms at the start of training is 2<sup>${tenth(tensor.start.rms)}</sup>, and 2<sup>${tenth(tensor.end.rms)}</sup> at the end of the horizon; ` +
        `the check multiplies it by the loss scale 2<sup>${Math.log2(result.lossScale.value)}</sup> before judging it.`,
    );
  });
});

describe("the loss-scale section when no loss scale is needed", () => {
  test("does not call gradients held with per-tensor scale factors 'unscaled'", async () => {
    const { check } = await import("../../src/check.js");
    const { reportModel } = await import("../../src/report/report-from-check.js");
    const { parseSpec } = await import("../../src/spec/index.js");
    // an invented 8-bit plan: e5m2 gradients with per-tensor scale factors need no loss scale, but they are scaled
    const parsed = parseSpec(
      [
        "name: parcel-sorter",
        "input: { features: 64 }",
        "training: { batch: 32, loss: { kind: cross-entropy, classes: 12 } }",
        "precision: { activations: e4m3, weights: e4m3, gradients: e5m2, scaling: tensor }",
        "layers: [{ type: dense, width: 12, init: he-normal }]",
      ].join("\n"),
      "parcel.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const html = renderHtmlReport(reportModel(check(parsed.spec), { version: "test" }));
    expect(html).toContain("Loss scale: not needed (gradients are held in e5m2 with per-tensor scale factors).");
    expect(html).toContain("Whether any gradient overflows or flushes without a loss scale is in the tensors' findings.");
    expect(html).not.toContain("flushes unscaled");
  });
});
