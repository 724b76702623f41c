import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { describeLossScale, describePlan, HAZARD_GROUP_LIMIT, HAZARD_ROW_LIMIT, noneAtRisk, renderCheckText, renderHazards, wrap } from "../../src/report/check-text.js";
import { formatProbability } from "../../src/report/number.js";
import type { HazardCheck } from "../../src/risk/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

function example(file: string, edit: (spec: NetworkSpec) => NetworkSpec = (spec) => spec): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
  if (!parsed.ok) throw new Error(`specs/${file} does not parse`);
  return edit(parsed.spec);
}

describe("the optimizer section names where updates are added", () => {
  it("says 'the stored <format> weights' when the plan keeps no master copy", () => {
    const spec = example("deep-relu-he.yaml", (s) => ({ ...s, precision: { ...s.precision, masterWeights: "none" } }));
    const text = renderCheckText(check(spec), { width: 200 });
    expect(text).toContain(`updates are added to the stored ${spec.precision.weights} weights`);
  });

  it("says 'a master copy in <format>' when the plan keeps one", () => {
    const spec = example("deep-relu-he.yaml");
    expect(spec.precision.masterWeights).toBe("binary32");
    expect(renderCheckText(check(spec), { width: 200 })).toContain("updates are added to a master copy in binary32");
  });
});

describe("the verdict per format counts in words", () => {
  it("says '1 more kind of finding' and '1 tensor' in the singular", () => {
    const result = check(example("deep-relu-he.yaml"));
    const first = result.formats[0]!;
    const reasons = ["one.", "two.", "three.", "four.", "five.", "six."];
    const edited = { ...result, formats: [{ ...first, reasons, tensorsJudged: 1 }, ...result.formats.slice(1)] };
    const text = renderCheckText(edited, { width: 400 });
    expect(text).toContain("    - and 1 more kind of finding (--json lists every one).\n");
    expect(text).toMatch(new RegExp(`\\n  ${first.format} .*; 1 tensor\\n`));
    const seven = { ...result, formats: [{ ...first, reasons: [...reasons, "seven."] }, ...result.formats.slice(1)] };
    expect(renderCheckText(seven, { width: 400 })).toContain("    - and 2 more kinds of finding");
  });
});

describe("the count under the tables", () => {
  it("says how many of the rows fail, not only that they are at risk", () => {
    const result = check(example("deep-sigmoid.yaml"));
    const judged = result.tensors.flatMap((t) => t.risks.filter((r) => r.judged));
    const failing = judged.filter((r) => r.verdict === "fails").length;
    const flagged = judged.filter((r) => r.verdict !== "fits").length;
    expect(failing).toBeGreaterThan(0);
    expect(renderCheckText(result, { width: 400 })).toContain(`  ${flagged} of ${judged.length} at risk or failing (${failing} fail), the first 30 shown`);
    const fitting = check(example("cnn-batchnorm.yaml"));
    expect(renderCheckText(fitting, { width: 400 })).not.toContain("or failing");
  });
});

describe("the tensor table's legend", () => {
  it("is printed under a table, and not after 'none of the tensors is at risk'", () => {
    const legend = "rms and max are after the loss scale";
    const none = renderCheckText(check(example("cnn-batchnorm.yaml")), { width: 400 });
    expect(none).toContain("none of the 79 tensors is at risk.\n\nOperation hazards");
    expect(none).not.toContain(legend);
    expect(renderCheckText(check(example("deep-sigmoid.yaml")), { width: 400 })).toContain(legend);
  });

  it("says headroom is after the per-tensor scale factor when an 8-bit format with scale factors is in the table", () => {
    // e4m3's largest finite value is 448 (OCP 8-bit spec, Table 1): a tensor of max 12 scaled by 2^5 has log2(448/384)
    // = 0.22 binades of headroom, not log2(448/12) = 5.2; the legend must say which one the column holds
    const scaled = "after the per-tensor scale factor of an 8-bit format (rms and max are before it)";
    const text = renderCheckText(check(example("transformer-encoder.yaml"), { plan: "eight-bit-trial" }), { all: true, width: 400 });
    expect(text).toContain(scaled);
    expect(renderCheckText(check(example("deep-sigmoid.yaml")), { width: 400 })).not.toContain(scaled);
  });
});

