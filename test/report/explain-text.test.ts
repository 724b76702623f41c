import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import type { LedgerEntry } from "../../src/magnitude/types.js";
import { renderExplainText, strongestFactors } from "../../src/report/check-explain.js";
import { parseSpec } from "../../src/spec/index.js";

// The explain text: which factors it names as the strongest, and how it words a format that does not hold the tensor.

function entry(layer: string, log2Factor: number): LedgerEntry {
  return { layer, log2Factor, rule: "r", source: "s" } as LedgerEntry;
}

describe("strongestFactors", () => {
  it("names no factor that reads 0.00 at the two decimals the ledger shows", () => {
    const { shrink, grow } = strongestFactors([entry("norm", -4.3), entry("skip", 0.004), entry("query", -0.001), entry("table", 4.29), entry("zeros", 0.5)]);
    expect(shrink.map((e) => e.layer)).toEqual(["norm"]);
    expect(grow.map((e) => e.layer)).toEqual(["table", "zeros"]);
  });

  it("names layers only: the profile's closing entries (exact zeros, the finite-width median) are not among them", () => {
    const { shrink, grow } = strongestFactors([entry("dense-3", 0.5), entry("(profile)", 0.5), entry("(profile)", -0.2), entry("norm", -0.1)]);
    expect(grow.map((e) => e.layer)).toEqual(["dense-3"]);
    expect(shrink.map((e) => e.layer)).toEqual(["norm"]);
  });
});

// A small 8-bit plan with per-tensor scale factors: e4m3 holds the forward pass, e5m2 the gradients
const parsed = parseSpec(
  [
    "name: explain-probe",
    "input: { features: 256 }",
    "training: { batch: 64, loss: { kind: cross-entropy, classes: 10 } }",
    "precision: { activations: e4m3, weights: e4m3, gradients: e5m2, scaling: tensor }",
    "layers:",
    "  - { type: dense, width: 256, init: he-normal }",
    "  - relu",
    "  - { type: dense, width: 10 }",
  ].join("\n"),
  "explain-probe.yaml",
);
if (!parsed.ok) throw new Error("the probe spec does not parse");
const result = check(parsed.spec, { ledger: true, everyFormat: true });

describe("renderExplainText", () => {
  it("gives a format that does not hold the tensor its numbers but no verdict of its own", () => {
    const tensor = result.tensors.find((t) => t.id === "dense-0/activation-gradient")!;
    const notHolding = tensor.risks.filter((r) => !r.judged).map((r) => r.format);
    expect(notHolding).toContain("e4m3");
    const text = renderExplainText(result, tensor, { width: 400 });
    for (const format of notHolding) {
      const line = text.split("\n").find((l) => l.startsWith(`  ${format}`))!;
      expect(line).toContain(`${format}: not judged (it does not hold this tensor); flushed`);
      expect(line).not.toMatch(/: (fits|at risk|fails);/);
    }
    expect(text).toMatch(/\n {2}e5m2: (fits|at risk|fails); flushed/);
  });

  it("names the scale factors as the plan applies them: per tensor, or per block (OCP MX v1.0: blocks of 32)", () => {
    const tensor = result.tensors.find((t) => t.id === "dense-0/activation-gradient")!;
    expect(renderExplainText(result, tensor, { width: 400 })).toContain(", per-tensor scale 2^");
    if (!parsed.ok) throw new Error("unreachable");
    const blocks = check({ ...parsed.spec, precision: { ...parsed.spec.precision, scaling: "block" } }, { ledger: true, everyFormat: true });
    const text = renderExplainText(blocks, blocks.tensors.find((t) => t.id === "dense-0/activation-gradient")!, { width: 400 });
    expect(text).toContain(", per-block scale factors (blocks of 32), headroom and footroom at the tensor scale 2^");
    expect(text).not.toContain("per-tensor scale");
  });

  it("gives the flushed and subnormal shares at one end of the horizon, so they never add to more than all elements", () => {
    // an invented scenario: a pollen-grain classifier over 30000 species trained until the loss is tiny, whose logit
    // gradient flushes most at the end and has most subnormal elements at the start
    const confident = parseSpec(
      [
        "name: pollen-species",
        "input: { features: 512 }",
        "training:",
        "  batch: 16",
        "  loss: { kind: cross-entropy, classes: 30000, reduction: sum }",
        "  horizon: { steps: 100000, final-loss: 0.0001, weight-growth: 3 }",
        "precision: { activations: binary16, weights: binary16, gradients: binary16 }",
        "layers:",
        "  - { type: dense, width: 1024, init: he-normal }",
        "  - relu",
        "  - { type: dense, width: 30000, init: { kind: normal, std: 0.05 } }",
      ].join("\n"),
      "pollen-species.yaml",
    );
    if (!confident.ok) throw new Error("the pollen spec does not parse");
    const judged = check(confident.spec, { lossScale: 32 });
    const tensor = judged.tensors.find((t) => t.id === "dense-2/activation-gradient")!;
    const risk = tensor.risks[0]!;
    // the worst of each share taken apart mixes the two ends: together more than every element (the case to avoid)
    expect(risk.worst.flushedFraction + risk.worst.subnormalFraction).toBeGreaterThan(1);
    const line = renderExplainText(judged, tensor, { width: 1000 }).split("\n").find((l) => l.startsWith("  binary16"))!;
    const [flushed, subnormal] = [...line.matchAll(/(?:flushed|subnormal) ([<>]?[\d.]+)%/g)].map((m) => Number(m[1]!.replace(/[<>]/, "")) / 100);
    // shares of one tensor's elements at one moment: flushed and subnormal are disjoint, so they add to at most 1
    expect(flushed! + subnormal!).toBeLessThanOrEqual(1.001);
    expect(line).toContain(risk.worst.flushAt === "end" ? "at the end of the horizon" : "at the start of training");
  });

  it("writes a running total that rounds to zero as 0.00, not -0.00", () => {
    const tensor = result.tensors.find((t) => t.id === "relu-1/activation")!;
    // an embedding multiplier then a norm that undoes it, leaving -1e-4 binades
    const ledger = [entry("table", 4.2901), entry("norm", -4.2902)];
    const rows = renderExplainText(result, { ...tensor, ledger }, { width: 400 }).split("\n").filter((l) => /^ +2 +norm/.test(l));
    expect(rows).toHaveLength(1);
    expect(rows[0]).toMatch(/-4\.29 +×0\.0511 +0\.00 /);
  });
});

