import { readFileSync } from "node:fs";
import { describe, expect, test } from "vitest";
import { check } from "../../src/check.js";
import { renderCheckMarkdown } from "../../src/report/markdown-check.js";
import { renderHtmlReport } from "../../src/report/html.js";
import { reportModel } from "../../src/report/report-from-check.js";
import { parseSpec } from "../../src/spec/index.js";
import { escapeMarkdown, markdownCode, markdownTable } from "../../src/report/markdown.js";

describe("escapeMarkdown", () => {
  test("escapes the pipe so a cell cannot split (GitHub Flavored Markdown spec, tables extension)", () => {
    expect(escapeMarkdown("a|b")).toBe("a\\|b");
  });
  test("turns line breaks into <br> so a row stays on one line", () => {
    expect(escapeMarkdown("one\ntwo\r\nthree")).toBe("one<br>two<br>three");
  });
  test("shows other control characters as their escapes, so Markdown printed to a terminal sends no ESC (ECMA-48 §5.3)", () => {
    // the backslash of \u001b is itself escaped (CommonMark §2.4), so GitHub shows the six characters
    expect(escapeMarkdown("sweep/\u001b[2Jclear\t.yaml")).toBe("sweep/\\\\u001b\\[2Jclear\\\\t.yaml");
    expect(escapeMarkdown("a\u0007b\u009bc")).not.toMatch(/[\u0000-\u001f\u007f-\u009f]/);
  });
  test("shows HTML as text", () => {
    expect(escapeMarkdown("<script>alert(1)</script>&")).toBe("&lt;script&gt;alert(1)&lt;/script&gt;&amp;");
  });
  test("escapes emphasis, code and link punctuation (CommonMark §2.4 backslash escapes)", () => {
    expect(escapeMarkdown("__init__ *x* `y` [z]")).toBe("\\_\\_init\\_\\_ \\*x\\* \\`y\\` \\[z\\]");
  });
});

describe("markdownCode", () => {
  test("uses a longer fence around backticks (CommonMark §6.1)", () => {
    expect(markdownCode("a`b")).toBe("``a`b``");
    expect(markdownCode("plain")).toBe("`plain`");
  });
});

describe("markdownTable", () => {
  test("writes header, delimiter row with alignment and escaped cells", () => {
    const text = markdownTable(
      [{ title: "spec" }, { title: "risk", align: "right" }, { title: "note", align: "center" }],
      [
        ["a|b", 3, { markdown: "**fails**" }],
        ["c\nd", null],
      ],
    );
    expect(text).toBe(
      "| spec | risk | note |\n| --- | ---: | :---: |\n| a\\|b | 3 | **fails** |\n| c<br>d |  |  |\n",
    );
  });
  test("every row has as many unescaped pipes as the header", () => {
    const text = markdownTable([{ title: "a" }, { title: "b" }], [["x|y|z", "|"], ["\\|", "w"]]);
    const pipes = (line: string) => line.replace(/\\\\/g, "").replace(/\\\|/g, "").split("|").length;
    const lines = text.trimEnd().split("\n");
    for (const line of lines) expect(pipes(line)).toBe(pipes(lines[0]!));
  });
  test("refuses rows longer than the columns", () => {
    expect(() => markdownTable([{ title: "a" }], [["x", "y"]])).toThrow(RangeError);
  });
});

describe("renderCheckMarkdown names the loss scale it judged", () => {
  const spec = (() => {
    const parsed = parseSpec(readFileSync("specs/transformer-encoder.yaml", "utf8"), "specs/transformer-encoder.yaml");
    if (!parsed.ok) throw new Error("the example does not parse");
    return parsed.spec;
  })();

  test("a plan's own loss scale is said beside the window's pick, which it may differ from", () => {
    const result = check(spec, { plan: "mixed-binary16" });
    expect(result.lossScale).toMatchObject({ origin: "plan", value: 1024 });
    const md = renderCheckMarkdown(result);
    expect(md).toContain("\nGradients judged at the loss scale 1024 (from the plan).\n");
    expect(md).toMatch(/\nLoss scale: pick 2\^\d+, window/);
  });

  test("a scale given on the command line is said too; a recommended one is the pick and needs no line", () => {
    expect(renderCheckMarkdown(check(spec, { plan: "mixed-binary16", lossScale: 4096 }))).toContain("\nGradients judged at the loss scale 4096 (from the command line).\n");
    const recommended = check(spec, { formats: ["binary16"] });
    expect(recommended.lossScale.origin).toBe("recommended");
    expect(renderCheckMarkdown(recommended)).not.toContain("Gradients judged at");
  });
});

describe("renderCheckMarkdown with formats judged in place of the plan's", () => {
  test("says a format not in the plan stands in for the plan's, as the terminal text does", () => {
    const parsed = parseSpec(readFileSync("specs/cnn-batchnorm.yaml", "utf8"), "specs/cnn-batchnorm.yaml");
    if (!parsed.ok) throw new Error("the example does not parse");
    const md = renderCheckMarkdown(check(parsed.spec, { formats: ["bfloat16"] }));
    expect(md).toContain("| bfloat16 | in place of the plan's formats: activations, weights, gradients |");
    expect(renderCheckMarkdown(check(parsed.spec))).toContain("| binary16 | activations, weights, gradients |");
  });
});