describe("the tensor table shows what a subnormal finding judged", () => {
  it("has a subnormal noise column holding the number the finding compared with its limit", () => {
    // deep-sigmoid's binary16 plan: gradients of the upper blocks at risk by their subnormal noise alone (the
    // transformer-encoder's last query gradient was, until the attention's pair width followed what one sequence fills)
    const result = check(example("deep-sigmoid.yaml"), { plan: "mixed-binary16" });
    const flagged = result.tensors.flatMap((t) =>
      t.risks.filter((r) => r.verdict === "at-risk" && r.findings.length === 1 && r.findings[0]!.kind === "subnormal-values").map((r) => ({ tensor: t, risk: r })),
    );
    expect(flagged.length).toBeGreaterThan(0);
    const text = renderCheckText(result, { width: 400, all: true });
    const header = text.split("\n").find((line) => line.includes("overflow/step"))!;
    expect(header).toMatch(/flushed +subnormal noise +overflow\/step/);
    const { tensor, risk } = flagged[0]!;
    const noise = risk.findings[0]!.value;
    const row = text.split("\n").find((line) => line.includes(`${tensor.layer} `) && line.includes(` ${tensor.role} `) && line.includes("at risk"))!;
    expect(row, `${tensor.id}'s row`).toBeDefined();
    expect(row.split(/ {2,}/)).toContain(formatProbability(noise));
    expect(text).toContain("subnormal noise the share of the squared norm that rounding the subnormal elements adds");
  });
});

describe("hazard lines name the kind of their site", () => {
  it("labels the epsilon line 'optimizer epsilon' and the second-moment line 'optimizer second moment'", () => {
    const lines = renderCheckText(check(example("deep-relu-he.yaml")), { all: true, width: 400 }).split("\n");
    const epsilon = lines.filter((line) => line.includes("The optimizer epsilon"));
    const moment = lines.filter((line) => line.includes("The second moment (1 − β2)·g²"));
    expect(epsilon.length).toBeGreaterThan(0);
    expect(moment.length).toBeGreaterThan(0);
    for (const line of epsilon) expect(line).toContain("optimizer epsilon,");
    for (const line of moment) expect(line).toContain("optimizer second moment,");
  });
});

describe("binary16 optimizer states: each problem is told once", () => {
  // 1e-8 is below binary16's flush bound 2^-25 = 2.98e-8 and rounds to zero (IEEE 754-2019, binary16 subnormals);
  // (1 − β2)·g² flushes for |g| below √(2^-25/0.001) = 0.00546 (DESIGN.md §5 item 5)
  const fixture = "test/fixtures/specs/hazards/adam-epsilon-binary16.yaml";
  const spec = (): NetworkSpec => {
    const parsed = parseSpec(readFileSync(fixture, "utf8"), fixture);
    if (!parsed.ok) throw new Error(`${fixture} does not parse`);
    return parsed.spec;
  };
  const section = (text: string, from: string, to: string) => text.slice(text.indexOf(from), text.indexOf(to));

  it("the operation hazards tell the epsilon and the second moment; the optimizer section points there and gives the remedies", () => {
    const text = renderCheckText(check(spec()), { width: 100 });
    expect(section(text, "Optimizer adam", "Tensors at risk")).toBe(
      [
        "Optimizer adam: fails",
        "  updates are added to a master copy in binary32; epsilon 1e-8 is held as 0 in binary16.",
        "  - the states in binary16: see optimizer second moment and optimizer epsilon under Operation",
        "    hazards.",
        "  1. remedy: hold the optimizer states in binary32 instead of binary16 (optimizer-states: binary32",
        "     in the plan): less than 1e-6% of the second moments flush at the first step instead of 38.0%",
        "     (+4 bytes per parameter for the two states)",
        "  2. remedy: compute the update in binary32, or raise epsilon to at least 5.96e-8 (2^-24;",
        "     training.optimizer.epsilon: 5.96e-8); either alone leaves 38.0% of the second moments flushed,",
        "     where the update becomes m̂/ε instead of m̂/√v̂: hold the states in binary32 (above), which",
        "     keeps both",
        "",
        "",
      ].join("\n"),
    );
    expect(section(text, "Operation hazards at risk", "Assumptions")).toBe(
      [
        "Operation hazards at risk",
        "  fails  optimizer epsilon, dense-0, binary16: The optimizer epsilon 1e-8 rounds to zero in",
        "      binary16, and about 6370 second-moment elements of the weight gradients are zero per step at",
        "      the start of training (most in dense-0/weight-gradient, about 6230), so the update divides by",
        "      zero there.",
        "  fails  optimizer second moment, dense-0, binary16: The second moment (1 − β2)·g² of dense-0",
        "      flushes in binary16 for gradients below 0.00546: 38% of its elements (fails).",
        "",
        "",
      ].join("\n"),
    );
    // the verdict and its top reasons still name both
    expect(section(text, "Verdict fails", "Loss scale")).toBe(
      [
        "Verdict fails",
        "",
        "Verdict per format",
        "  binary16  fails    holds activations, weights, gradients, optimizer states; 16 tensors",
        "    - The optimizer epsilon 1e-8 rounds to zero in binary16, and about 6370 second-moment elements",
        "      of the weight gradients are zero per step at the start of training (most in",
        "      dense-0/weight-gradient, about 6230), so the update divides by zero there.",
        "    - The second moment (1 − β2)·g² of dense-0 flushes in binary16 for gradients below 0.00546: 38%",
        "      of its elements (fails).",
        "  binary32  fits     holds accumulation; 1 tensor",
        "",
        "",
      ].join("\n"),
    );
  });

  it("the JSON keeps the sentences in hazards[] and says which the optimizer check leaves to them", async () => {
    const { renderCheckJson } = await import("../../src/report/check-json.js");
    const json = JSON.parse(renderCheckJson(check(spec())));
    expect(json.verdict).toBe("fails");
    expect(json.optimizer.verdict).toBe("fails");
    expect(json.optimizer.reasons).toEqual([]);
    expect(json.optimizer.reportedAsHazards).toEqual(["optimizer-second-moment", "optimizer-constant"]);
    expect(json.optimizer.remedies).toHaveLength(2);
    const findings = (kind: string) => json.hazards.filter((h: { kind: string }) => h.kind === kind).flatMap((h: { findings: unknown[] }) => h.findings);
    expect(findings("optimizer-constant").map((f: { kind: string; severity: string; format: string }) => [f.kind, f.severity, f.format])).toEqual([
      ["optimizer-epsilon-flushed", "fails", "binary16"],
    ]);
    expect(findings("optimizer-second-moment").map((f: { kind: string; severity: string; format: string }) => [f.kind, f.severity, f.format])).toEqual([
      ["second-moment-flushed", "fails", "binary16"],
    ]);
  });
});