describe("renderExplainText sources", () => {
  it("cites each source by number in the table and gives it in full below, however long", () => {
    const tensor = result.tensors.find((t) => t.id === "dense-0/activation-gradient")!;
    const ledger = tensor.ledger ?? [];
    expect(ledger.length).toBeGreaterThan(0);
    const text = renderExplainText(result, tensor, { width: 1000 });
    const distinct = [...new Set(ledger.map((e) => e.source))];
    distinct.forEach((source, i) => expect(text).toContain(`\n    [${i + 1}] ${source}\n`));
    const rows = text.split("\n").filter((line) => /^ +\d+ {2}/.test(line));
    expect(rows).toHaveLength(ledger.length);
    rows.forEach((row, i) => expect(row.trimEnd().endsWith(`[${distinct.indexOf(ledger[i]!.source) + 1}]`)).toBe(true));
  });
});

describe("renderExplainText total", () => {
  it("writes a product of factors and a start rms just below 1 as 2^0.00, not 2^-0.00", () => {
    const tensor = result.tensors.find((t) => t.id === "relu-1/activation")!;
    // a norm that undoes an embedding multiplier, then the finite-width median 0.998 (log2 -0.0029): the sum reads 0.00
    const ledger = [entry("table", 4), entry("norm", -4), entry("(profile)", Math.log2(0.998))];
    const start = { ...tensor.start, rms: 0.998 };
    const text = renderExplainText(result, { ...tensor, ledger, start }, { width: 400 });
    expect(text).toContain("The factors multiply to 2^0.00 = 0.998; the predicted rms at the start is 0.998 (2^0.00)");
    expect(text).not.toContain("2^-0.00");
  });
});

describe("renderExplainText: where the tensor is held", () => {
  it("names the formats that judge the loss when it is not the plan entry's (the loss is kept in binary32 here)", () => {
    const loss = result.tensors.find((t) => t.id === "loss/loss")!;
    const judged = loss.risks.filter((r) => r.judged).map((r) => r.format);
    expect(judged).not.toContain("e4m3");
    const header = renderExplainText(result, loss, { width: 400 }).split("\n")[1];
    expect(header).toBe(`  loss of loss (loss), shape [1], judged in ${judged.join(", ")} (the plan's activations are e4m3).`);
    // a tensor judged in its plan entry's format reads as before
    const weight = result.tensors.find((t) => t.id === "dense-0/weight")!;
    expect(renderExplainText(result, weight, { width: 400 }).split("\n")[1]).toBe("  weight of dense-0 (dense), shape [256, 256], held in the plan's weights (e4m3).");
  });
});

describe("renderExplainText: long rules", () => {
  it("gives a rule cut to the table's column in full under it, by row number, so its numbers are not lost", () => {
    const tensor = result.tensors.find((t) => t.id === "relu-1/activation")!;
    const long = "attention average: Σ_j p_j² + ρ·(1 − Σ_j p_j²) = 0.0695 with ρ = 0.0123 over 100.5 keys at the median draw";
    const ledger = [entry("short", 1), { ...entry("long", -1), rule: long }];
    const text = renderExplainText(result, { ...tensor, ledger }, { width: 400 });
    expect(text).toContain("  Rules cut above, in full:\n    2. " + long + "\n");
    expect(text).not.toContain("    1. r\n");
    // none cut, no list
    expect(renderExplainText(result, { ...tensor, ledger: [entry("short", 1)] }, { width: 400 })).not.toContain("Rules cut above");
  });
});
