import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check, type CheckAnswer } from "../../src/check.js";
import type { FormatName } from "../../src/formats/names.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { parseSpec } from "../../src/spec/index.js";
import { buildGraph } from "../../src/graph/index.js";
import { predictForCheck } from "../../src/magnitude/predict.js";
import { judgeScaled, scaledSubjects } from "../../src/risk/judge.js";
import { centreLeavesFindings } from "../../src/scale/pick.js";
import { mlpSpec } from "../../bench/generated-specs.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// The weighed pick (src/scale/pick.ts) is checked against the check itself: the spec judged at every scale of the
// window as a given loss scale, all tensors and operations, the findings that move with the scale counted here by
// their own rule (gradient tensors; the scaled loss and gradient sums). The rule of the pick is ours (README "Loss
// scale"); what it rests on: a scale costs nothing until it overflows (Micikevicius et al. 2018 §3.2).

function load(name: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${name}`, "utf8"), `specs/${name}`);
  if (!parsed.ok) throw new Error(`specs/${name} does not load`);
  return parsed.spec;
}

interface Counted {
  fails: number;
  atRisk: number;
  overflowSide: number;
  conditional: number;
}

const SCALED_OPERATIONS = ["loss-value-overflow", "gradient-sum-overflow", "gradient-sum-flush"];
const OVERFLOW = ["overflow", "saturation", "little-headroom", "loss-value-overflow", "gradient-sum-overflow"];

// the scaled loss counts in every format of the plan that holds it (activations, accumulate): the scale moves it there
// too; held in the activation format where the plan accumulates in a wider one it is conditional (README "Verdicts":
// at most at risk), and counts after every other finding
function counted(result: CheckAnswer, format: FormatName): Counted {
  const gradients = new Set(result.tensors.filter((t) => t.role === "activation-gradient" || t.role === "weight-gradient").map((t) => t.id));
  const scale = (f: FormatName) => (result.formats.find((x) => x.format === f)?.lossScale ?? result.lossScale).value;
  const findings = result.formats
    .flatMap((f) => f.findings)
    .filter((f) =>
      f.format === format
        ? f.source === "tensor" ? gradients.has(f.subject) : SCALED_OPERATIONS.includes(f.kind)
        : f.kind === "loss-value-overflow" && scale(f.format) === scale(format),
    );
  const plan = result.plan;
  const conditional = (f: (typeof findings)[number]) => f.kind === "loss-value-overflow" && f.format === plan.activations && plan.activations !== plan.accumulate;
  return {
    fails: findings.filter((f) => f.severity === "fails").length,
    atRisk: findings.filter((f) => f.severity === "at-risk").length,
    overflowSide: findings.filter((f) => OVERFLOW.includes(f.kind)).length,
    conditional: findings.filter(conditional).length,
  };
}

/** Every exponent of the answer's window, the spec judged there as a given scale. */
function everyScale(spec: NetworkSpec, plan: string | undefined, answer: NonNullable<CheckAnswer["lossScaleAnswer"]>): Map<number, Counted> {
  const out = new Map<number, Counted>();
  for (let k = answer.window.lowestLog2!; k <= answer.window.highestLog2!; k++) {
    out.set(k, counted(check(spec, { ...(plan === undefined ? {} : { plan }), lossScale: 2 ** k }), answer.format));
  }
  return out;
}

// fewer failing findings first (one decides the verdict), then fewer of a value too large (an overflow costs the step
// under a static scale, Micikevicius et al. 2018 §3.2; inside the window flushing is held under the tolerance), then
// fewer at risk; a conditional finding (the scaled loss in the activation format where the plan accumulates wider) only
// after all of these
const better = (a: Counted, b: Counted) => {
  const key = (c: Counted) => [c.fails, c.overflowSide - c.conditional, c.atRisk - c.conditional, c.conditional];
  const [x, y] = [key(a), key(b)];
  for (let i = 0; i < x.length; i++) if (x[i] !== y[i]) return x[i]! < y[i]!;
  return false;
};

describe("the loss-scale pick weighed against the findings it leaves", () => {
  it("deep-relu-glorot: the centre 2^17 leaves failing gradient findings, and the pick moves to the scale that leaves the fewest", () => {
    const spec = load("deep-relu-glorot.yaml");
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    expect(weighing).toBeDefined();
    const byScale = everyScale(spec, undefined, answer);
    const centre = byScale.get(weighing.centreLog2)!;
    const pick = answer.window.pickLog2!;
    // the counts the answer tells are those of the whole check at each scale
    expect(weighing.atCentre).toEqual(centre);
    expect(weighing.atPick).toEqual(byScale.get(pick));
    // no scale of the window leaves fewer than the pick
    for (const [k, found] of byScale) expect(better(found, weighing.atPick), `2^${k}`).toBe(false);
    // here the centre is not the best: the pick moved, and the check is judged at the new pick
    expect(better(weighing.atPick, centre)).toBe(true);
    expect(pick).not.toBe(weighing.centreLog2);
    expect(result.lossScale).toMatchObject({ value: 2 ** pick, origin: "recommended" });
    expect(counted(result, answer.format)).toEqual(weighing.atPick);
    // the pick keeps within the window
    expect(pick).toBeGreaterThanOrEqual(answer.window.lowestLog2!);
    expect(pick).toBeLessThanOrEqual(answer.window.highestLog2!);
    expect(answer.window.marginBelowOverflow).toBe(answer.window.highestLog2! - pick);
    expect(answer.window.marginAboveFlush).toBe(pick - answer.window.lowestLog2!);
    // the text says what the centre would leave and what the pick leaves
    const text = renderCheckText(result, { width: 1000 });
    expect(text).toContain(`Use a static loss scale of 2^${pick} = ${2 ** pick}`);
    expect(text).toContain(`alone gives 2^${weighing.centreLog2} = ${2 ** weighing.centreLog2}, which would leave ${centre.fails + centre.atRisk} findings (${centre.fails} failing, ${centre.atRisk} at risk`);
  });

  it("wide-classifier: the centre 2^14 overflows the scaled loss every step; the pick moves down to a scale that does not, at the price of a subnormal gradient", () => {
    const spec = load("wide-classifier.yaml");
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    const byScale = everyScale(spec, undefined, answer);
    const centre = byScale.get(weighing.centreLog2)!;
    const pick = answer.window.pickLog2!;
    expect(weighing.atCentre).toEqual(centre);
    expect(weighing.atPick).toEqual(byScale.get(pick));
    // the centre's one finding is the scaled loss overflowing binary16 (largest finite 65504, IEEE 754-2019 Table 3.5):
    // a loss near 10.9 times 2^14 exceeds it
    expect(centre.overflowSide).toBeGreaterThan(0);
    expect(result.hazards.some((h) => h.findings.some((f) => f.kind === "loss-value-overflow" && f.format === "binary16"))).toBe(false);
    // a scale of the window keeps the loss in range with as many findings (a gradient subnormal): the pick takes it
    expect(weighing.atPick.overflowSide).toBe(0);
    expect(pick).toBeLessThan(weighing.centreLog2);
    for (const [k, found] of byScale) expect(better(found, weighing.atPick), `2^${k}`).toBe(false);
    expect(answer.sentences.join(" ")).toContain("the fewest failing among the window's scales, then the fewest of a value too large, then the fewest in all");
  });

  it("a failing finding is never kept to avoid one at risk of the overflow side: the verdict is the best the window allows", () => {
    // invented: a catalogue recommender, a 2,000,000-row item table and 1,000,000 classes, 8 workers; at the window's low
    // end a gradient flushes past the failing share, while the scaled loss overflows binary16 (largest finite 65504,
    // IEEE 754-2019 Table 3.5) at risk only, "if kept in the activation format"
    const text = [
      "name: seed-catalogue",
      "input: { tokens: 50 }",
      "training:",
      "  batch: 512",
      "  workers: 8",
      "  loss: { kind: cross-entropy, classes: 1000000 }",
      "  optimizer: { kind: adam, learning-rate: 0.001 }",
      "  horizon: { steps: 50000, final-loss: 6 }",
      "precision: { activations: binary16 }",
      "layers:",
      "  - { type: embedding, vocabulary: 2000000, width: 64 }",
      "  - { type: dense, width: 256, init: he-normal }",
      "  - relu",
      "  - { type: dense, width: 1000000 }",
    ].join("\n");
    const parsed = parseSpec(text, "seed-catalogue.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const spec = parsed.spec;
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    const byScale = everyScale(spec, undefined, answer);
    // some scale of the window leaves no failing finding, and the low end leaves one: the pick is among the former
    expect([...byScale.values()].some((c) => c.fails === 0)).toBe(true);
    expect([...byScale.values()].some((c) => c.fails > 0)).toBe(true);
    expect(weighing.atPick.fails).toBe(0);
    for (const [k, found] of byScale) expect(better(found, weighing.atPick), `2^${k}`).toBe(false);
    expect(result.verdict).not.toBe("fails");
  });

  it("a plan with a loss scale of its own: the answer's pick is weighed, the check stays at the given scale", () => {
    // the spec built for the subnormal rule: its plan's scale 1 leaves gradients whose subnormal band costs more than
    // bfloat16's rounding (transformer-encoder's 2^10 did this under a rule counting subnormal elements)
    const spec = load("../test/fixtures/specs/subnormal-noise.yaml");
    const result = check(spec, { plan: "plain-binary16" });
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    expect(result.lossScale).toMatchObject({ value: 1, origin: "plan" });
    expect(result.formats.find((f) => f.format === "binary16")!.findings.some((f) => f.kind === "subnormal-values")).toBe(true);
    const byScale = everyScale(spec, "plain-binary16", answer);
    const centre = byScale.get(weighing.centreLog2)!;
    expect(weighing.atCentre).toEqual(centre);
    expect(weighing.atPick).toEqual(byScale.get(answer.window.pickLog2!));
    // no scale of the window, the centre among them, leaves fewer findings than the pick
    for (const [k, found] of byScale) expect(better(found, weighing.atPick), `2^${k}`).toBe(false);
  });

  it("a spec whose centre is 1 and leaves no such finding keeps the centre, unweighed", () => {
    const result = check(load("../test/fixtures/specs/hazards/loss-sum-reduction.yaml"));
    const answer = result.lossScaleAnswer!;
    expect(answer.window.pickLog2).toBe(0);
    expect(answer.weighing).toBeUndefined();
    expect(answer.needed).toBe(false);
    expect(answer.sentences[0]).toContain("1 (no scaling), the window's centre, is the pick: it leaves the most room on both sides");
  });
});

// A small network whose gradients sit near 1: the window reaches far below 1, so its centre does too. The input's
// scale moves every gradient (dense layers are linear in their input, mean-squared error's gradient in the output).
function tiny(inputScale: number): NetworkSpec {
  const text = `input: { features: 4, scale: ${inputScale} }
training:
  batch: 2
  loss: { kind: mean-squared-error }
precision: { activations: binary16, weights: binary16, gradients: binary16, optimizer-states: binary32, master-weights: binary32, accumulate: binary32 }
layers:
  - { type: dense, width: 4 }
  - relu
  - { type: dense, width: 1 }
`;
  const parsed = parseSpec(text, "tiny.yaml");
  if (!parsed.ok) throw new Error("the tiny spec does not load");
  return parsed.spec;
}

describe("1 (no scaling) in the window, weighed like the other scales", () => {
  it("1 lies in the window but leaves gradients whose subnormals cost too much, so the answer does not say no scale is needed", () => {
    // the spec built for the subnormal rule, without its plan's own scale (deep-relu-he did this under a rule counting
    // subnormal elements; its hidden gradients' subnormal noise at 1 is under bfloat16's rounding noise)
    const built = load("../test/fixtures/specs/subnormal-noise.yaml");
    const spec: NetworkSpec = { ...built, precision: { ...built.precision, lossScale: undefined } };
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    expect(answer.window.unscaledFits).toBe(true);
    // what running unscaled leaves, from the whole check judged at a given scale of 1
    const unscaled = counted(check(spec, { lossScale: 1 }), answer.format);
    expect(unscaled.atRisk + unscaled.fails).toBeGreaterThan(0);
    expect(answer.weighing!.unscaled).toEqual(unscaled);
    expect(better(answer.weighing!.atPick, unscaled)).toBe(true);
    expect(answer.needed).toBe(true);
    const said = answer.sentences.join(" ");
    expect(said).not.toContain("need no loss scale");
    expect(said).toContain(`Use a static loss scale of 2^${answer.window.pickLog2}`);
    expect(said).toContain(`1 (no scaling) lies in the window too, but would leave ${unscaled.atRisk + unscaled.fails} findings`);
    // the header under the plan says so too
    expect(renderCheckText(result, { width: 1000 })).toContain(`1 (no scaling) lies in the window too, but would leave ${unscaled.atRisk + unscaled.fails} findings`);
  });

  it("a tiny network whose window's centre lies below 1: 1 leaves as few findings and keeps the margin, so 1 is the pick", () => {
    const spec = tiny(1);
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    expect(weighing.centreLog2).toBeLessThan(0);
    expect(answer.window.pickLog2).toBe(0);
    expect(result.lossScale).toMatchObject({ value: 1, origin: "recommended" });
    // 1 leaves no more than the centre, each judged as a given scale by the whole check
    const atOne = counted(check(spec, { lossScale: 1 }), answer.format);
    const atCentre = counted(check(spec, { lossScale: 2 ** weighing.centreLog2 }), answer.format);
    expect(better(atCentre, atOne)).toBe(false);
    expect(answer.window.highestLog2!).toBeGreaterThanOrEqual(answer.options.marginBinades);
    expect(answer.needed).toBe(false);
    expect(answer.sentences[0]).toContain("need no loss scale");
    expect(answer.sentences[0]).toContain("1 (no scaling) is the pick: it leaves as few findings");
  });

  it("a pick below 1 says why: 1 would leave findings of a value too large that the pick does not", () => {
    const spec = tiny(30);
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    const pick = answer.window.pickLog2!;
    expect(answer.window.unscaledFits).toBe(true);
    expect(pick).toBeLessThan(0);
    const atOne = counted(check(spec, { lossScale: 1 }), answer.format);
    const atPick = counted(check(spec, { lossScale: 2 ** pick }), answer.format);
    expect(better(atPick, atOne)).toBe(true);
    expect(answer.weighing!.unscaled).toEqual(atOne);
    expect(answer.needed).toBe(true);
    const said = answer.sentences.join(" ");
    expect(said).not.toContain("need no loss scale");
    expect(said).toContain(`1 (no scaling) lies in the window too, but would leave ${atOne.fails + atOne.atRisk} findings`);
  });
});

describe("a centre's findings told before the judgement", () => {
  // check weighs the pick before its judgement where centreLeavesFindings says the window's centre leaves a finding
  // (counting only the tensors setting the window's edges and the scaled loss): it must never say so of a centre that
  // leaves none, which the whole check at that scale tells
  const cases: [string, boolean][] = [
    ["deep-relu-glorot.yaml", true],
    ["wide-classifier.yaml", true],
    ["cnn-batchnorm.yaml", false],
    ["deep-relu-he.yaml", false],
  ];
  for (const [name, told] of cases) {
    it(`${name}: ${told ? "a finding at the centre, told by its edges' tensors or the scaled loss" : "no finding at the centre, and none told"}`, () => {
      const spec = load(name);
      const answer = check(spec).lossScaleAnswer!;
      const centre = answer.weighing?.centreLog2 ?? answer.window.pickLog2!;
      const built = buildGraph(spec);
      if (!built.ok) throw new Error(`${name} does not build`);
      const subjects = scaledSubjects(spec, predictForCheck(built.graph, spec));
      const probed = centreLeavesFindings(subjects, answer.format, { ...answer.window, pickLog2: centre }, {});
      const whole = counted(check(spec, { lossScale: 2 ** centre }), answer.format);
      expect(whole.fails + whole.atRisk > 0, "the whole check's count at the centre").toBe(told);
      expect(probed).toBe(told);
    });
  }
});

describe("a pick weighed before the judgement, judged at its largest scale first", () => {
  it("the benchmarks' 1,000-layer spec at weight growth 1: the centre flushes gradients only, and the largest scale keeping the margin leaves none and is the pick", () => {
    // that scale is judged whole as check judges its pick (src/check.ts weighedFirst), and that judgement is check's
    const spec = mlpSpec(1);
    spec.training = { ...spec.training, horizon: { ...spec.training.horizon, weightGrowth: 1 } };
    const result = check(spec);
    const answer = result.lossScaleAnswer!;
    const weighing = answer.weighing!;
    const pick = answer.window.pickLog2!;
    expect(weighing.atCentre.overflowSide).toBe(0);
    expect(weighing.atCentre.atRisk).toBeGreaterThan(0);
    expect(pick).toBe(answer.window.highestLog2! - answer.options.marginBinades);
    expect(weighing.atCentre).toEqual(counted(check(spec, { lossScale: 2 ** weighing.centreLog2 }), answer.format));
    const atPick = check(spec, { lossScale: 2 ** pick });
    expect(weighing.atPick).toEqual(counted(atPick, answer.format));
    expect(counted(result, answer.format)).toEqual(weighing.atPick);
    expect(result.lossScale).toMatchObject({ value: 2 ** pick, origin: "recommended" });
    // every finding of every format as judged at the pick given as a scale
    expect(result.formats.map((f) => f.findings)).toEqual(atPick.formats.map((f) => f.findings));
  });
});

// invented: a kiln-drift regressor averaged over 4 workers, so every weight gradient's sum across them is judged for
// overflow and for the share a division by 4 flushes (the bounds that stand in for those numbers below half a
// threshold, src/risk/hazards.ts, meet both sides of the thresholds over scales from 2^-16 to 2^16)
function kilnDrift(): NetworkSpec {
  const layers = Array.from({ length: 12 }, () => "  - { type: dense, width: 96, init: he-normal }\n  - relu").join("\n");
  const text = `name: kiln-drift
input: { features: 96 }
training:
  batch: 16
  workers: 4
  worker-gradients: average
  accumulation-steps: 2
  loss: { kind: mean-squared-error }
  horizon: { steps: 2000, final-loss: 0.05 }
precision: { activations: binary16, weights: binary16, gradients: binary16, optimizer-states: binary32, master-weights: binary32, accumulate: binary32 }
layers:
${layers}
  - { type: dense, width: 1 }
`;
  const parsed = parseSpec(text, "kiln-drift.yaml");
  if (!parsed.ok) throw new Error("the kiln-drift spec does not load");
  return parsed.spec;
}

describe("the scales the pick weighs are judged for their counts alone", () => {
  // the kiln-drift network's scaled subjects, every one in order, and a visitor that counts as src/scale/pick.ts does
  function setup() {
    const spec = kilnDrift();
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("the kiln-drift graph does not build");
    const subjects = scaledSubjects(spec, predictForCheck(built.graph, spec));
    const order = Array.from({ length: subjects.sites.length + subjects.tensors.length }, (_, i) => i);
    return { spec, subjects, order, kinds: new Set<string>() };
  }
  function counter(found: Counted, kinds: Set<string>) {
    return (f: { kind: string; severity: string }, _i: number, conditional: boolean): boolean => {
      if (f.kind === "accumulation-error") return true;
      kinds.add(f.kind);
      if (f.severity === "fails") found.fails++;
      else found.atRisk++;
      if (OVERFLOW.includes(f.kind)) found.overflowSide++;
      if (conditional) found.conditional++;
      return true;
    };
  }

  it("at every scale from 2^-16 to 2^16, judgeScaled counts what the whole check judged at that scale finds", () => {
    const { spec, subjects, order, kinds } = setup();
    for (let k = -16; k <= 16; k += 2) {
      const found: Counted = { fails: 0, atRisk: 0, overflowSide: 0, conditional: 0 };
      judgeScaled(subjects, "binary16", 2 ** k, undefined, order, counter(found, kinds));
      expect(found, `2^${k}`).toEqual(counted(check(spec, { lossScale: 2 ** k }), "binary16"));
    }
    // both sides of the gradient sums' thresholds were met: findings of both kinds at some scale
    expect(kinds).toContain("gradient-sum-overflow");
    expect(kinds).toContain("gradient-sum-flush");
  });

  it("from 2^16 down to 2^-16 on the same subjects, with a visitor reading kinds and severities alone, the counts are the whole check's", () => {
    // judged from the largest scale down, a sum's overflow side shown quiet at one scale is taken as quiet at the next
    // (HazardContext.overflowQuietShown), and a visitor reading kinds alone gets shared records: neither may move a count
    const { spec, subjects, order, kinds } = setup();
    for (let k = 16; k >= -16; k -= 2) {
      const found: Counted = { fails: 0, atRisk: 0, overflowSide: 0, conditional: 0 };
      judgeScaled(subjects, "binary16", 2 ** k, undefined, order, counter(found, kinds), true);
      expect(found, `2^${k}`).toEqual(counted(check(spec, { lossScale: 2 ** k }), "binary16"));
    }
    expect(kinds).toContain("gradient-sum-overflow");
    expect(kinds).toContain("gradient-sum-flush");
  });
});
