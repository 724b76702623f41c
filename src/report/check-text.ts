/**
 * The terminal rendering of a check: a verdict per format with its reasons, the tensors at risk, the operation
 * hazards, the assumptions and the caution. Pure: a CheckResult in, a string out.
 */
import type { CheckAnswer } from "../check.js";
import type { LossScaleAnswer } from "../scale/recommend.js";
import type { AppliedLossScale, CheckResult, HazardCheck, TensorCheck, TensorCheckRisk, Verdict } from "../risk/index.js";
import { VERDICT_RANK } from "../risk/verdict-order.js";
import { itemSummary, lossScaleClause, namesGradientFormats, remedyWords } from "./loss-scale.js";
import type { PrecisionPlan } from "../spec/types.js";
import { planSettings } from "./plan-settings.js";
import { formatBinades, formatPercent, formatProbability, formatValue } from "./number.js";
import { PLAIN, type Style } from "./style.js";
import { PLAN_ENTRY_WORDS, valuesLostSentence } from "./summary.js";
import { renderTable, type Cell } from "./table.js";

/** Options of {@link renderCheckText}. */
export interface CheckTextOptions {
  /** list every tensor and every hazard, not only those at risk */
  all?: boolean;
  /** colours (default none) */
  style?: Style;
  /** wrap sentences at this many columns (default 100) */
  width?: number;
}

/** The loss-scale answer and the optimizer check, as two short sections. */
export function renderDecisions(result: CheckAnswer, width: number, style: Style = PLAIN): string {
  let out = "";
  out += "\n" + style.role("strong", "Loss scale") + "\n";
  // each item's status in the shared wording, named by its gradient format when the outputs name them
  const named = namesGradientFormats(result);
  const indent = named ? "    " : "  ";
  for (const item of result.lossScales) {
    const clause = `${lossScaleClause(itemSummary(item))}.`;
    out += wrap(named ? `${item.format} gradients: ${clause}` : clause, width, "  ", indent);
    if (item.status === "not-needed") continue;
    const answer = item.answer;
    for (const sentence of answer.sentences) out += wrap(sentence, width, indent, indent);
    answer.remedies.forEach((remedy, i) =>
      out += wrap(remedyWords(remedy), width, `${indent}${i + 1}. `, `${indent}   `),
    );
    const d = answer.dynamic;
    if (d && answer.remedies.length === 0) {
      out += wrap(
        `dynamic scaling (simulated over ${d.steps} steps, seed ${d.seed}): ${d.skippedSteps} skipped steps, settling between ${formatValue(d.settledLowest)} and ${formatValue(d.settledHighest)}.`,
        width,
        indent,
        indent,
      );
    }
  }
  const optimizer = result.optimizer;
  out += "\n" + style.role("strong", "Optimizer") + ` ${optimizer.kind}: ${verdictText(optimizer.verdict, style)}\n`;
  out += wrap(
    `updates are added to ${optimizer.weightFormat === optimizer.updateFormat && result.plan.masterWeights === "none" ? `the stored ${optimizer.updateFormat} weights` : `a master copy in ${optimizer.updateFormat}`}${optimizer.epsilon ? `; epsilon ${formatValue(optimizer.epsilon.value)} is held as ${formatValue(optimizer.epsilon.stored)} in ${optimizer.stateFormat}` : ""}.`,
    width,
    "  ",
    "  ",
  );
  if (optimizer.reasons.length === 0 && optimizer.reportedAsHazards.length === 0) {
    out += wrap("the updates lose a negligible share of their squared norm to rounding, and the states keep their values.", width, "  ", "  ");
  }
  for (const reason of optimizer.reasons) out += wrap(reason, width, "  - ", "    ");
  if (optimizer.reportedAsHazards.length > 0) {
    const named = optimizer.reportedAsHazards.map((kind) => HAZARD_WORDS[kind]).join(" and ");
    out += wrap(`the states in ${optimizer.stateFormat}: see ${named} under Operation hazards.`, width, "  - ", "    ");
  }
  // a remedy that would not work says so in place of the label, as the loss scale's remedies do
  optimizer.remedies.forEach((remedy, i) => (out += wrap(remedy.startsWith("does not work: ") ? remedy : `remedy: ${remedy}`, width, `  ${i + 1}. `, "     ")));
  return out;
}

/** How a verdict reads. */
export const VERDICT_WORDS: Readonly<Record<Verdict, string>> = { fits: "fits", "at-risk": "at risk", fails: "fails" };

