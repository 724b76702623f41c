/**
 * Precision plans side by side: which ones train safely, what breaks first in the others, and what each costs
 * in bytes per parameter and per activation element. The cheapest plan that trains safely ranks first.
 */
import { check, type CheckAnswer, type MeasuredNetwork } from "./check.js";
import { bytesPerElementText, getFormat, MX_BLOCK } from "./formats/index.js";
import type { Measurements } from "./measure/index.js";
import { VERDICT_RANK, type AppliedLossScale, type CheckResult, type Verdict } from "./risk/index.js";
import { gradientContributions, gradientSumFormat } from "./spec/normalize.js";
import type { NetworkSpec, PrecisionPlan } from "./spec/types.js";
import { OPTIMIZER_THRESHOLDS, type OptimizerCheck } from "./scale/optimizer.js";
import type { LossScaleAnswer } from "./scale/recommend.js";

const base = { overflow: "saturate", flushSubnormals: false, scaling: "none" } as const;

/** The baseline of the "saved" share: every tensor in binary32, no master copy (the first standard plan). */
export const ALL_BINARY32_PLAN: PrecisionPlan = {
  ...base,
  name: "binary32",
  activations: "binary32",
  weights: "binary32",
  gradients: "binary32",
  optimizerStates: "binary32",
  masterWeights: "none",
  accumulate: "binary32",
};

/**
 * The plans `headroom compare` evaluates when the spec names none of its own (our own names):
 * all binary32; binary16 storage with a binary32 master copy and a loss scale; bfloat16 storage with a binary32
 * master copy; bfloat16 with no master copy; 8-bit forward (e4m3) and backward (e5m2) with per-tensor scale
 * factors (Micikevicius et al. 2022) and a binary32 master copy. Every one sums its gradients across workers and
 * accumulation steps in binary32 (mixed-precision recipes keep the all-reduce and accumulation wider than the stored
 * gradients; common practice, from memory), so no plan is judged on a sum the others are spared; the buffer counts in
 * the memory only where there is a sum (workers × accumulation steps > 1) and the gradients are narrower.
 */
export const STANDARD_PLANS: readonly PrecisionPlan[] = [
  ALL_BINARY32_PLAN,
  { ...base, name: "binary16 with master copy", activations: "binary16", weights: "binary16", gradients: "binary16", optimizerStates: "binary32", masterWeights: "binary32", accumulate: "binary32", gradientSums: "binary32" },
  { ...base, name: "bfloat16 with master copy", activations: "bfloat16", weights: "bfloat16", gradients: "bfloat16", optimizerStates: "binary32", masterWeights: "binary32", accumulate: "binary32", gradientSums: "binary32", flushSubnormals: true },
  { ...base, name: "bfloat16 only", activations: "bfloat16", weights: "bfloat16", gradients: "bfloat16", optimizerStates: "bfloat16", masterWeights: "none", accumulate: "binary32", gradientSums: "binary32", flushSubnormals: true },
  { ...base, name: "8-bit with scale factors", activations: "e4m3", weights: "e4m3", gradients: "e5m2", optimizerStates: "binary32", masterWeights: "binary32", accumulate: "binary32", gradientSums: "binary32", scaling: "tensor" },
];

export interface PlanCost {
  /** weights + master copy + gradients (+ a gradient-sum buffer in another format) + optimizer states, per parameter (block scale bytes included) */
  bytesPerParameter: number;
  /** stored activations, per element (block scale bytes included) */
  bytesPerActivation: number;
  /** of bytesPerParameter, the shared scales of per-block 8-bit storage: one E8M0 byte per block of each 8-bit tensor */
  scaleBytesPerParameter: number;
  /** of bytesPerActivation, the same for activations */
  scaleBytesPerActivation: number;
  /** total for the spec's parameters and one step's activations */
  parameterBytes: number;
  activationBytes: number;
}