describe("the operation hazards of a deep network (renderHazards)", () => {
  // 30 accumulations at risk in the network's order, then two failing loss-value checks
  const hazard = (layer: string, verdict: "at-risk" | "fails", kind: "accumulation" | "loss-value"): HazardCheck => ({
    kind,
    layer,
    detail: "",
    guarded: false,
    terms: 1024,
    input: { elements: 1, zeroFraction: 0, shape: "constant", rms: 1, log2Spread: 0 },
    origin: "prediction",
    evaluations: [
      { format: "binary16", heldIn: "accumulate", measure: "relative-error", value: 0.0156, criticalLevel: null, verdict, at: "start", sentence: `${layer} sentence.` },
    ],
    findings: [],
  });
  const hazards = [
    ...Array.from({ length: 30 }, (_, i) => hazard(`block-${i}`, "at-risk", "accumulation")),
    hazard("loss-a", "fails", "loss-value"),
    hazard("loss-b", "fails", "loss-value"),
  ];

  it("shows failing checks first, at most HAZARD_GROUP_LIMIT of one kind, format and verdict, and says how many there are", () => {
    const text = renderHazards(hazards, false, 100);
    const lines = text.split("\n").filter((line) => /^ {2}(fails|at risk) {2}/.test(line));
    expect(lines.length).toBe(2 + HAZARD_GROUP_LIMIT);
    expect(lines.length).toBeLessThanOrEqual(HAZARD_ROW_LIMIT);
    expect(lines[0]).toContain("loss-a");
    expect(lines[1]).toContain("loss-b");
    // the network's order within a group
    expect(lines[2]).toContain("block-0,");
    expect(lines[4]).toContain("block-2,");
    expect(text).toContain(`      and ${30 - HAZARD_GROUP_LIMIT} more accumulation checks in binary16 likewise.`);
    expect(text.replace(/\n +/g, " ")).toContain(
      `32 operation checks at risk or failing (2 fail), ${2 + HAZARD_GROUP_LIMIT} shown (failing first, at most ${HAZARD_GROUP_LIMIT} of a kind); --all lists every one.`,
    );
  });

  it("caps the lines at HAZARD_ROW_LIMIT over many kinds", () => {
    const kinds = ["accumulation", "loss-value"] as const;
    const many = Array.from({ length: 40 }, (_, i) => hazard(`layer-${i}`, "at-risk", kinds[i % 2] as "accumulation" | "loss-value"));
    for (const [i, h] of many.entries()) (h.evaluations[0] as { format: string }).format = ["binary16", "bfloat16", "e4m3", "e5m2", "binary32"][i % 5]!;
    const lines = renderHazards(many, false, 100).split("\n").filter((line) => /^ {2}(fails|at risk) {2}/.test(line));
    expect(lines.length).toBe(HAZARD_ROW_LIMIT);
  });

  it("shows every one with --all, in the network's order", () => {
    const lines = renderHazards(hazards, true, 100).split("\n").filter((line) => /^ {2}(fails|at risk) {2}/.test(line));
    expect(lines.length).toBe(32);
    expect(lines[0]).toContain("block-0,");
    expect(lines[31]).toContain("loss-b");
  });

  it("needs no summary line when every one is shown", () => {
    expect(renderHazards(hazards.slice(0, HAZARD_GROUP_LIMIT), false, 100)).not.toContain("operation checks at risk");
    expect(renderHazards(hazards.slice(0, HAZARD_GROUP_LIMIT), false, 100)).not.toContain("likewise");
    // one over the limit: shown whole, not "and 1 more"
    expect(renderHazards(hazards.slice(0, HAZARD_GROUP_LIMIT + 1), false, 100)).not.toContain("likewise");
  });
});