/** A verdict, coloured by meaning. */
export function verdictText(verdict: Verdict, style: Style = PLAIN): string {
  return style.role(verdict === "fits" ? "fits" : verdict === "at-risk" ? "risk" : "fails", VERDICT_WORDS[verdict]);
}

/** "activations binary16, weights binary16, ..." */
export function describePlan(plan: PrecisionPlan): string {
  const parts = [
    `activations ${plan.activations}`,
    `weights ${plan.weights}`,
    `gradients ${plan.gradients}`,
    `optimizer states ${plan.optimizerStates}`,
    `master weights ${plan.masterWeights}`,
    `accumulation ${plan.accumulate}`,
  ];
  // said only where it differs: by default gradients are summed in their own format
  if (plan.gradientSums !== undefined && plan.gradientSums !== plan.gradients) parts.push(`gradient sums ${plan.gradientSums}`);
  const settings = planSettings(plan);
  return parts.join(", ") + (settings === "" ? "" : `; ${settings}`);
}

/**
 * The loss-scale line: what was applied and, when the check searched, the window and what sets its edges. With
 * `formats`, the line names the judged formats it is about ("loss scale for e5m2: ...").
 */
export function describeLossScale(scale: AppliedLossScale, formats?: readonly string[], answer?: LossScaleAnswer): string {
  const window = scale.window;
  const power = (k: number | null): string => (k === null ? "none" : `2^${k}`);
  const head = formats === undefined ? "loss scale" : `loss scale for ${formats.join(", ")}`;
  switch (scale.origin) {
    case "plan":
      return `${head}: ${scaleText(scale.value)} (from the plan)${givenAgainstWindow(scale.value, answer)}.`;
    case "option":
      return `${head}: ${scaleText(scale.value)} (from the command line)${givenAgainstWindow(scale.value, answer)}.`;
    case "recommended": {
      // what sets each edge, when known; no empty "()" when neither is
      const edges = [
        window?.lowerEdgeSetBy ? `below it ${window.lowerEdgeSetBy} flushes` : "",
        window?.upperEdgeSetBy ? `above it ${window.upperEdgeSetBy} overflows` : "",
      ].filter((clause) => clause !== "");
      // "1 lies in the window too" only beside another pick: a pick of 2^0 is 1 itself
      const unscaledToo = (window?.lowestLog2 ?? 1) <= 0 && 0 <= (window?.highestLog2 ?? -1) && window?.pickLog2 !== 0;
      // running unscaled, judged against the per-tensor thresholds (src/scale/pick.ts): said when it leaves more than the pick
      const unscaled = answer?.needed === true ? answer.weighing?.unscaled : undefined;
      const more = unscaled === undefined ? 0 : unscaled.fails + unscaled.atRisk;
      return (
        `${head}: none in the plan; judged with the recommended 2^${window?.pickLog2} = ${formatValue(scale.value)}, ` +
        `inside the window ${power(window?.lowestLog2 ?? null)} to ${power(window?.highestLog2 ?? null)}` +
        (edges.length > 0 ? ` (${edges.join("; ")})` : "") +
        (unscaledToo ? `; 1 (no scaling) lies in the window too${more > 0 ? `, but would leave ${more} finding${more === 1 ? "" : "s"} on the gradients and the scaled loss` : ""}` : "") +
        "."
      );
    }
    case "none":
      if (window === undefined) return `${head}: none given, gradients judged unscaled.`;
      return (
        `${head}: none given, and no static loss scale fits the ${window.format} gradients (` +
        (window.lowestLog2 === null
          ? `${window.lowerEdgeSetBy ?? "a gradient"} flushes even at the largest scale searched`
          : `${window.lowerEdgeSetBy ?? "a gradient"} needs at least 2^${window.lowestLog2} not to flush`) +
        ", " +
        (window.highestLog2 === null
          ? `${window.upperEdgeSetBy ?? "a gradient"} overflows even at the smallest scale searched`
          : `${window.upperEdgeSetBy ?? "a gradient"} allows at most 2^${window.highestLog2} not to overflow`) +
        "); gradients judged unscaled."
      );
  }
}

/** A loss scale as written: a power of two as 2^k (with its value where that reads plainly: 2^10 = 1024), else the value. */
function scaleText(value: number): string {
  const k = Math.log2(value);
  if (!Number.isInteger(k) || k === 0) return formatValue(value);
  return value >= 1e-4 && value < 1e6 ? `2^${k} = ${formatValue(value)}` : `2^${k}`;
}

