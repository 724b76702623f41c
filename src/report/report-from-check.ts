/**
 * A check result as the HTML report's model: bands on a log2 axis, the ranges of the planned formats,
 * the ledger of the worst tensor, the findings worst first. Pure.
 */
import { FORMATS } from "../formats/index.js";
import type { FormatName } from "../formats/names.js";
import type { CheckAnswer } from "../check.js";
import type { CheckResult, TensorCheck } from "../risk/index.js";
import type { ReportFormatRange, ReportLossScale, ReportModel, ReportTensorBand } from "./report-model.js";
import { itemSummary, namesGradientFormats, remedyWords } from "./loss-scale.js";
import { FINDING_WORDS, findingsWorstFirst, PLAN_ENTRY_WORDS } from "./summary.js";
import { planSettings } from "./plan-settings.js";
import { VERDICT_RANK } from "../risk/verdict-order.js";

const FORWARD_ROLES: ReadonlySet<string> = new Set(["activation", "pre-activation", "weight", "loss"]);

function log2(value: number): number {
  return value > 0 ? Math.log2(value) : -Infinity;
}

/**
 * A planned format's range as the check judges it: subnormals count as kept unless the plan flushes
 * them or the format is modelled flush-to-zero (bfloat16 on much hardware; SCIENCE.md §1.2).
 */
export function formatRange(name: FormatName, flushSubnormals: boolean, roles: string[]): ReportFormatRange {
  const format = FORMATS[name];
  const flushes = flushSubnormals || format.subnormalsOftenFlushed;
  return {
    format: name,
    maxLog2: Math.log2(format.maxFinite),
    largest: format.maxFinite,
    minNormalLog2: Math.log2(format.minNormal),
    smallestLog2: Math.log2(flushes ? format.minNormal : format.minSubnormal),
    roles,
  };
}

/** The tensor's name within its layer, e.g. "weight", "weight:bias", "activation gradient". */
function tensorLabel(tensor: TensorCheck): string {
  const prefix = `${tensor.layer}/`;
  const own = tensor.id.startsWith(prefix) ? tensor.id.slice(prefix.length) : tensor.role;
  return own.replaceAll("-", " ");
}

function band(result: CheckResult, tensor: TensorCheck): ReportTensorBand {
  // drawn against the format it was judged in: the plan's, or with `--format` the first format judged that holds it
  // (drawn against the plan's format, a tensor judged only in e5m2 read "in binary16 ... fails" with no range behind it)
  const planned = result.plan[tensor.slot];
  const risk =
    tensor.risks.find((r) => r.judged && r.format === planned) ?? tensor.risks.find((r) => r.judged) ?? tensor.risks.find((r) => r.format === planned);
  // a tensor no format judges (the loss value) is drawn against the format that holds its plan entry
  const format = risk?.format ?? result.formats.find((f) => (f.holds as readonly string[]).includes(tensor.slot))?.format ?? planned;
  // a format judged at another loss scale than the top-level one carries its own numbers after that scale
  const statistics = risk?.statistics ?? tensor.statistics;
  const worst = risk ? [...risk.findings].sort((a, b) => VERDICT_RANK[b.severity] - VERDICT_RANK[a.severity])[0] : undefined;
  // an 8-bit conversion with scale factors multiplies the tensor by 2^k first (k per side of the horizon): drawn
  // unscaled, a tensor the format holds well would sit outside its range and read as flushed or overflowing
  const sides = [
    { p: statistics.start, scale: risk ? 2 ** risk.scaleLog2.start : 1 },
    { p: statistics.end, scale: risk ? 2 ** risk.scaleLog2.end : 1 },
  ];
  // a profile that is all zeros (a bias at initialisation) has no magnitudes to show
  const shown = sides.filter((side) => side.p.rms > 0);
  const start = shown[0] ?? (sides[0] as (typeof sides)[number]);
  const end = shown[1] ?? start;
  const band: ReportTensorBand = {
    id: tensor.id,
    layer: tensor.layer,
    layerIndex: tensor.layerIndex,
    role: tensorLabel(tensor),
    pass: FORWARD_ROLES.has(tensor.role) ? "forward" : "backward",
    format,
    lowLog2: log2(Math.min(start.p.low * start.scale, end.p.low * end.scale)),
    rmsLog2: log2(start.p.rms * start.scale),
    highLog2: log2(Math.max(start.p.max * start.scale, end.p.max * end.scale)),
    verdict: risk?.verdict ?? tensor.verdict,
    note: worst?.sentence ?? "",
  };
  if (risk && risk.scaleLog2.start !== 0) band.scaleLog2 = risk.scaleLog2.start;
  return band;
}