describe("renderCheckMarkdown: the optimizer's part of the verdict", () => {
  test("a verdict only the optimizer sets gives its reason and first remedy; one that fits adds nothing", () => {
    // SGD with lr 1e-6 on a bfloat16 master copy: updates of about 1e-6·|g| are far below half an ulp of weights near
    // 0.1 (2^-9 relative, p = 8; SCIENCE.md §1.1 swamping), so most are lost
    const text = (lr: string, master: string) =>
      [
        "input: { features: 64 }",
        `training: { batch: 32, loss: { kind: cross-entropy, classes: 10 }, optimizer: { kind: sgd, learning-rate: ${lr} } }`,
        `precision: { activations: bfloat16, master-weights: ${master} }`,
        "layers: [{ type: dense, width: 10 }]",
      ].join("\n");
    const parsed = parseSpec(text("1.0e-6", "bfloat16"), "sgd.yaml");
    if (!parsed.ok) throw new Error("does not parse");
    const result = check(parsed.spec);
    expect(result.formats.every((f) => f.verdict === "fits")).toBe(true);
    expect(result.optimizer.verdict).not.toBe("fits");
    const md = renderCheckMarkdown(result);
    expect(md).toContain(`\nOptimizer sgd: **${result.optimizer.verdict === "fails" ? "fails" : "at risk"}**.\n`);
    expect(md).toContain(`- ${escapeMarkdown(result.optimizer.reasons[0]!)}\n`);
    expect(md).toContain("- first remedy: ");
    // lr 0.1 into a binary32 master copy (half an ulp is 2^-25 of a weight, IEEE 754-2019 p = 24): nothing lost
    const kept = parseSpec(text("0.1", "binary32"), "sgd.yaml");
    if (!kept.ok) throw new Error("does not parse");
    const fine = check(kept.spec);
    expect(fine.optimizer.verdict).toBe("fits");
    expect(renderCheckMarkdown(fine)).not.toContain("Optimizer sgd");
  });
});

describe("check --md with no static loss scale", () => {
  test("gives the first remedy that works, as it gives the optimizer's (a CI reader gets something to do)", () => {
    // an invented regressor on raw sensor columns in grams, binary16 with subnormals flushed: no static scale fits
    const parsed = parseSpec(
      [
        "name: orchard-crates",
        "input: { features: 37, scale: 2500 }",
        "training:",
        "  batch: 128",
        "  loss: { kind: mean-squared-error, target-scale: 40000, reduction: sum }",
        "  optimizer: { kind: sgd, learning-rate: 1.0e-6 }",
        "  horizon: { steps: 5000, final-loss: 1.0e4 }",
        "precision: { activations: binary16, flush-subnormals: true }",
        "layers: [{ type: dense, width: 64, init: he-normal }, relu, { type: dense, width: 64, init: he-normal }, relu, { type: dense, width: 1 }]",
      ].join("\n"),
      "orchard.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const result = check(parsed.spec);
    const answer = result.lossScaleAnswer!;
    expect(answer.window.empty).toBe(true);
    const works = answer.remedies.find((r) => r.works)!;
    const md = renderCheckMarkdown(result);
    expect(md).toContain(`\n- first remedy that works: ${escapeMarkdown(works.sentence)}\n`);
  });
});

describe("the plan's conversion settings in Markdown and HTML", () => {
  // an invented 8-bit plan: the OCP 8-bit specification defines a saturating and a non-saturating conversion
  const text = (overflow: string) =>
    [
      "name: parcel-sorter",
      "input: { features: 64 }",
      "training: { batch: 32, loss: { kind: cross-entropy, classes: 12 } }",
      `precision: { name: eight, activations: e4m3, weights: e4m3, gradients: e5m2, scaling: none, overflow: ${overflow} }`,
      "layers: [{ type: dense, width: 12, init: he-normal }]",
    ].join("\n");
  const checked = (overflow: string) => {
    const parsed = parseSpec(text(overflow), "parcel.yaml");
    if (!parsed.ok) throw new Error("does not parse");
    return check(parsed.spec);
  };

  test("Markdown names them beside the plan, so two plans differing only in them read apart", () => {
    expect(renderCheckMarkdown(checked("saturate"))).toContain("precision plan `eight` (8-bit without scale factors, saturating on overflow).\n");
    expect(renderCheckMarkdown(checked("infinity-or-nan"))).toContain("precision plan `eight` (8-bit without scale factors, infinity or NaN on overflow).\n");
  });

  test("the HTML report names them among its facts", () => {
    const html = renderHtmlReport(reportModel(checked("infinity-or-nan"), { version: "test" }));
    expect(html).toContain("<dt>precision plan</dt><dd>eight (8-bit without scale factors, infinity or NaN on overflow)</dd>");
  });
});