// where a given scale lies against the window searched for the same gradients, when the check searched one
function givenAgainstWindow(value: number, answer: LossScaleAnswer | undefined): string {
  const w = answer?.window;
  if (answer?.requested?.scale !== value || w === undefined || w.empty) return "";
  const k = Math.log2(value);
  const span = `the window 2^${w.lowestLog2} to 2^${w.highestLog2}`;
  const binades = (n: number) => `${Number.isInteger(n) ? String(n) : formatBinades(n)} binade${n === 1 ? "" : "s"}`;
  if (k > w.highestLog2!) return `, ${binades(k - w.highestLog2!)} above ${span} (see Loss scale)`;
  if (k < w.lowestLog2!) return `, ${binades(w.lowestLog2! - k)} below ${span} (see Loss scale)`;
  return `, inside ${span}`;
}

/** Word-wrap text to `width` columns; continuation lines start with `indent`. */
export function wrap(text: string, width: number, firstIndent: string, indent: string): string {
  const words = text.split(/\s+/).filter((w) => w !== "");
  const lines: string[] = [];
  let line = firstIndent;
  let empty = true;
  for (const word of words) {
    if (!empty && line.length + 1 + word.length > width) {
      lines.push(line);
      line = indent + word;
    } else if (empty && line.trim() !== "" && line.length + word.length > width) {
      // a head too long for the first word as well (a long layer name): the text starts on the next line
      lines.push(line.trimEnd());
      line = indent + word;
    } else {
      line += (empty ? "" : " ") + word;
    }
    empty = false;
  }
  lines.push(line);
  return lines.join("\n") + "\n";
}

function binadesCell(value: number | null): string {
  return value === null ? "" : formatBinades(value);
}

/** rms or max as "start→end" when they differ by more than 5%, else one value. */
function pair(start: number, end: number): string {
  if (start === end || (start > 0 && Math.abs(end / start - 1) <= 0.05)) return formatValue(start, 2);
  return `${formatValue(start, 2)}→${formatValue(end, 2)}`;
}

/**
 * The loss-scale lines under the plan: one when every format was judged at the result's scale, else one per scale
 * with the formats judged at it. Formats are named when any judged format is not the plan's.
 */
export function lossScaleLines(result: CheckResult): string[] {
  const groups: { scale: AppliedLossScale; formats: string[] }[] = [];
  for (const format of result.formats) {
    const scale = format.lossScale ?? result.lossScale;
    let group = groups.find((g) => sameScale(g.scale, scale));
    if (group === undefined) groups.push((group = { scale, formats: [] }));
    group.formats.push(format.format);
  }
  if (groups.length <= 1 && result.formats.every((f) => f.planned)) return [describeLossScale(result.lossScale, undefined, answerFor(result, result.lossScale))];
  return groups.map((g) => describeLossScale(g.scale, g.formats, answerFor(result, g.scale)));
}

// the check's loss-scale answer for the gradients a scale was applied to (a CheckAnswer has them; a bare judgement not)
function answerFor(result: CheckResult | CheckAnswer, scale: AppliedLossScale): LossScaleAnswer | undefined {
  if (!("lossScales" in result)) return undefined;
  const format = scale.window?.format ?? result.plan.gradients;
  for (const item of result.lossScales) if (item.status !== "not-needed" && item.answer.format === format) return item.answer;
  return undefined;
}

function sameScale(a: AppliedLossScale, b: AppliedLossScale): boolean {
  return a === b || (a.value === b.value && a.origin === b.origin && a.window?.format === b.window?.format);
}

/** The rows of the tensor table: each tensor in each format that holds it; with `all` false, only those at risk, failing first. */
export function tensorRows(result: CheckResult, all: boolean): { tensor: TensorCheck; risk: TensorCheckRisk }[] {
  const rows: { tensor: TensorCheck; risk: TensorCheckRisk }[] = [];
  for (const tensor of result.tensors) {
    for (const risk of tensor.risks) {
      if (!risk.judged) continue;
      if (all || risk.verdict !== "fits") rows.push({ tensor, risk });
    }
  }
  if (all) return rows;
  // stable: failing tensors first, each group in the check's order (forward, then backward)
  return [...rows.filter((row) => row.risk.verdict === "fails"), ...rows.filter((row) => row.risk.verdict !== "fails")];
}