export interface PlanOutcome {
  plan: PrecisionPlan;
  /** whether the plan is one of the spec's own */
  fromSpec: boolean;
  /**
   * the loss scale the plan's gradients were judged with, as check's `lossScale`: `value`, `origin` (`plan`,
   * `recommended`: the window's pick, or `none`: 1, no scale needed or none fits) and the `window` when one was searched
   */
  lossScale: AppliedLossScale;
  lossScaleAnswer: LossScaleAnswer | null;
  optimizer: OptimizerCheck;
  /**
   * the verdict `check` gives the spec with this plan as its precision (its formats, the optimizer and the loss scale):
   * an estimate, as every verdict is; a plan is expected to train when it is not "fails"
   */
  verdict: Verdict;
  /** the verdict of each format of the plan, in the order `check` judges them (the optimizer and the loss scale not counted) */
  formats: { format: string; verdict: Verdict }[];
  /**
   * how broken the plan is, what failing plans are ranked by: its findings that fail and those at risk, counting each
   * finding of the formats (a tensor or an operation in one format), each weight whose updates are lost (graded as the
   * optimizer check grades them: more than 1e-2 of the update's squared norm at the peak learning rate fails, more
   * than 1e-4 anywhere is at risk) and an empty loss-scale window once (at risk when a dynamic scale is expected to
   * cope, else failing)
   */
  findingCounts: FindingCounts;
  /** the first thing that breaks (or is at risk), one sentence; null when nothing does */
  firstProblem: string | null;
  cost: PlanCost;
  /** memory saved against the baseline (`PlanComparison.baseline`, all binary32), as a share of its bytes (parameters + activations) */
  savedShare: number;
  /** whether the plan stores every tensor as the baseline does (its saved share is 0 by definition) */
  storesAsBaseline: boolean;
}

/** Findings of a plan by severity (see `PlanOutcome.findingCounts`). */
export interface FindingCounts {
  fails: number;
  atRisk: number;
}

/** The layout version of a comparison (README.md, "Comparing plans"). */
export const COMPARISON_VERSION = 2;

export interface PlanComparison {
  /**
   * layout version: 2 since a plan's `lossScale` is check's object, its one `verdict` is check's, and `formats` and
   * `findingCounts` exist (the output before had no version, `trainsSafely`, `checkVerdict` and a number or null for
   * `lossScale`)
   */
  version: typeof COMPARISON_VERSION;
  spec: { name: string; source: string };
  /**
   * the gradient contributions summed into each update, workers × accumulation steps (added later in 2): where more
   * than 1, the standard plans sum them in binary32 and the spec's own plans in their `gradient-sums` format
   */
  gradientContributions: number;
  /** best first */
  outcomes: PlanOutcome[];
  /** what the saved shares are against: every tensor in binary32 with no master copy, whether or not it was compared */
  baseline: { name: string; plan: PrecisionPlan; bytes: number };
  /** why the ranking is what it is, one sentence each */
  explanation: string[];
  caution: string;
}

/** Bytes of optimizer state per parameter, in units of the state format (common practice). */
function statesPerParameter(kind: NetworkSpec["training"]["optimizer"]["kind"]): number {
  return kind === "adam" || kind === "adamw" ? 2 : kind === "momentum" ? 1 : 0;
}

/**
 * What storing a tensor of the plan costs per element, and of that its block scales: with per-block scaling every
 * MX_BLOCK.size elements of an 8-bit tensor share one 8-bit E8M0 scale (OCP Microscaling v1.0), a byte per block; a
 * per-tensor scale is one number per tensor, not counted.
 */
function elementBytes(plan: PrecisionPlan, name: string): { bytes: number; scale: number } {
  const format = getFormat(name);
  const scale = plan.scaling === "block" && format.bits === 8 ? 1 / MX_BLOCK.size : 0;
  return { bytes: format.bytes + scale, scale };
}

function separateSumBuffer(spec: NetworkSpec, plan: PrecisionPlan): boolean {
  return gradientSumFormat(plan) !== plan.gradients && gradientContributions(spec.training) > 1;
}

