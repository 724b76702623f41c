/**
 * A check result read for rows and reports: a short label and a measure for each kind of finding, the
 * findings worst first, the loss-scale window when the check has one, and the one-row summary a batch
 * shows. Pure; types only from the risk and batch modules.
 */
import type { JudgedLossScale, LossScaleSummary, RiskMeasure, SpecSummary, ValueScope, WorstSummary } from "../batch/types.js";
import type { CheckAnswer } from "../check.js";
import type { CheckResult, Finding, FindingKind } from "../risk/index.js";
import type { PlanEntry } from "../risk/judge.js";
import { VERDICT_RANK } from "../risk/verdict-order.js";
import { itemSummary, lossScaleSummaries } from "./loss-scale.js";

/** How each entry of a precision plan a format holds is named in the outputs. */
export const PLAN_ENTRY_WORDS = {
  activations: "activations",
  weights: "weights",
  gradients: "gradients",
  optimizerStates: "optimizer states",
  accumulate: "accumulation",
  gradientSums: "gradient sums",
} as const satisfies Record<PlanEntry, string>;

/** What a planned format's `valuesLost` means, in one sentence (the text and markdown reports). */
export function valuesLostSentence(lost: { tensors: number; first: string }): string {
  return (
    `The tensors computed from the ${lost.tensors === 1 ? "one that loses" : `${lost.tensors} that lose`} values here (the first: ${lost.first}) are predicted from exact values: ` +
    "what flushes or overflows is not carried forward or backward, so fix the first, then check again."
  );
}

/** How each kind of finding is named in a row, and what its number measures. */
export const FINDING_WORDS = {
  overflow: { label: "overflow", measure: "probability" },
  saturation: { label: "saturation", measure: "probability" },
  "little-headroom": { label: "headroom", measure: "binades" },
  "gradient-energy-flushed": { label: "flushed energy", measure: "share" },
  "flushed-values": { label: "flushed", measure: "share" },
  "probability-mass-flushed": { label: "flushed probability", measure: "share" },
  "subnormal-values": { label: "subnormal noise", measure: "share" },
  "softmax-exp-overflow": { label: "softmax exp overflow", measure: "probability" },
  "softmax-sum-overflow": { label: "softmax sum overflow", measure: "probability" },
  "norm-sum-overflow": { label: "norm sum overflow", measure: "probability" },
  "accumulation-error": { label: "accumulation error", measure: "relative-error" },
  "accumulation-overflow": { label: "partial sum overflow", measure: "probability" },
  "loss-value-overflow": { label: "loss overflow", measure: "probability" },
  "gradient-sum-overflow": { label: "gradient sum overflow", measure: "probability" },
  "gradient-sum-flush": { label: "gradient sum flushed", measure: "share" },
  "optimizer-epsilon-flushed": { label: "zero second moments", measure: "count" },
  "second-moment-flushed": { label: "second moment flushed", measure: "share" },
} as const satisfies Record<FindingKind, { label: string; measure: RiskMeasure }>;

// kinds whose number is better when larger (binades of headroom); the others are worse when larger
const LARGER_IS_BETTER: ReadonlySet<FindingKind> = new Set<FindingKind>(["little-headroom"]);

/**
 * Order findings worst first: fails before at risk, stored tensors before operations (the row names
 * a tensor), then the catalogue's order of kinds, then the number (worse first).
 */
export function compareFindings(a: Finding, b: Finding): number {
  const kinds = Object.keys(FINDING_WORDS);
  return (
    VERDICT_RANK[b.severity] - VERDICT_RANK[a.severity] ||
    (a.source === b.source ? 0 : a.source === "tensor" ? -1 : 1) ||
    kinds.indexOf(a.kind) - kinds.indexOf(b.kind) ||
    (LARGER_IS_BETTER.has(a.kind) ? a.value - b.value : b.value - a.value) ||
    (a.subject < b.subject ? -1 : a.subject > b.subject ? 1 : 0)
  );
}

/** Every finding of a check, worst first (see {@link compareFindings}). */
export function findingsWorstFirst(result: CheckResult): Finding[] {
  return result.formats.flatMap((format) => format.findings).sort(compareFindings);
}