/** "at risk", or with failing rows among them "at risk or failing (N fail)": a failing row is not merely at risk. */
function atRiskOrFailing(failing: number): string {
  return failing === 0 ? "at risk" : `at risk or failing (${failing} ${failing === 1 ? "fails" : "fail"})`;
}

/** "none of the 8 operation checks is at risk", in the singular for one ("the 1 operation check is not at risk"). */
export function noneAtRisk(count: number, noun: string): string {
  if (count === 0) return `no ${noun} to judge.`;
  return count === 1 ? `the 1 ${noun} is not at risk.` : `none of the ${count} ${noun}s is at risk.`;
}

/** Rows shown without --all. */
export const TENSOR_ROW_LIMIT = 30;

/** The tensor table (layer, role, format, rms, max, headroom, footroom, flushed, subnormal noise, overflow per step, verdict). */
export function renderTensorTable(rows: readonly { tensor: TensorCheck; risk: TensorCheckRisk }[], style: Style = PLAIN): string {
  // a format judged at another loss scale has the tensor's numbers after its own scale
  const cells: Cell[][] = rows.map(({ tensor, risk }) => {
    const statistics = risk.statistics ?? tensor.statistics;
    return [
      tensor.layer,
      tensor.role + (tensor.id.includes(":") ? `:${tensor.id.slice(tensor.id.indexOf(":") + 1)}` : ""),
      risk.format,
      pair(statistics.start.rms, statistics.end.rms),
      pair(statistics.start.max, statistics.end.max),
      binadesCell(risk.worst.headroom),
      binadesCell(risk.worst.footroom),
      formatPercent(risk.worst.flushedFraction),
      formatProbability(risk.worst.subnormalNoise),
      formatProbability(risk.worst.overflowRisk),
      verdictText(risk.verdict, style),
    ];
  });
  return renderTable(
    [
      { title: "layer", maxWidth: 40, cut: "middle" },
      { title: "role" },
      { title: "format" },
      { title: "rms", align: "right" },
      { title: "max", align: "right" },
      { title: "headroom", align: "right" },
      { title: "footroom", align: "right" },
      { title: "flushed", align: "right" },
      { title: "subnormal noise", align: "right" },
      { title: "overflow/step", align: "right" },
      { title: "verdict", align: "left" },
    ],
    cells,
    { indent: "  ", styleHeader: (text) => style.role("strong", text) },
  );
}

const HAZARD_WORDS: Readonly<Record<HazardCheck["kind"], string>> = {
  "softmax-exp": "softmax exp",
  "norm-sum-of-squares": "norm sum of squares",
  accumulation: "accumulation",
  "loss-value": "loss value",
  "gradient-sum": "gradient sum",
  "optimizer-constant": "optimizer epsilon",
  "optimizer-second-moment": "optimizer second moment",
};

/** The hazards section: one line per evaluation that is not "fits" (every evaluation with `all`). */
export function renderHazards(hazards: readonly HazardCheck[], all: boolean, width: number, style: Style = PLAIN): string {
  type Row = { hazard: HazardCheck; evaluation: HazardCheck["evaluations"][number] };
  const rows: Row[] = [];
  for (const hazard of hazards) {
    for (const evaluation of hazard.evaluations) if (all || evaluation.verdict !== "fits") rows.push({ hazard, evaluation });
  }
  const line = ({ hazard, evaluation }: Row): string =>
    wrap(evaluation.sentence, width, `  ${verdictText(evaluation.verdict, style)}  ${HAZARD_WORDS[hazard.kind]}, ${evaluation.layer ?? hazard.layer}, ${evaluation.format}: `, "      ");
  if (all) return rows.map(line).join("");
  // as the tensors: failing first (a stable sort keeps the network's order within a verdict); checks of one kind, format
  // and verdict (a norm in every block) show their first HAZARD_GROUP_LIMIT and a count, and at most HAZARD_ROW_LIMIT
  // lines in all, so a deep network's repeated findings do not bury the rest
  const ordered = [...rows].sort((a, b) => Number(b.evaluation.verdict === "fails") - Number(a.evaluation.verdict === "fails"));
  const groups = new Map<string, Row[]>();
  for (const row of ordered) {
    const key = `${row.hazard.kind} ${row.evaluation.format} ${row.evaluation.verdict}`;
    const group = groups.get(key);
    if (group === undefined) groups.set(key, [row]);
    else group.push(row);
  }
  let out = "";
  let shown = 0;
  for (const group of groups.values()) {
    if (shown >= HAZARD_ROW_LIMIT) break;
    // "and 1 more" would take the line the one hidden takes: a group one over the limit is shown whole
    const take = Math.min(group.length <= HAZARD_GROUP_LIMIT + 1 ? group.length : HAZARD_GROUP_LIMIT, HAZARD_ROW_LIMIT - shown);
    for (let i = 0; i < take; i++) out += line(group[i] as Row);
    shown += take;
    const first = group[0] as Row;
    if (group.length > take) {
      out += style.role("muted", `      and ${group.length - take} more ${HAZARD_WORDS[first.hazard.kind]} check${group.length - take === 1 ? "" : "s"} in ${first.evaluation.format} likewise.`) + "\n";
    }
  }
  if (shown < rows.length) {
    const failing = rows.filter((row) => row.evaluation.verdict === "fails").length;
    const summary = `${rows.length} operation checks ${atRiskOrFailing(failing)}, ${shown} shown (failing first, at most ${HAZARD_GROUP_LIMIT} of a kind); --all lists every one.`;
    out += style.role("muted", wrap(summary, width, "  ", "  ").trimEnd()) + "\n";
  }
  return out;
}