export function planCost(spec: NetworkSpec, plan: PrecisionPlan, result: CheckResult): PlanCost {
  const states = statesPerParameter(spec.training.optimizer.kind);
  const parts = [
    { count: 1, ...elementBytes(plan, plan.weights) },
    { count: plan.masterWeights === "none" ? 0 : 1, ...elementBytes(plan, plan.masterWeights === "none" ? plan.weights : plan.masterWeights) },
    { count: 1, ...elementBytes(plan, plan.gradients) },
    // a sum buffer of its own when the plan sums gradients in another format and there is more than one contribution
    { count: separateSumBuffer(spec, plan) ? 1 : 0, ...elementBytes(plan, gradientSumFormat(plan)) },
    { count: states, ...elementBytes(plan, plan.optimizerStates) },
  ];
  const bytesPerParameter = parts.reduce((sum, p) => sum + p.count * p.bytes, 0);
  const scaleBytesPerParameter = parts.reduce((sum, p) => sum + p.count * p.scale, 0);
  const activation = elementBytes(plan, plan.activations);
  const bytesPerActivation = activation.bytes;
  let parameters = 0;
  let activations = 0;
  for (const t of result.tensors) {
    if (t.role === "weight") parameters += t.start.elements;
    if (t.role === "activation" || t.role === "pre-activation") activations += t.start.elements;
  }
  return {
    bytesPerParameter,
    bytesPerActivation,
    scaleBytesPerParameter,
    scaleBytesPerActivation: activation.scale,
    parameterBytes: parameters * bytesPerParameter,
    activationBytes: activations * bytesPerActivation,
  };
}

/** Options of {@link comparePlans}. */
export interface CompareOptions {
  /** the plans to evaluate (default: the standard plans, and the spec's own) */
  plans?: readonly PrecisionPlan[];
  /** seed of the dynamic-scale simulation (default 1) */
  seed?: number;
  /**
   * the spec's measured data (`loadSpecMeasurements`), which every plan is judged with, as `check` judges one; as the
   * spec's `measuredNetwork`, every plan's check takes its graph and weight matching instead of making them again
   */
  measurements?: Measurements | MeasuredNetwork;
}

/**
 * Evaluate the standard plans (or the spec's own, when `own` is set) and rank them: plans not expected to fail
 * first, the cheapest of those first; then the rest, least broken first (fewest failing findings, then fewest at
 * risk: `findingCounts`), the cheaper of two equally broken first. With `measurements`, every plan is judged
 * with the spec's measured weights and statistics.
 * @example comparePlans(spec).outcomes[0].plan.name // => "bfloat16 with master copy"
 */
export function comparePlans(spec: NetworkSpec, options: CompareOptions = {}): PlanComparison {
  const own = [spec.precision, ...spec.plans];
  const contributions = gradientContributions(spec.training);
  // a standard plan that one of the spec's own plans repeats (same formats and options) is listed once, by the spec's
  // name; the sum format counts only where gradients are summed
  const plans =
    options.plans ?? [...STANDARD_PLANS.filter((s) => !own.some((p) => samePlan(p, s, contributions > 1)) && !own.some((p) => p.name === s.name)), ...own];

  // every plan stores the same tensors: the baseline's bytes, the "saved" column's reference, follow from any plan's
  // check, whether or not the all-binary32 plan is among those compared (--only-spec-plans)
  let referenceBytes: number | null = null;
  const outcomes = plans.map((plan): PlanOutcome => {
    const planned: NetworkSpec = { ...spec, precision: plan };
    // one check per plan: it predicts, answers the loss scale (judging at its pick when the plan gives none) and
    // checks the optimizer; its verdict folds all three in
    const result = check(planned, options.seed === undefined ? {} : { seed: options.seed }, options.measurements);
    const answer = result.lossScaleAnswer;
    const optimizer = result.optimizer;
    const lossScale = result.lossScale;
    const verdict = result.verdict;
    const cost = planCost(spec, plan, result);
    if (referenceBytes === null) {
      const reference = planCost(spec, ALL_BINARY32_PLAN, result);
      referenceBytes = reference.parameterBytes + reference.activationBytes;
    }
    return {
      plan,
      fromSpec: own.includes(plan),
      lossScale,
      lossScaleAnswer: answer,
      optimizer,
      verdict,
      formats: result.formats.map((f) => ({ format: f.format, verdict: f.verdict })),
      findingCounts: findingCounts(result),
      firstProblem: firstProblem(result, optimizer, answer),
      cost,
      savedShare: 0,
      storesAsBaseline: sameStorage(plan, ALL_BINARY32_PLAN),
    };
  });
  for (const o of outcomes) {
    if (referenceBytes) o.savedShare = 1 - (o.cost.parameterBytes + o.cost.activationBytes) / referenceBytes;
  }
  // plans not expected to fail, cheapest first; then the failing ones by how broken they are (fewest failing findings,
  // then fewest at risk), the cheaper first when they are equally broken. A count is the measure a user can check
  // against the findings listed; the findings' values are shares, probabilities and binades that do not compare
  const bytes = (o: PlanOutcome) => o.cost.parameterBytes + o.cost.activationBytes;
  const ranked = [...outcomes].sort(
    (a, b) =>
      Number(expectedToTrain(b)) - Number(expectedToTrain(a)) ||
      (expectedToTrain(a) ? 0 : a.findingCounts.fails - b.findingCounts.fails || a.findingCounts.atRisk - b.findingCounts.atRisk) ||
      bytes(a) - bytes(b) ||
      VERDICT_RANK[a.verdict] - VERDICT_RANK[b.verdict],
  );
  return {
    version: COMPARISON_VERSION,
    spec: { name: spec.name, source: spec.source },
    gradientContributions: contributions,
    outcomes: ranked,
    baseline: { name: "all binary32", plan: ALL_BINARY32_PLAN, bytes: referenceBytes ?? 0 },
    explanation: explain(ranked),
    caution:
      "These rankings rest on estimates, not guarantees: confirm the chosen plan with a short run of a few hundred steps before a long one.",
  };
}