describe("wrap", () => {
  it("keeps lines within the width when a head and the first word do not fit together", () => {
    const head = "  at risk  accumulation, repeat-1.0.use-0.residual-0.attention-1, binary16: ";
    const text = wrap("repeat-1.0.use-0.residual-0.attention-1 accumulates 513 terms in binary16.", 80, head, "      ");
    for (const line of text.trimEnd().split("\n")) expect(line.length).toBeLessThanOrEqual(80);
    expect(text.split("\n")[0]).toBe(head.trimEnd());
    expect(text).toContain("      repeat-1.0.use-0.residual-0.attention-1 accumulates 513 terms in binary16.");
  });

  it("keeps the first word beside a head that leaves room for it", () => {
    expect(wrap("one two three", 80, "  - ", "    ")).toBe("  - one two three\n");
  });
});

describe("the loss-scale line under the plan", () => {
  const window = { format: "binary16" as const, lowestLog2: -16, highestLog2: 16, pickLog2: 0, empty: false, upperEdgeSetBy: "d/weight-gradient", lowerEdgeSetBy: "d/activation-gradient" };
  it("does not add '1 (no scaling) lies in the window too' when the pick is 2^0 = 1 itself", () => {
    const line = describeLossScale({ value: 1, origin: "recommended", window });
    expect(line).toBe(
      "loss scale: none in the plan; judged with the recommended 2^0 = 1, inside the window 2^-16 to 2^16 (below it d/activation-gradient flushes; above it d/weight-gradient overflows).",
    );
    expect(describeLossScale({ value: 512, origin: "recommended", window: { ...window, pickLog2: 9 } })).toContain("overflows); 1 (no scaling) lies in the window too.");
  });
  it("writes a given power of two as 2^k, with its value only where that reads plainly", () => {
    expect(describeLossScale({ value: 2 ** 30, origin: "option" })).toBe("loss scale: 2^30 (from the command line).");
    expect(describeLossScale({ value: 1024, origin: "plan" })).toBe("loss scale: 2^10 = 1024 (from the plan).");
    expect(describeLossScale({ value: 1, origin: "option" })).toBe("loss scale: 1 (from the command line).");
  });
  it("writes no empty parentheses when no tensor sets either edge", () => {
    const line = describeLossScale({ value: 512, origin: "recommended", window: { ...window, lowestLog2: 1, pickLog2: 9, upperEdgeSetBy: null, lowerEdgeSetBy: null } });
    expect(line).toBe("loss scale: none in the plan; judged with the recommended 2^9 = 512, inside the window 2^1 to 2^16.");
  });
});

describe("the optimizer line's epsilon", () => {
  it("writes epsilon 1e-6 as the other numbers are written, not JavaScript's 0.000001", () => {
    // bfloat16 keeps 8 significant bits: 1e-6 = 1.048576·2^-20 rounds to 134/128·2^-20 = 9.98377e-7 (IEEE-style RNE)
    const parsed = parseSpec(
      [
        "input: { features: 16 }",
        "training: { batch: 8, loss: { kind: cross-entropy, classes: 4 }, optimizer: { kind: adam, learning-rate: 1.0e-3, epsilon: 1.0e-6 } }",
        "precision: { activations: bfloat16, optimizer-states: bfloat16 }",
        "layers: [{ type: dense, width: 4 }]",
      ].join("\n"),
      "eps.yaml",
    );
    if (!parsed.ok) throw new Error("does not parse");
    const text = renderCheckText(check(parsed.spec), { width: 400 });
    expect(text).toContain("epsilon 1e-6 is held as 9.98e-7 in bfloat16.");
    expect(text).not.toContain("0.000001");
  });
});