/**
 * Where an overall verdict comes from when no format's verdict is as bad: the optimizer check or the loss scale (README,
 * Verdicts), which the sections below tell; without it "Verdict fails" stands over a list of formats that all fit.
 */
function verdictSource(result: CheckResult): string {
  if (result.formats.some((f) => VERDICT_RANK[f.verdict] >= VERDICT_RANK[result.verdict])) return "";
  const answer = result as Partial<CheckAnswer>;
  const sources = [
    ...(answer.optimizer !== undefined && answer.optimizer.verdict === result.verdict ? ["the optimizer check"] : []),
    // an answer counts only when a judged format holds its gradients (src/check.ts)
    ...((answer.lossScales ?? []).some((item) => item.status === "empty" && result.formats.some((f) => f.format === item.format))
      ? ["the loss scale (no static scale fits)"]
      : []),
  ];
  return sources.length === 0 ? "" : ` (from ${sources.join(" and ")}; see below)`;
}

/** Operation-hazard lines of one kind, format and verdict shown without --all. */
export const HAZARD_GROUP_LIMIT = 3;

/** Operation-hazard lines shown without --all. */
export const HAZARD_ROW_LIMIT = 12;

/**
 * Render a check for the terminal.
 * @example renderCheckText(check(spec)) // => "headroom check: deep-relu-he ...\n"
 */
