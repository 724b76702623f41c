/**
 * A check result read for rows and reports: a short label and a measure for each kind of finding, the
 * findings worst first, the loss-scale window when the check has one, and the one-row summary a batch
 * shows. Pure; types only from the risk and batch modules.
 */
import type { LossScaleSummary, RiskMeasure, SpecSummary, WorstSummary } from "../batch/types.js";
import type { CheckAnswer } from "../check.js";
import { FORMATS } from "../formats/index.js";
import type { FormatName } from "../formats/names.js";
import type { CheckResult, Finding, FindingKind } from "../risk/index.js";
import type { PrecisionPlan } from "../spec/types.js";
import type { LossScaleAnswer } from "../scale/recommend.js";

/** How each kind of finding is named in a row, and what its number measures. */
export const FINDING_WORDS = {
  overflow: { label: "overflow", measure: "probability" },
  saturation: { label: "saturation", measure: "probability" },
  "little-headroom": { label: "headroom", measure: "binades" },
  "gradient-energy-flushed": { label: "flushed energy", measure: "share" },
  "flushed-values": { label: "flushed", measure: "share" },
  "subnormal-values": { label: "subnormal", measure: "share" },
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

const SEVERITY = { fails: 0, "at-risk": 1 } as const;

// kinds whose number is better when larger (binades of headroom); the others are worse when larger
const LARGER_IS_BETTER: ReadonlySet<FindingKind> = new Set<FindingKind>(["little-headroom"]);

/**
 * Order findings worst first: fails before at risk, stored tensors before operations (the row names
 * a tensor), then the catalogue's order of kinds, then the number (worse first).
 */
export function compareFindings(a: Finding, b: Finding): number {
  const kinds = Object.keys(FINDING_WORDS);
  return (
    SEVERITY[a.severity] - SEVERITY[b.severity] ||
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

const VERDICT_RANK = { fits: 0, "at-risk": 1, fails: 2 } as const;

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
  };
}

/**
 * The loss-scale answer of a check in a row's terms: the window and its pick, an empty window with
 * the reason, "not needed" when gradients are held in a format with binary32's range (bfloat16,
 * binary32), or "not evaluated" for a result without an answer (a bare judgement).
 */
export function lossScaleOf(result: CheckResult | CheckAnswer): LossScaleSummary {
  if (!("lossScaleAnswer" in result)) return { status: "not-evaluated" };
  return answerSummary(result.lossScaleAnswer);
}

/**
 * What the "Loss scale" section tells, in order: per gradient format held by a judged format, its answer or (a format
 * that needs no scale) its name; then any answer about gradients no judged format holds (a judged format that holds
 * none, such as binary32 for the states, is judged at the plan's scale). The plan's gradient format when none is left.
 */
export function lossScaleItems(result: CheckAnswer): (LossScaleAnswer | FormatName)[] {
  const answers = [...(result.lossScaleAnswer === null ? [] : [result.lossScaleAnswer]), ...(result.moreLossScaleAnswers ?? [])];
  const items: (LossScaleAnswer | FormatName)[] = [];
  for (const format of result.formats) {
    if (!format.holds.includes("gradients")) continue;
    items.push(answers.find((a) => a.format === format.format) ?? format.format);
  }
  for (const answer of answers) if (!items.includes(answer)) items.push(answer);
  if (items.length === 0) items.push(result.plan.gradients);
  return items;
}

/**
 * Every loss-scale answer of a check in a row's terms, one per item of {@link lossScaleItems}, with the gradient
 * format it is about and the answer's sentences; empty for a result without an answer (a bare judgement).
 */
export function lossScalesOf(result: CheckResult | CheckAnswer): { format: FormatName; summary: LossScaleSummary; notes: string[] }[] {
  if (!("lossScaleAnswer" in result)) return [];
  return lossScaleItems(result).map((item) =>
    typeof item === "string" ? { format: item, summary: answerSummary(null), notes: [] } : { format: item.format, summary: answerSummary(item), notes: item.sentences },
  );
}

/**
 * Why gradients held in `format` take no loss scale, as a clause: the rule of src/check.ts `needsLossScale`
 * (binary32's exponent range or wider, or 8-bit with scale factors). It says nothing of the gradients' sizes: the
 * tensors' own findings tell whether any overflows or flushes unscaled.
 */
export function unscaledReason(format: FormatName, scaling: PrecisionPlan["scaling"]): string {
  const f = FORMATS[format];
  if (f.bits === 8 && scaling !== "none") return `gradients are held in ${format} with per-${scaling} scale factors`;
  if (format === "binary32" || format === "binary64") return `gradients are held in ${format}`;
  return `gradients are held in ${format}, which has binary32's exponent range`;
}

/** One loss-scale answer in a row's terms; "not needed" for none. */
function answerSummary(answer: LossScaleAnswer | null): LossScaleSummary {
  if (answer === null) return { status: "not-needed" };
  const w = answer.window;
  if (w.empty || w.pickLog2 === null || w.lowestLog2 === null || w.highestLog2 === null) {
    return { status: "empty", reason: answer.sentences[0] ?? "no power of two keeps every gradient from both overflowing and flushing" };
  }
  return { status: "window", pickLog2: w.pickLog2, lowLog2: w.lowestLog2, highLog2: w.highestLog2 };
}

/** One batch row's worth of a check result. */
export function summarizeCheck(result: CheckResult | CheckAnswer): SpecSummary {
  return {
    name: result.spec.name,
    verdict: result.verdict,
    formats: result.formats.map((format) => ({ format: format.format, verdict: format.verdict })),
    lossScale: lossScaleOf(result),
    worst: worstOf(result),
  };
}
