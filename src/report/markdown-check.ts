/**
 * `check --md`: a check result as GitHub Markdown for a CI comment: the verdict, a table of formats,
 * the worst findings and the loss scale. Pure.
 */
import { escapeMarkdown, markdownCode, markdownList, markdownTable } from "./markdown.js";
import { verdictWords, worstRiskText } from "./batch.js";
import { lossScaleClause, lossScaleSummaries, namesGradientFormats } from "./loss-scale.js";
import type { CheckAnswer } from "../check.js";
import type { CheckResult } from "../risk/index.js";
import type { LossScaleSummary } from "../batch/types.js";
import { FINDING_WORDS, findingScope, findingsWorstFirst, PLAN_ENTRY_WORDS, valuesLostSentence } from "./summary.js";
import { formatValue } from "./number.js";
import { planSettings } from "./plan-settings.js";

/** Options of {@link renderCheckMarkdown}. */
export interface CheckMarkdownOptions {
  /** the variant's name, shown in the heading (check --vary) */
  variant?: string | null;
  /** findings listed (default 10) */
  findings?: number;
  /** the spec's warnings, one `file:line:column: key.path: message` line each (judged as written) */
  warnings?: readonly string[];
}

const EMPHASIS = { fits: "fits", "at-risk": "**at risk**", fails: "**fails**" } as const;

/** A check result as Markdown; every name from the spec is escaped. */
export function renderCheckMarkdown(result: CheckResult | CheckAnswer, options: CheckMarkdownOptions = {}): string {
  const limit = options.findings ?? 10;
  const variant = options.variant ? ` (${escapeMarkdown(options.variant)})` : "";
  let out = `### headroom check: ${escapeMarkdown(result.spec.name)}${variant}: ${EMPHASIS[result.verdict]}\n\n`;
  const settings = planSettings(result.plan);
  out += `Spec ${markdownCode(result.spec.source)}, precision plan ${markdownCode(result.plan.name)}${settings === "" ? "" : ` (${settings})`}.\n\n`;
  out += markdownTable(
    [{ title: "format" }, { title: "holds" }, { title: "verdict" }, { title: "why" }],
    result.formats.map((f) => [
      f.format,
      // a format judged with --format stands in for the plan's, as the terminal text says
      (f.planned ? "" : "in place of the plan's formats: ") + f.holds.map((entry) => PLAN_ENTRY_WORDS[entry]).join(", "),
      { markdown: EMPHASIS[f.verdict] },
      f.reasons.length > 0 ? f.reasons.join("\n") : "",
    ]),
  );
  const losing = result.formats.filter((f) => f.valuesLost !== undefined);
  out += markdownList("Values lost", losing.map((f) => `${f.format}: ${valuesLostSentence(f.valuesLost!)}`));
  const findings = findingsWorstFirst(result);
  if (findings.length > 0) {
    out += `\nWorst findings (${Math.min(limit, findings.length)} of ${findings.length}):\n\n`;
    out += markdownTable(
      [{ title: "tensor or operation" }, { title: "format" }, { title: "verdict" }, { title: "what" }, { title: "how much", align: "right" }],
      findings.slice(0, limit).map((f) => [
        f.subject,
        f.format,
        verdictWords(f.severity),
        FINDING_WORDS[f.kind].label,
        worstRiskText({ label: "", value: f.value, measure: FINDING_WORDS[f.kind].measure, scope: findingScope(result, f) }).trimStart(),
      ]),
    );
  }
  // one line, or one per gradient format when the outputs name them (several, or another than the plan's)
  const scales = lossScaleSummaries(result);
  const named = namesGradientFormats(result);
  if (scales.length === 0) out += lossScaleLine("Loss scale", { status: "not-evaluated" });
  else {
    for (const [i, s] of scales.entries()) {
      out += lossScaleLine(named ? `Loss scale for ${s.format} gradients` : "Loss scale", s);
      // no static scale: what to do, as the optimizer's first remedy is given below (the terminal lists them all)
      const item = "lossScales" in result ? result.lossScales[i] : undefined;
      const remedy = item !== undefined && item.status === "empty" ? item.answer.remedies.find((r) => r.works) : undefined;
      if (remedy !== undefined) out += `- first remedy that works: ${escapeMarkdown(remedy.sentence)}\n`;
    }
  }
  // the optimizer counts in the verdict: a verdict it alone sets would otherwise have no reason on the page
  if ("optimizer" in result && result.optimizer.verdict !== "fits") {
    const optimizer = result.optimizer;
    out += `\nOptimizer ${optimizer.kind}: ${EMPHASIS[optimizer.verdict]}.\n`;
    for (const reason of optimizer.reasons) out += `- ${escapeMarkdown(reason)}\n`;
    if (optimizer.reportedAsHazards.length > 0) out += "- its states' findings (optimizer epsilon, second moment) are told as operation findings above.\n";
    if (optimizer.remedies.length > 0) out += `- first remedy: ${escapeMarkdown(optimizer.remedies[0] as string)}\n`;
  }
  // a scale given by the plan or the command line is the one judged, whatever the window's pick: say so
  const applied = result.lossScale;
  if (applied.origin === "plan" || applied.origin === "option") {
    out += `\nGradients judged at the loss scale ${formatValue(applied.value)} (from ${applied.origin === "plan" ? "the plan" : "the command line"}).\n`;
  }
  // recorded rows the check could not use: the user gave them, so a CI comment says so
  out += markdownList("Recorded statistics not used", (result.unusedStatistics ?? []).map((u) => u.sentence));
  // as batch --md lists them: a CI comment is often all a reader sees, and the warnings go to stderr only
  out += markdownList("Warnings (judged as written)", options.warnings ?? []);
  out += `\n_${escapeMarkdown(result.caution)}_\n`;
  return out;
}

function lossScaleLine(head: string, scale: LossScaleSummary): string {
  const clause = lossScaleClause(scale);
  if (scale.status === "not-evaluated") return `\n${head}: _${escapeMarkdown(clause)}_.\n`;
  const reason = scale.status === "empty" ? ` ${escapeMarkdown(scale.sentence)}` : "";
  return `\n${head}: ${escapeMarkdown(clause)}.${reason}\n`;
}