/**
 * The loss-scale sections: one per loss-scale item of the check (`CheckAnswer.lossScales`), named by the gradient
 * format when the outputs name them (several, or not the plan's gradient format); "not evaluated" for a bare judgement.
 */
function lossScaleModels(result: CheckResult | CheckAnswer): ReportLossScale[] {
  if (!("lossScales" in result)) return [{ summary: { status: "not-evaluated" }, notes: [] }];
  const named = namesGradientFormats(result);
  return result.lossScales.map((item) => {
    const { format, ...summary } = itemSummary(item);
    // an empty window's first sentence is its reason, shown beside the status: not again among the notes; the
    // remedies follow, worded as the terminal words them
    const notes =
      item.status === "not-needed"
        ? []
        : [
            ...(item.status === "empty" ? item.answer.sentences.slice(1) : item.answer.sentences),
            ...item.answer.remedies.map((remedy, i) => `${i + 1}. ${remedyWords(remedy)}`),
          ];
    const model: ReportLossScale = { summary, notes };
    if (named) model.format = format;
    return model;
  });
}

/** Options of {@link reportModel}. */
export interface ReportModelOptions {
  /** the version printed in the footer */
  version: string;
  /** the spec's warnings (the spec was judged as written), one `file:line:column: key.path: message` line each */
  warnings?: readonly string[];
}

/** Turn a check result into what the HTML report shows. */
export function reportModel(result: CheckResult | CheckAnswer, options: ReportModelOptions): ReportModel {
  const findings = findingsWorstFirst(result);
  const planned = result.formats.filter((f) => f.planned);
  const shown = planned.length > 0 ? planned : result.formats;
  const worstTensor = findings.find((f) => f.source === "tensor");
  const ledgerTensor = worstTensor ? result.tensors.find((t) => t.id === worstTensor.subject) : undefined;
  // the optimizer's reasons and an empty loss-scale window count in the verdict too
  // listed as sentences beside the formats' reasons: they open with a capital as those do ("weight decay steps ..." is
  // a list item under the terminal's Optimizer heading)
  const optimizerReasons =
    "optimizer" in result && result.optimizer.verdict !== "fits" ? result.optimizer.reasons.map((r) => r.charAt(0).toUpperCase() + r.slice(1)) : [];
  const scales = lossScaleModels(result);
  const scaleReasons = scales.flatMap((s) => (s.summary.status === "empty" ? [s.summary.sentence] : []));
  const reasons = [...result.formats.flatMap((f) => f.reasons), ...scaleReasons, ...optimizerReasons];
  const settings = planSettings(result.plan);
  return {
    title: result.spec.name,
    description: result.spec.description,
    source: result.spec.source,
    plan: result.plan.name,
    ...(settings === "" ? {} : { planSettings: settings }),
    verdict: result.verdict,
    reasons: [...new Set(reasons)],
    formats: result.formats.map((f) => ({ format: f.format, verdict: f.verdict, roles: f.holds.map((h) => PLAN_ENTRY_WORDS[h]), planned: f.planned })),
    ranges: shown.map((f) => formatRange(f.format, result.plan.flushSubnormals, f.holds.map((h) => PLAN_ENTRY_WORDS[h]))),
    tensors: result.tensors.map((t) => band(result, t)),
    lossScale: scales[0] as ReportLossScale,
    ...(scales.length > 1 ? { moreLossScales: scales.slice(1) } : {}),
    ledger: ledgerTensor?.ledger
      ? {
          subject: ledgerTensor.id,
          rmsLog2: log2(ledgerTensor.start.rms),
          endRmsLog2: log2(ledgerTensor.end.rms),
          scaleLog2: log2(ledgerTensor.statistics.factor),
          steps: ledgerTensor.ledger.map((entry) => ({ layer: entry.layer, rule: entry.rule, log2Factor: entry.log2Factor, source: entry.source })),
        }
      : null,
    findings: findings.map((f) => ({
      subject: f.subject,
      format: f.format,
      verdict: f.severity,
      label: FINDING_WORDS[f.kind].label,
      value: f.value,
      measure: FINDING_WORDS[f.kind].measure,
      sentence: f.sentence,
    })),
    assumptions: [...result.assumptions, result.caution],
    ...(result.unusedStatistics !== undefined && result.unusedStatistics.length > 0 ? { unusedStatistics: result.unusedStatistics.map((u) => u.sentence) } : {}),
    ...(options.warnings !== undefined && options.warnings.length > 0 ? { warnings: [...options.warnings] } : {}),
    version: options.version,
  };
}