// the same format for every stored tensor role (the gradient sums' only where there are sums: a plan's `gradient-sums`
// is judged and stored only when workers × accumulation steps > 1, src/risk/judge.ts)
function sameStoredFormats(a: PrecisionPlan, b: PrecisionPlan, sums = true): boolean {
  return (
    a.activations === b.activations &&
    a.weights === b.weights &&
    a.gradients === b.gradients &&
    a.optimizerStates === b.optimizerStates &&
    a.masterWeights === b.masterWeights &&
    (!sums || gradientSumFormat(a) === gradientSumFormat(b))
  );
}

// the same formats for every stored tensor, and the same scale bytes: the same memory
function sameStorage(a: PrecisionPlan, b: PrecisionPlan): boolean {
  return (
    sameStoredFormats(a, b) &&
    (a.scaling === b.scaling || ![a.activations, a.weights, a.gradients, a.optimizerStates, a.masterWeights].some((f) => f !== "none" && getFormat(f).bits === 8))
  );
}

function samePlan(a: PrecisionPlan, b: PrecisionPlan, sums: boolean): boolean {
  return (
    sameStoredFormats(a, b, sums) &&
    a.accumulate === b.accumulate &&
    a.lossScale === b.lossScale &&
    a.scaling === b.scaling &&
    a.overflow === b.overflow &&
    a.flushSubnormals === b.flushSubnormals
  );
}

/** Whether a plan is expected to train: its verdict is not "fails" (an estimate; an at-risk plan is not called safe). */
export function expectedToTrain(outcome: Pick<PlanOutcome, "verdict">): boolean {
  return outcome.verdict !== "fails";
}

function firstProblem(result: CheckResult, optimizer: OptimizerCheck, answer: LossScaleAnswer | null): string | null {
  if (answer?.window.empty) return answer.sentences[0] ?? null;
  const failing = result.formats.find((f) => f.verdict === "fails") ?? result.formats.find((f) => f.verdict === "at-risk");
  if (failing && (failing.verdict === "fails" || optimizer.verdict !== "fails")) return failing.reasons[0] ?? null;
  // the optimizer's state findings are told by the hazards, so their sentence is among the formats' reasons
  return optimizer.reasons[0] ?? failing?.reasons[0] ?? null;
}

/**
 * A plan's findings by severity: the formats' findings, each weight whose updates are lost (graded by
 * OPTIMIZER_THRESHOLDS as checkOptimizer grades its worst; its state findings are among the formats' hazard findings
 * already), and an empty loss-scale window that counts in the verdict (graded as check grades it).
 */