export function renderCheckText(result: CheckResult, options: CheckTextOptions = {}): string {
  const style = options.style ?? PLAIN;
  const width = options.width ?? 100;
  const all = options.all ?? false;
  let out = "";
  out += style.role("heading", `headroom check: ${result.spec.name}`) + ` (${result.spec.source})\n`;
  out += wrap(`plan ${result.plan.name}: ${describePlan(result.plan)}.`, width, "", "  ");
  for (const line of lossScaleLines(result)) out += wrap(line, width, "", "  ");
  // profiles from tensor files or recorded statistics (the spec's `measured` section) are named; the rest are predicted
  const measured = result.tensors.filter((t) => t.source === "measured").map((t) => t.id);
  if (measured.length > 0) {
    const names = measured.length > 8 ? `${measured.slice(0, 8).join(", ")} and ${measured.length - 8} more` : measured.join(", ");
    out += wrap(`measured profiles: ${names}; every other profile is predicted.`, width, "", "  ");
  }
  // recorded rows no tensor took: said here, not only among the assumptions, as the user asked for them
  const unused = result.unusedStatistics ?? [];
  if (unused.length > 0) {
    out += wrap(`recorded statistics not used: ${unused.map((u) => u.sentence).join("; ")}.`, width, "", "  ");
  }

  out += "\n" + style.role("strong", "Verdict") + ` ${verdictText(result.verdict, style)}${verdictSource(result)}\n`;
  out += "\n" + style.role("strong", "Verdict per format") + "\n";
  const formatWidth = Math.max(...result.formats.map((f) => f.format.length));
  for (const format of result.formats) {
    const holds = format.holds.map((entry) => PLAN_ENTRY_WORDS[entry]).join(", ");
    const verdict = verdictText(format.verdict, style) + " ".repeat(Math.max(0, 7 - VERDICT_WORDS[format.verdict].length));
    out +=
      `  ${format.format.padEnd(formatWidth)}  ${verdict}  ` +
      style.role("muted", `${format.planned ? "holds" : "in place of the plan's formats, holds"} ${holds || "nothing"}; ${judgedInFormat(result, format)}`) +
      "\n";
    const shown = format.reasons.slice(0, 5);
    for (const reason of shown) out += wrap(reason, width, "    - ", "      ");
    if (format.reasons.length > shown.length) {
      const more = format.reasons.length - shown.length;
      out += `    - and ${more} more ${more === 1 ? "kind" : "kinds"} of finding (--json lists every one).\n`;
    }
    const lost = format.valuesLost;
    if (lost !== undefined) out += wrap(valuesLostSentence(lost), width, "    ", "    ");
  }

  if ("optimizer" in result) out += renderDecisions(result as CheckAnswer, width, style);

  const rows = tensorRows(result, all);
  const judgedCount = result.tensors.reduce((n, t) => n + t.risks.filter((r) => r.judged).length, 0);
  out += "\n" + style.role("strong", all ? "Tensors" : "Tensors at risk") + "\n";
  if (rows.length === 0) {
    out += `  ${noneAtRisk(judgedCount, "tensor")}\n`;
  } else {
    const shown = all ? rows : rows.slice(0, TENSOR_ROW_LIMIT);
    out += renderTensorTable(shown, style);
    if (!all) {
      const more = rows.length - shown.length;
      out += style.role(
        "muted",
        `  ${rows.length} of ${judgedCount} ${atRiskOrFailing(rows.filter((row) => row.risk.verdict === "fails").length)}${more > 0 ? `, the first ${shown.length} shown (failing first)` : ""}; --all lists every tensor.`,
      ) + "\n";
    }
    // the legend of the table's columns, only under a table
    out += style.role(
      "muted",
      wrap(
        "rms and max are after the loss scale, at the start→end of the horizon; max is the level the largest element " +
          `passes once in ${formatValue(1 / result.thresholds.maxQuantile)} steps; headroom and footroom are in binades` +
          // an 8-bit conversion with scale factors multiplies by 2^k first: log2(448 / max) is not what the column holds
          (shown.some((row) => row.risk.scaleLog2.start !== 0 || row.risk.scaleLog2.end !== 0)
            ? ", after the per-tensor scale factor of an 8-bit format (rms and max are before it)"
            : "") +
          "; flushed is the share of nonzero elements that round to zero; subnormal noise the share of the squared norm " +
          "that rounding the subnormal elements adds.",
        width,
        "  ",
        "  ",
      ).trimEnd(),
    ) + "\n";
  }

  const hazardText = renderHazards(result.hazards, all, width, style);
  const evaluationCount = result.hazards.reduce((n, h) => n + h.evaluations.length, 0);
  out += "\n" + style.role("strong", all ? "Operation hazards" : "Operation hazards at risk") + "\n";
  if (hazardText === "") out += `  ${noneAtRisk(evaluationCount, "operation check")}\n`;
  else out += hazardText;

  out += "\n" + style.role("strong", "Assumptions") + "\n";
  if (all) {
    for (const assumption of result.assumptions) out += wrap(assumption, width, "  - ", "    ");
  } else {
    out += wrap(
      `${result.assumptions.length} assumptions stand behind these numbers (--all or --json lists them); the first: ` +
        (result.assumptions[0] ?? "none"),
      width,
      "  ",
      "  ",
    );
  }
  out += "\n" + wrap(result.caution, width, "", "");
  return out;
}

// how many tensors a format judges; a format holding no stored tensor (binary32 for the optimizer states) says what is
// judged in it instead, so "0 tensors" does not read as a check that judged nothing
function judgedInFormat(result: CheckResult, format: CheckResult["formats"][number]): string {
  if (format.tensorsJudged > 0) return `${format.tensorsJudged} ${format.tensorsJudged === 1 ? "tensor" : "tensors"}`;
  let operations = 0;
  for (const h of result.hazards) if (h.evaluations.some((e) => e.format === format.format)) operations++;
  if (operations === 0) return "no stored tensor or operation judged in it";
  return `no stored tensor; ${operations} ${operations === 1 ? "operation" : "operations"} judged in it`;
}