/**
 * What a finding's number counts. Adam's zero second moments at the training setup's site are counted over every
 * weight gradient of the network, the finding naming the layer that holds the most (src/risk/hazards.ts,
 * optimizerConstant); a site of the prediction, like every other finding, counts its own subject.
 */
export function findingScope(result: CheckResult, finding: Finding): ValueScope {
  if (finding.kind !== "optimizer-epsilon-flushed") return "subject";
  const site = result.hazards.find(
    (h) => h.kind === "optimizer-constant" && h.findings.some((f) => f === finding || (f.format === finding.format && f.subject === finding.subject && f.value === finding.value)),
  );
  return site?.origin === "training setup" ? "network" : "subject";
}

/**
 * The worst finding as a row cell, or null when the check found nothing. When the optimizer check
 * is worse than every finding (updates lost to rounding), its worst weight is the row's worst tensor.
 */
export function worstOf(result: CheckResult | CheckAnswer): WorstSummary | null {
  const worst = findingsWorstFirst(result)[0];
  const optimizer = "optimizer" in result ? result.optimizer : undefined;
  if (optimizer?.worst && optimizer.verdict !== "fits" && VERDICT_RANK[optimizer.verdict] > (worst ? VERDICT_RANK[worst.severity] : 0)) {
    return {
      subject: optimizer.worst.weight,
      format: optimizer.updateFormat,
      verdict: optimizer.verdict,
      kind: "lost-updates",
      label: "lost updates",
      value: optimizer.worst.lostShare,
      measure: "share",
      scope: "subject",
    };
  }
  if (!worst) return null;
  const words = FINDING_WORDS[worst.kind];
  return {
    subject: worst.subject,
    format: worst.format,
    verdict: worst.severity,
    kind: worst.kind,
    label: words.label,
    value: worst.value,
    measure: words.measure,
    scope: findingScope(result, worst),
  };
}

/**
 * The loss-scale answer of a check in a row's terms: the first answer (`lossScaleAnswer`: its window and pick, or an
 * empty window with the reason), "not needed" with the reason when no gradient format judged needs a scale, or "not
 * evaluated" for a result without an answer (a bare judgement). Every gradient format's: `lossScaleSummaries`.
 */
export function lossScaleOf(result: CheckResult | CheckAnswer): LossScaleSummary {
  if (!("lossScales" in result)) return { status: "not-evaluated" };
  const answer = result.lossScaleAnswer;
  // with no answer every item is "not needed"; an answer is always among the items
  const item = answer === null ? result.lossScales[0] : result.lossScales.find((i) => i.status !== "not-needed" && i.answer === answer);
  if (item === undefined) return { status: "not-evaluated" };
  const { format: _format, ...summary } = itemSummary(item);
  return summary;
}

/**
 * The scale a check judged the gradients at (its `lossScale`) and where log2 S lies against the window searched for the
 * same gradients, as check's header says it ("2^24 (from the plan), 15 binades above the window"): the window's edges
 * are whole exponents, so a scale between them is inside, and one past an edge is that many binades from it.
 */
export function judgedLossScaleOf(result: CheckResult | CheckAnswer): JudgedLossScale {
  const { value, origin, window } = result.lossScale;
  if (window === undefined || window.empty || window.lowestLog2 === null || window.highestLog2 === null) return { value, origin, position: null, binadesOutside: null };
  const k = Math.log2(value);
  if (k > window.highestLog2) return { value, origin, position: "above", binadesOutside: k - window.highestLog2 };
  if (k < window.lowestLog2) return { value, origin, position: "below", binadesOutside: window.lowestLog2 - k };
  return { value, origin, position: "inside", binadesOutside: 0 };
}

/** One batch row's worth of a check result. */
export function summarizeCheck(result: CheckResult | CheckAnswer): SpecSummary {
  return {
    name: result.spec.name,
    verdict: result.verdict,
    formats: result.formats.map((format) => ({ format: format.format, verdict: format.verdict })),
    lossScale: lossScaleOf(result),
    lossScales: lossScaleSummaries(result),
    judgedLossScale: judgedLossScaleOf(result),
    worst: worstOf(result),
  };
}