export function findingCounts(result: CheckAnswer): FindingCounts {
  const counts: FindingCounts = { fails: 0, atRisk: 0 };
  const add = (verdict: Verdict) => {
    if (verdict === "fails") counts.fails += 1;
    else if (verdict === "at-risk") counts.atRisk += 1;
  };
  for (const format of result.formats) for (const finding of format.findings) add(finding.severity);
  // the optimizer's lost updates count only when they count in its verdict (its update format was judged)
  if (result.optimizer.verdict !== "fits") {
    for (const t of result.optimizer.tensors) {
      const peak = Math.max(0, ...t.updates.filter((u) => u.at === "peak").map((u) => u.planned));
      const anywhere = Math.max(0, ...t.updates.map((u) => u.planned));
      add(anywhere <= OPTIMIZER_THRESHOLDS.lostAtRisk ? "fits" : peak > OPTIMIZER_THRESHOLDS.lostFails ? "fails" : "at-risk");
      if ((t.decayLost ?? 0) > OPTIMIZER_THRESHOLDS.decayLostAtRisk) add("at-risk");
    }
  }
  const judged = result.formats.map((f) => f.format);
  for (const answer of [result.lossScaleAnswer, ...(result.moreLossScaleAnswers ?? [])]) {
    if (answer === null || !answer.window.empty || !judged.includes(answer.format)) continue;
    add(answer.remedies.some((r) => r.kind === "dynamic-scale" && r.works) ? "at-risk" : "fails");
  }
  return counts;
}

// every stored tensor and the accumulation in binary32 or wider: no narrower format is involved
function allBinary32OrWider(plan: PrecisionPlan): boolean {
  const binary32 = getFormat("binary32");
  return [plan.activations, plan.weights, plan.gradients, plan.optimizerStates, plan.accumulate, gradientSumFormat(plan), plan.masterWeights]
    .filter((f) => f !== "none")
    .every((f) => getFormat(f).precision >= binary32.precision && getFormat(f).exponentBits >= binary32.exponentBits);
}

function countWords(counts: FindingCounts): string {
  const n = (k: number, what: string) => `${k} ${what}${k === 1 ? "" : "s"}`;
  return `${n(counts.fails, "failing finding")}, ${counts.atRisk} at risk`;
}

function explain(ranked: PlanOutcome[]): string[] {
  const lines: string[] = [];
  const safe = ranked.filter(expectedToTrain);
  if (safe.length === 0) {
    lines.push(
      "No plan is expected to train safely. The least broken comes first: the fewest failing findings (each tensor or operation " +
        "in each format, each weight whose updates are lost, an empty loss-scale window), then the fewest at risk, then the least memory.",
    );
    // binary32 failing too: narrower formats add their own findings to the network's, no format removes these
    const wide = ranked.find((o) => allBinary32OrWider(o.plan));
    if (wide !== undefined) {
      lines.push(
        `Even ${wide.plan.name}, with every tensor in binary32 or wider, is expected to fail, so no choice of format is expected to help: ` +
          "the network or its training setup is the problem (for example gradients that vanish or explode with depth, or updates far below their weights); change it, then compare again.",
      );
    }
  } else {
    const best = safe[0]!;
    if (best.verdict === "fits") {
      lines.push(`${best.plan.name} is the cheapest plan expected to train safely (${costWords(best)}).`);
    } else {
      // an at-risk plan is not expected to fail, but it is not "safe" either: say so, and name the cheapest that fits
      lines.push(`${best.plan.name} is the cheapest plan not expected to fail, but it is at risk (${costWords(best)}).`);
      const fitting = safe.find((o) => o.verdict === "fits");
      lines.push(
        fitting === undefined
          ? "No plan fits without a risk."
          : `${fitting.plan.name} is the cheapest plan with no risk found (${costWords(fitting)}).`,
      );
    }
  }
  for (const o of ranked) {
    if (!expectedToTrain(o)) lines.push(`${o.plan.name} is not expected to train safely (${countWords(o.findingCounts)}): ${o.firstProblem ?? "see its findings"}`);
    else if (o.verdict === "at-risk") lines.push(`${o.plan.name} is expected to train, but at risk: ${o.firstProblem ?? "see its findings"}`);
  }
  return lines;
}

function costWords(o: PlanOutcome): string {
  const saved = o.savedShare > 0 ? `, ${(100 * o.savedShare).toFixed(0)}% less memory than all binary32` : "";
  return `${bytesPerElementText(o.cost.bytesPerParameter)} bytes per parameter, ${bytesPerElementText(o.cost.bytesPerActivation)} per activation element${saved}`;
}