describe("the count of a section with nothing at risk", () => {
  // an invented 8-bit plan judged in bfloat16 alone: only the loss value is an operation check held in bfloat16
  const text = [
    "name: parcel-sorter",
    "input: { features: 64 }",
    "training: { batch: 32, loss: { kind: mean-squared-error }, optimizer: { kind: momentum, learning-rate: 0.05 } }",
    "precision: { activations: e4m3, weights: e4m3, gradients: e5m2 }",
    "layers:",
    "  - { type: dense, width: 12, init: he-normal }",
  ].join("\n");

  it("says 'the 1 operation check is not at risk', not 'none of the 1 operation checks'", () => {
    const parsed = parseSpec(text, "parcel-sorter.yaml");
    if (!parsed.ok) throw new Error("the inline spec does not parse");
    const result = check(parsed.spec, { formats: ["bfloat16"] });
    expect(result.hazards.reduce((n, h) => n + h.evaluations.length, 0)).toBe(1);
    const out = renderCheckText(result, { width: 200 });
    expect(out).toContain("  the 1 operation check is not at risk.\n");
    expect(out).not.toContain("none of the 1 ");
  });

  it("keeps the plural form for several", () => {
    expect(noneAtRisk(8, "operation check")).toBe("none of the 8 operation checks is at risk.");
    expect(noneAtRisk(1, "tensor")).toBe("the 1 tensor is not at risk.");
  });
});

describe("the plan line names the conversion settings", () => {
  const base = {
    name: "eight",
    activations: "e4m3",
    weights: "e4m3",
    gradients: "e5m2",
    optimizerStates: "binary32",
    masterWeights: "binary32",
    accumulate: "binary32",
    overflow: "saturate",
    flushSubnormals: false,
    scaling: "tensor",
  } as const;

  it("tells 8-bit plans that differ only in scale factors or overflow mode apart (OCP 8-bit specification: saturating and non-saturating conversions)", () => {
    const lines = new Set(
      (["none", "tensor", "block"] as const).flatMap((scaling) =>
        (["saturate", "infinity-or-nan"] as const).map((overflow) => describePlan({ ...base, scaling, overflow })),
      ),
    );
    expect(lines.size).toBe(6);
    expect(describePlan(base)).toMatch(/; 8-bit with per-tensor scale factors, saturating on overflow$/);
    expect(describePlan({ ...base, scaling: "none", overflow: "infinity-or-nan" })).toMatch(/; 8-bit without scale factors, infinity or NaN on overflow$/);
  });

  it("says when subnormals are flushed, and adds nothing to a plan with neither", () => {
    const bfloat = { ...base, activations: "bfloat16", weights: "bfloat16", gradients: "bfloat16", scaling: "none" } as const;
    expect(describePlan({ ...bfloat, flushSubnormals: true })).toMatch(/accumulation binary32; subnormals flushed to zero$/);
    expect(describePlan(bfloat)).toMatch(/accumulation binary32$/);
  });
});

describe("the overall verdict line says where a verdict no format has comes from", () => {
  // an invented deep, narrow bfloat16 network with no master copy: Adam's updates fall below half an ulp of the weights
  const text = [
    "name: meltwater",
    "input: { features: 12 }",
    "training: { batch: 32, loss: { kind: mean-squared-error }, optimizer: { kind: adam, learning-rate: 1.0e-4 } }",
    "precision: { activations: bfloat16, master-weights: none }",
    "layers: [{ type: dense, width: 24, init: glorot-normal }, tanh, { type: dense, width: 1 }]",
  ].join("\n");

  it("names the optimizer check when every format fits and the optimizer fails (README, Verdicts: the worst of the three)", () => {
    const parsed = parseSpec(text, "meltwater.yaml");
    if (!parsed.ok) throw new Error("the inline spec does not parse");
    const result = check(parsed.spec);
    expect(result.formats.every((f) => f.verdict === "fits")).toBe(true);
    expect(result.verdict).toBe("fails");
    expect(renderCheckText(result, { width: 200 })).toContain("\nVerdict fails (from the optimizer check; see below)\n");
  });

  it("adds nothing when a format's verdict is the overall one", () => {
    const out = renderCheckText(check(example("cnn-batchnorm.yaml")), { width: 200 });
    expect(out).toContain("\nVerdict at risk\n");
  });
});
