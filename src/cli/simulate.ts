import { getFormat } from "../formats/index.js";
import { hasFiniteMagnitudes } from "../simulate/stats.js";
import type { MagnitudeProfile } from "../magnitude/index.js";
import { predict } from "../magnitude/index.js";
import { escapeHtml } from "../report/html.js";
import { formatBinades, formatBytes, formatPercent, formatProbability, formatValue } from "../report/number.js";
import { renderTable, type Cell } from "../report/table.js";
import {
  resolvePlan,
  shrinkSpec,
  simulate,
  SimulationTooLarge,
  zeroAfterStorage,
  type Comparison,
  type ComparisonRow,
  type DefaultLossScale,
  type DefaultLossScaleAnswer,
  type FormatCounts,
  type MeasuredTensor,
  type TensorStats,
  type ShrinkFactors,
  type SimulationReport,
  type SimulationResult,
} from "../simulate/index.js";
import { stepTrouble } from "../simulate/steps.js";
import { flushThreshold, simulatedPlan } from "../simulate/compare.js";
import { CheckInputError, gradientLossScale, unscaledReason } from "../check.js";
import { scaleWords } from "../risk/words.js";
import type { SpecResult } from "../spec/index.js";
import type { NetworkSpec } from "../spec/types.js";
import { parseLossScale } from "./loss-scale.js";
import { DEFAULT_THRESHOLDS } from "../risk/catalogue.js";
import { subnormalNoiseLimit } from "../risk/subnormal-noise.js";
import { writeFileAtomic } from "./shared.js";
import { buildGraph } from "../graph/index.js";
import { PredictionRangeError } from "../magnitude/range.js";
import { loadSpecReporting, reportGraphIssues } from "./load-spec.js";
import { EXIT, raiseExitCode, UserError } from "./errors.js";
import { splitList } from "./lists.js";
import { mixtureQuantile } from "../numeric/derivative-mixture.js";
import { fieldMixture } from "../numeric/gated-mixture.js";

interface SimulateFlags {
  steps: string;
  seed: string;
  draws: string;
  shrink?: string;
  plan?: string;
  lossScale?: string;
  rounding: boolean;
  memory: string;
  microBatches: string;
  all?: boolean;
  json?: boolean;
  html?: string;
}

const ESTIMATE_NOTE =
  "A simulation on random data is a second opinion, not a guarantee; predictions are estimates. Confirm with a short training run.";

/** `headroom simulate SPEC`: run the network in float64 with planned storage rounding and compare with the prediction. */
export async function runSimulate(path: string, flags: SimulateFlags): Promise<void> {
  const loaded = await loadSpecReporting(path);
  if (loaded === undefined) return;
  const options = {
    steps: wholeNumber("--steps", flags.steps, 0, 10000),
    seed: wholeNumber("--seed", flags.seed, 0, Number.MAX_SAFE_INTEGER),
    draws: wholeNumber("--draws", flags.draws, 1, 1000),
    round: flags.rounding,
    memoryLimit: positive("--memory", flags.memory) * 2 ** 30,
    microBatches: wholeNumber("--micro-batches", flags.microBatches, 1, 1000),
    predict,
    defaultLossScale: checkedLossScale(loaded.spec),
    ...(flags.shrink !== undefined ? { shrink: parseShrink(flags.shrink) } : {}),
    ...(flags.plan !== undefined ? { plan: flags.plan } : {}),
    ...(flags.lossScale !== undefined ? { lossScale: parseLossScale(flags.lossScale) as number } : {}),
  };
  if (!simulationBuilds(path, loaded, options.plan, options.shrink)) return;
  let report: SimulationReport;
  try {
    report = simulate(loaded.spec, options);
  } catch (error) {
    if (error instanceof SimulationTooLarge) throw new UserError(`${path}: ${error.message}`);
    // values of the spec that the network cannot be built from or that the prediction cannot carry: positioned
    if (error instanceof CheckInputError || error instanceof PredictionRangeError) return reportGraphIssues(loaded, error.issues);
    // any other error is headroom's own (exit code 3): every option was checked above
    throw error;
  }
  if (flags.html !== undefined) {
    writeFileAtomic(flags.html, renderSimulationHtml(report));
  }
  process.stdout.write(flags.json ? renderSimulationJson(report) : renderSimulationText(report, { all: flags.all === true }));
  raiseExitCode(simulationExitCode(report.result));
}

/**
 * The input problems the simulation would otherwise refuse with a bare RangeError, checked first: a `--plan` the spec
 * does not have (a UserError), and a network, shrunk as asked, that cannot be built (its issues positioned in the
 * spec, exit code 2). False when the issues were reported.
 */
function simulationBuilds(path: string, loaded: Extract<SpecResult, { ok: true }>, plan: string | undefined, shrink: Partial<ShrinkFactors> | undefined): boolean {
  if (plan !== undefined) {
    try {
      resolvePlan(loaded.spec, plan);
    } catch (error) {
      if (error instanceof RangeError) throw new UserError(`${path}: --plan: ${error.message}`);
      throw error;
    }
  }
  let shrunk: ReturnType<typeof shrinkSpec>;
  try {
    shrunk = shrinkSpec(loaded.spec, shrink);
  } catch (error) {
    // a shrink that would change what the network is (one class left) is refused as bad input
    if (error instanceof RangeError) throw new UserError(`${path}: ${error.message}`);
    throw error;
  }
  const built = buildGraph(shrunk.spec);
  if (built.ok) return true;
  const after = shrunk.report.shrunk ? "after --shrink: " : "";
  reportGraphIssues(loaded, built.issues.map((issue) => ({ ...issue, message: after + issue.message })));
  return false;
}

/**
 * simulate's loss scale when neither --loss-scale nor the plan gives one: the scale `check` judges the gradients of
 * the network as simulated at (its window's pick when the gradients need a scale, else 1), so the second opinion
 * runs under the conditions of the verdict it checks. It is the check of the simulated network, shrunk when asked,
 * not of the full-size spec: the measurements are compared with the prediction for the shrunk network at the scale
 * run, and shrinking moves the gradients and so the window (the loss is a mean over a smaller batch; at
 * `--shrink width=8` deep-relu-glorot's window is 2^19..2^19 against 2^17..2^19 at full size: the full-size pick 2^18
 * lies below the shrunk network's window, where its prediction has gradients flushing beyond the tolerance). The
 * full-size pick is named beside it when it differs. Like the simulation, this check uses no measured data of the spec.
 */
export function checkedLossScale(original: NetworkSpec): DefaultLossScale {
  return (simulated, { plan, shrunk }): DefaultLossScaleAnswer => {
    // the check's loss-scale answer alone, not a whole check
    const applied = gradientLossScale(simulated, { plan: plan.name });
    if (applied.origin === "recommended") {
      if (!shrunk) return { value: applied.value, origin: "recommended", reason: "recommended by check" };
      const full = fullSizeScale(original, plan.name);
      const beside = full === undefined || full.value === applied.value ? "" : full.origin === "recommended" ? `; ${scaleWords(full.value)} for the full-size one` : "; no static scale for the full-size one";
      return { value: applied.value, origin: "recommended", reason: `recommended by check for the shrunk network${beside}` };
    }
    const unscaled = unscaledReason(plan);
    if (unscaled !== null) return { value: 1, origin: "none", reason: `none needed: ${unscaled.sentence}` };
    // a plan whose gradients need a scale has a window; origin "none" then means it is empty (src/risk/judge.ts)
    return { value: 1, origin: "none", reason: `check finds no static scale that fits the ${plan.gradients} gradients${shrunk ? " of the shrunk network" : ""}` };
  };
}

function fullSizeScale(spec: NetworkSpec, plan: string): { value: number; origin: string } | undefined {
  try {
    return gradientLossScale(spec, { plan });
  } catch (error) {
    // the simulation runs the shrunk network only; a full-size network that does not build just goes unnamed
    if (error instanceof CheckInputError) return undefined;
    throw error;
  }
}

function wholeNumber(flag: string, text: string, min: number, max: number): number {
  const value = Number(text);
  if (!Number.isInteger(value) || value < min || value > max) {
    throw new UserError(`${flag} "${text}": expected a whole number from ${min} to ${max}`);
  }
  return value;
}

function positive(flag: string, text: string): number {
  const value = Number(text);
  if (!(value > 0) || !Number.isFinite(value)) throw new UserError(`${flag} "${text}": expected a positive number`);
  return value;
}

const SHRINK_KEYS = ["width", "batch", "positions", "classes", "image"] as const;

const SHRINK_ACCEPTED = `expected a factor such as 4, or ${SHRINK_KEYS.map((k) => `${k}=N`).join(",")} with whole N ≥ 1`;

/** `4` (widths, batch and positions ÷4) or `width=4,batch=8,...` (a list read as every list option is, then its items). */
export function parseShrink(text: string): Partial<ShrinkFactors> {
  const trimmed = text.trim();
  if (/^\d+$/.test(trimmed)) {
    const f = Number(trimmed);
    if (f < 1) throw new UserError(`--shrink "${text}": a factor must be a whole number of at least 1`);
    return { width: f, batch: f, positions: f };
  }
  const out: Partial<ShrinkFactors> = {};
  for (const part of splitList("--shrink", text, "factor", SHRINK_ACCEPTED)) {
    const match = /^([a-z]+)\s*=\s*(\d+)$/.exec(part);
    const key = match?.[1] as (typeof SHRINK_KEYS)[number] | undefined;
    if (match === null || key === undefined || !SHRINK_KEYS.includes(key) || Number(match[2]) < 1) {
      throw new UserError(`--shrink "${text}": ${SHRINK_ACCEPTED}`);
    }
    // two factors for one key may differ: neither is taken silently
    if (out[key] !== undefined) throw new UserError(`--shrink "${text}": ${key} is given twice; give each factor once`);
    out[key] = Number(match[2]);
  }
  return out;
}

/**
 * 1 when a stored tensor overflowed (or saturated) or held non-finite values in the simulation — at the first
 * measurement or after the optimizer steps — or when the scaled loss overflowed the accumulate format, or when a step
 * was skipped for an overflowed gradient or made an infinite or NaN update (each median over draws, as the tensors'
 * counts are); 0 otherwise. The loss is not stored (the run keeps it in binary64): its counts say what keeping the
 * scaled loss in the activation format would do, which check too calls at risk only, so they list it but set no exit
 * code; in the accumulate format, where the loss is summed, check says "fails" (src/risk/hazards.ts lossValue), and so
 * does the exit code.
 */
export function simulationExitCode(result: SimulationResult): number {
  const trouble = stepTrouble(result);
  const bad = result.tensors.some((t) => overflowedIn(t, t.median, result) || (t.after !== undefined && overflowedIn(t, t.after, result))) || trouble.skipped > 0 || trouble.nonFiniteUpdates > 0;
  return bad ? EXIT.findings : EXIT.ok;
}

/** Whether a measurement of the tensor (first or after the steps) has an overflow that sets the exit code. */
function overflowedIn(t: MeasuredTensor, stats: TensorStats, result: SimulationResult): boolean {
  if (t.countsScaledBy === undefined) return overflowShare(stats.counts) > 0;
  const summed = summedLossCounts(t, result, stats);
  return summed !== undefined && overflowShare(summed) > 0;
}

/**
 * The scaled loss's counts in the accumulate format, where check judges its sum: a line of their own when the plan
 * accumulates in another format than its activations', else the activation format's counts themselves (the run counts
 * one format once, as check does).
 */
function summedLossCounts(t: MeasuredTensor, result: SimulationResult, stats: TensorStats = t.median): FormatCounts | undefined {
  if (t.countsScaledBy === undefined) return undefined;
  if (stats.accumulateCounts !== undefined) return stats.accumulateCounts;
  return result.formats.accumulate === result.formats.activations ? stats.counts : undefined;
}

function overflowShare(counts: FormatCounts): number {
  return counts.overflowed + counts.saturated + counts.nonFinite;
}

/**
 * Whether a simulated tensor has a finding, by the check's own at-risk thresholds (DEFAULT_THRESHOLDS): a flushed share
 * or a subnormal rounding noise (as a share of the squared norm, against the limit check's subnormal rule sets for the
 * format) that check would call at risk, or any overflow, clipping or non-finite value (each one a real event in the
 * run). Any single flushed element counted before, listing hundreds of weights at "<0.1%".
 */
export function simulatedFinding(counts: MeasuredTensor["median"]["counts"]): boolean {
  const t = DEFAULT_THRESHOLDS;
  return (
    counts.flushed >= t.flushedAtRisk ||
    counts.subnormalNoise > subnormalNoiseLimit(getFormat(counts.format), t.subnormalNoiseAtRisk) ||
    overflowShare(counts) > 0
  );
}

/** A measured magnitude, or "none finite" when every nonzero element was infinite or NaN (its 0 is no measurement). */
function magnitudeCell(stats: TensorStats, value: number, blank = ""): string {
  return hasFiniteMagnitudes(stats) ? formatValue(value) : blank;
}

/** The measured rms in words, with the share left out of it when some elements were infinite or NaN. */
function measuredRmsWords(stats: TensorStats): string {
  if (!hasFiniteMagnitudes(stats)) return `measured rms: none finite (${formatPercent(stats.nonFiniteFraction)} infinite or NaN)`;
  const left = stats.nonFiniteFraction > 0 ? ` over the finite values (${formatPercent(stats.nonFiniteFraction)} infinite or NaN)` : "";
  return `measured rms ${formatValue(stats.rms)}${left}`;
}

/** The terminal report: header, what was shrunk, the tensor table, disagreements, optimizer steps, assumptions. */
export function renderSimulationText(report: SimulationReport, options: { all?: boolean } = {}): string {
  const { result, comparison } = report;
  const lines: string[] = [];
  const f = result.formats;
  lines.push(`headroom simulate: ${result.specName}, plan ${result.planName}`);
  lines.push(
    `  stored: activations ${f.activations}, weights ${f.weights}, gradients ${f.gradients}, optimizer states ${f.optimizerStates}, ` +
      `master weights ${f.masterWeights}; accumulate ${f.accumulate}; ${lossScaleWords(result)}` +
      (result.rounded ? "" : " (no rounding: binary64 throughout; counts say what storing would do)"),
  );
  const seeds = result.seeds.length === 1 ? `seed ${result.seeds[0]}` : `seeds ${result.seeds[0]}–${result.seeds[result.seeds.length - 1]} (median of ${result.seeds.length} draws)`;
  lines.push(`  ${seeds}; ${result.microBatches.run} of ${result.microBatches.wanted} micro-batch${result.microBatches.wanted === 1 ? "" : "es"} per step; about ${formatBytes(result.memory.estimateBytes)} of memory`);
  if (result.shrink.shrunk) {
    lines.push("", "Shrunk for speed:");
    for (const change of result.shrink.changes) lines.push(`  - ${change}`);
    for (const warning of result.shrink.warnings) lines.push(`  - warning: ${warning}`);
    lines.push("  Predictions below are for the shrunk network (the same analytic rules); the full-size prediction is in the \"full size\" column.");
  }
  lines.push("");
  const rows = comparison?.rows ?? [];
  const byId = new Map(rows.map((r) => [r.id, r]));
  const shown = result.tensors.filter(
    (t) =>
      options.all === true ||
      simulatedFinding(t.median.counts) ||
      (t.median.accumulateCounts !== undefined && simulatedFinding(t.median.accumulateCounts)) ||
      byId.get(t.id)?.disagrees === true ||
      (t.after !== undefined && overflowShare(t.after.counts) > 0),
  );
  // a column for elements infinite or NaN in the run (outside rms, max, quantiles) only when some shown tensor has any
  const nonFinite = shown.some((t) => t.median.nonFiniteFraction > 0 || (t.after?.nonFiniteFraction ?? 0) > 0);
  const columns = [
    { title: "tensor", maxWidth: 60, cut: "middle" as const },
    { title: "format" },
    { title: "predicted rms" },
    // right-aligned as the numbers it holds, "none finite" included
    { title: "measured rms", align: "right" as const },
    { title: "diff" },
    ...(result.shrink.shrunk ? [{ title: "full size" }] : []),
    { title: "max" },
    { title: "p1" },
    { title: "p50" },
    { title: "p99" },
    { title: "zeros" },
    ...(nonFinite ? [{ title: "non-finite" }] : []),
    { title: "flushed pred" },
    { title: "flushed" },
    { title: "subnormal" },
    { title: "subnormal noise" },
    { title: "overflow" },
    ...(result.steps > 0 ? [{ title: `rms after ${result.steps}`, align: "right" as const }, { title: `overflow after ${result.steps}` }] : []),
  ];
  const cells: Cell[][] = shown.flatMap((t) => {
    const row = byId.get(t.id);
    const m = t.median;
    const held = m.accumulateCounts;
    // the scaled loss held in the accumulate format: its shares on a line of their own, under the loss's, the other
    // columns blank (found by title, so a new column cannot shift them)
    const accumulateLine: Cell[][] = [];
    if (held !== undefined) {
      const cells: Record<string, Cell> = {
        tensor: `${t.id} (accumulate)`,
        format: held.format,
        flushed: formatPercent(held.flushed),
        subnormal: formatPercent(held.subnormal),
        // the subnormal noise is a ratio to the squared norm, no share of elements: written as check's table writes it
        "subnormal noise": formatProbability(held.subnormalNoise),
        overflow: formatPercent(overflowShare(held)),
      };
      const heldAfter = t.after?.accumulateCounts;
      if (heldAfter !== undefined) cells[`overflow after ${result.steps}`] = formatPercent(overflowShare(heldAfter));
      accumulateLine.push(columns.map((c) => cells[c.title] ?? ""));
    }
    const line: Cell[] = [
      t.id,
      m.counts.format,
      row ? formatValue(row.predictedRms) : "",
      magnitudeCell(m, m.rms, "none finite"),
      row && !Number.isNaN(row.differenceBinades) ? formatBinades(row.differenceBinades) : "",
      ...(result.shrink.shrunk ? [row?.fullSizeRms !== undefined ? formatValue(row.fullSizeRms) : ""] : []),
      magnitudeCell(m, m.max),
      magnitudeCell(m, m.quantiles[0]),
      magnitudeCell(m, m.quantiles[2]),
      magnitudeCell(m, m.quantiles[4]),
      formatPercent(m.zeroFraction),
      ...(nonFinite ? [formatPercent(m.nonFiniteFraction)] : []),
      row && !Number.isNaN(row.predictedFlushed) ? formatPercent(row.predictedFlushed) : "",
      formatPercent(m.counts.flushed),
      formatPercent(m.counts.subnormal),
      formatProbability(m.counts.subnormalNoise),
      formatPercent(overflowShare(m.counts)),
      ...(result.steps > 0
        ? t.after !== undefined
          ? [magnitudeCell(t.after, t.after.rms, "none finite"), formatPercent(overflowShare(t.after.counts))]
          : ["", ""]
        : []),
    ];
    return [line, ...accumulateLine];
  });
  lines.push(
    options.all === true
      ? `Every measured tensor (${result.tensors.length}); diff = log2(measured / predicted rms), rms over finite nonzero elements, quantiles of |x|:`
      : `Tensors with findings or disagreements: ${shown.length} of the ${result.tensors.length} measured (--all lists every one); diff = log2(measured / predicted rms):`,
  );
  lines.push(renderTable(columns, cells).trimEnd());
  if (nonFinite) {
    lines.push(
      "  non-finite: the share of elements infinite or NaN in the run (after an overflow upstream), left out of rms, max and " +
        "quantiles, which are of the finite nonzero elements; \"none finite\": no finite nonzero element was left to measure.",
    );
  }
  const loss = scaledLoss(shown, result);
  if (loss !== undefined) lines.push(`  ${lossNote(loss, result)}`);
  if (comparison !== undefined) lines.push("", ...disagreementLines(comparison));
  if (result.steps > 0) lines.push("", ...stepLines(result));
  lines.push("", "Assumptions:");
  for (const a of result.assumptions) lines.push(`  - ${a}`);
  lines.push("", ESTIMATE_NOTE);
  return lines.join("\n") + "\n";
}

/** The loss row whose shares need a word: taken at a loss scale other than 1, or judged as a sum. */
function scaledLoss(tensors: readonly MeasuredTensor[], result: SimulationResult): MeasuredTensor | undefined {
  return tensors.find((t) => t.countsScaledBy !== undefined && (t.countsScaledBy !== 1 || summedLossCounts(t, result) !== undefined));
}

/** What the loss's shares are of and which of them sets the exit code, for the text and the page alike. */
function lossNote(loss: MeasuredTensor, result: SimulationResult): string {
  const scaled = loss.countsScaledBy === 1 ? "the loss" : `the loss times the loss scale ${scaleWords(loss.countsScaledBy!)} (${formatValue(loss.median.rms * loss.countsScaledBy!)})`;
  const held = loss.median.accumulateCounts;
  const summed = summedLossCounts(loss, result) !== undefined;
  const where =
    held !== undefined
      ? ` and, on the line below, summed in the accumulate format, ${held.format}`
      : summed
        ? `, which is also the accumulate format it is summed in`
        : "";
  return (
    `${loss.id}: the shares are of ${scaled} kept in the activation format${where}, ` +
    `as check judges the loss value; the magnitudes are the loss's own. The run keeps the loss in binary64, so ` +
    (summed ? `only an overflow of the sum (which check says fails) sets the exit code.` : `it sets no exit code.`)
  );
}

/**
 * The scaled loss's shares on the page as the text gives them: a line in the activation format and, when the plan
 * accumulates in another format, a line "(accumulate)" for the sum; empty when the loss needs no word.
 */
function lossTableHtml(result: SimulationResult): string {
  const loss = scaledLoss(result.tensors, result);
  if (loss === undefined) return "";
  const line = (name: string, c: FormatCounts): string =>
    `<tr><td>${escapeHtml(name)}</td><td>${escapeHtml(c.format)}</td>` +
    [c.flushed, c.subnormal, overflowShare(c)].map((x) => `<td>${escapeHtml(formatPercent(x))}</td>`).join("") +
    "</tr>";
  const held = loss.median.accumulateCounts;
  return (
    `<table class="loss"><tr><th>tensor</th><th>format</th><th>flushed</th><th>subnormal</th><th>overflow</th></tr>\n` +
    line(loss.id, loss.median.counts) +
    (held !== undefined ? "\n" + line(`${loss.id} (accumulate)`, held) : "") +
    `</table>\n<p>${escapeHtml(lossNote(loss, result))}</p>`
  );
}

/**
 * The loss scale and where it came from, e.g. "loss scale 2^18 (recommended by check; --loss-scale to change)".
 * The number as check words it (2^k), so the two outputs can be read side by side.
 */
export function lossScaleWords(result: SimulationResult): string {
  const value = `loss scale ${scaleWords(result.lossScale)}`;
  switch (result.lossScaleOrigin) {
    case "option":
      return `${value} (given by --loss-scale)`;
    case "plan":
      return `${value} (the plan's)`;
    case "recommended":
    case "none":
      // a default chose it (its reason says why), or nothing did
      return result.lossScaleReason === undefined ? `${value} (none given)` : `${value} (${result.lossScaleReason}; --loss-scale to change)`;
  }
}

function disagreementLines(comparison: Comparison): string[] {
  const { tolerance, disagreements, rows, measuredOnly } = comparison;
  // the header counts every measured tensor; only those with a prediction can disagree with it: name the rest
  const rest = measuredOnly.length === 0 ? "" : ` (the other ${measuredOnly.length} measured ${measuredOnly.length === 1 ? "is an inner tensor" : "are inner tensors"} with no prediction)`;
  const out = [
    `Where prediction and measurement disagree (beyond ${tolerance.binades} binade in rms or ${tolerance.flushed} in the share zero after storage${levelWords(tolerance.flushedLevels)}): ${disagreements.length} of the ${rows.length} tensors with a prediction${rest}`,
  ];
  const list = disagreements.slice(0, 20);
  for (const r of list) out.push(`  - ${describe(r)}`);
  if (disagreements.length > list.length) out.push(`  … and ${disagreements.length - list.length} more (see --json)`);
  const { notCompared } = comparison;
  if (notCompared.length > 0) {
    const named = notCompared.slice(0, 6).map((r) => r.id).join(", ") + (notCompared.length > 6 ? `, and ${notCompared.length - 6} more` : "");
    // one reason for all of them (src/simulate/compare.ts NONE_FINITE)
    out.push(`  Not compared, ${plural(notCompared.length, "tensor")} with ${notCompared[0]!.notCompared!}: ${named}.`);
  }
  const adjusted = rows.find((r) => r.allMicroBatches !== undefined)?.allMicroBatches;
  if (adjusted !== undefined) {
    const { run, wanted } = adjusted;
    out.push(
      `  Weight gradients are predicted for the ${run} micro-batches run, not all ${wanted}: an element is zero after the sum only if each ` +
        `micro-batch left it zero, z^(${run}/${wanted}) of the share z predicted for all ${wanted} (the micro-batches independent, as the ` +
        `prediction takes them), and the rms of the nonzero elements keeps the sum's squared norm, which the run scales to the full sum's.`,
    );
  }
  return out;
}

// the verdict levels of the flushed share, as the header says them
function levelWords(levels: readonly number[] | undefined): string {
  if (levels === undefined || levels.length === 0) return "";
  return `, or on two sides of check's ${levels.map((l) => `${l * 100}%`).join(" or ")} of nonzero elements flushed, a factor of 2 apart`;
}

function describe(r: ComparisonRow): string {
  const m = r.measured.median;
  const zero = zeroAfterStorage(m);
  const predictedZero = r.predictedZeroFraction + r.predictedFlushed;
  const zeroText = Number.isNaN(predictedZero) ? "" : `; zero after storage ${formatPercent(zero)} measured, ${formatPercent(predictedZero)} predicted`;
  const difference = Number.isNaN(r.differenceBinades) ? "" : ` (${r.differenceBinades >= 0 ? "+" : ""}${formatBinades(r.differenceBinades)} binades)`;
  const flushedText = !Number.isNaN(r.predictedNonzeroFlushed) && r.measuredNonzeroFlushed !== r.predictedNonzeroFlushed
    ? `; nonzero elements flushed ${formatPercent(r.measuredNonzeroFlushed)} measured, ${formatPercent(r.predictedNonzeroFlushed)} predicted`
    : "";
  const all = r.allMicroBatches;
  const allText = all === undefined ? "" : `; predicted for the ${all.run} micro-batches run (for all ${all.wanted}: rms ${formatValue(all.rms)}, ${formatPercent(all.zeroFraction)} exact zeros)`;
  return `${r.id}: ${measuredRmsWords(m)}, predicted ${formatValue(r.predictedRms)}${difference}${zeroText}${flushedText}${allText}`;
}

/** The optimizer steps of the first draw: the table's columns and rows, and what its Adam column means (text and page). */
function stepTable(result: SimulationResult): { columns: { title: string }[]; rows: Cell[][]; note: string | null } {
  const history = result.history[0] ?? [];
  const largest = (values: number[]): string => (values.length > 0 ? formatPercent(Math.max(...values)) : "");
  // Adam's second moments, as check's second-moment rule judges them; non-finite updates only when some step made one
  const moments = history.some((h) => Object.keys(h.secondMomentsFlushed).length > 0);
  const nonFinite = history.some((h) => Object.values(h.nonFiniteUpdates).some((x) => x > 0));
  const rows: Cell[][] = history.map((h) => {
    const ratios = Object.values(h.updateRatio);
    return [
      h.step,
      formatValue(h.learningRate),
      formatValue(h.loss),
      h.skipped ? "skipped (overflow)" : "applied",
      largest(Object.values(h.swamped)),
      ratios.length > 0 ? formatValue(Math.max(...ratios)) : "",
      ...(moments ? [largest(Object.values(h.secondMomentsFlushed))] : []),
      ...(nonFinite ? [largest(Object.values(h.nonFiniteUpdates))] : []),
    ];
  });
  const columns = [
    { title: "step" },
    { title: "learning rate" },
    { title: "loss before" },
    { title: "update" },
    { title: "most swamped" },
    { title: "largest update/weight" },
    ...(moments ? [{ title: "most second moments flushed" }] : []),
    ...(nonFinite ? [{ title: "most update non-finite" }] : []),
  ];
  const note = moments
    ? `most second moments flushed: the largest share, over the weights, of Adam's second moments nonzero before storage that ${result.formats.optimizerStates} flushed to 0 (at step 1, (1 − β2)·g², which check's second-moment rule judges).`
    : null;
  return { columns, rows, note };
}

function stepLines(result: SimulationResult): string[] {
  const { columns, rows, note } = stepTable(result);
  const out = [`Optimizer steps (draw with seed ${result.seeds[0]}):`, renderTable(columns, rows).trimEnd()];
  if (note !== null) out.push(`  ${note}`);
  out.push(...troubleLines(result, "text"));
  return out;
}

/** The page's optimizer steps: the same table and notes as the terminal's, in HTML. */
function stepsHtml(result: SimulationResult): string {
  const { columns, rows, note } = stepTable(result);
  const head = `<tr>${columns.map((c) => `<th>${escapeHtml(c.title)}</th>`).join("")}</tr>`;
  const body = rows.map((row) => `<tr>${row.map((cell) => `<td>${escapeHtml(cell === null || cell === undefined ? "" : String(cell))}</td>`).join("")}</tr>`);
  const notes = [...(note === null ? [] : [note]), ...troubleLines(result, "page").map((line) => line.trim())];
  return (
    `<h2>${escapeHtml(`Optimizer steps (draw with seed ${result.seeds[0]})`)}</h2>\n<table class="loss">${head}\n${body.join("\n")}</table>\n` +
    notes.map((n) => `<p>${escapeHtml(n)}</p>`).join("\n")
  );
}

/** Sentences saying how the run diverged in its steps, and that it sets exit code 1; none when it did not. */
function troubleLines(result: SimulationResult, where: "text" | "page"): string[] {
  const trouble = stepTrouble(result);
  const out: string[] = [];
  const draws = result.seeds.length === 1 ? "" : ` (median over the ${result.seeds.length} draws)`;
  if (trouble.nonFiniteUpdates > 0) {
    // worst first, by the tensor ids the table uses; a few of them
    const sorted = [...trouble.nonFiniteWeights].sort((a, b) => b.share - a.share);
    const named = sorted.slice(0, 4).map((w) => `${weightTensorId(w.weight)} ${formatPercent(w.share)}`);
    const weights = named.join(", ") + (sorted.length > named.length ? `, and ${sorted.length - named.length} more` : "");
    const epsilon = result.epsilon !== undefined && result.epsilon.stored === 0 ? `: Adam's ε ${formatValue(result.epsilon.value)} is held as 0 in ${result.formats.optimizerStates}, so where a second moment is 0 too the update divides by zero` : "";
    out.push(
      `  ${plural(trouble.nonFiniteUpdates, "step")} made infinite or NaN updates${draws}${weights === "" ? "" : ` (share of the update's elements, worst step: ${weights})`}${epsilon}.`,
    );
  }
  if (trouble.skipped > 0) {
    const which = trouble.skippedSteps.length > 0 ? ` (step${trouble.skippedSteps.length === 1 ? "" : "s"} ${trouble.skippedSteps.join(", ")} in the draw above)` : "";
    out.push(`  ${plural(trouble.skipped, "step")} of ${result.steps} skipped${draws}${which}: a gradient was infinite or NaN once the loss scale was removed.`);
  }
  const overflowed = result.tensors.filter((t) => t.after !== undefined && overflowShare(t.after.counts) > 0);
  const after = overflowed.length;
  // the terminal's table has a column for them; the page names them
  const which =
    where === "text"
      ? ` (the column "overflow after ${result.steps}")`
      : `: ${overflowed.slice(0, 6).map((t) => `${t.id} ${formatPercent(overflowShare(t.after!.counts))}`).join(", ")}${after > 6 ? `, and ${after - 6} more` : ""}`;
  if (after > 0) out.push(`  After the steps, ${plural(after, "stored tensor")} overflowed or held infinite or NaN values${which}.`);
  if (out.length > 0) out.unshift("The run diverged, so the exit code is 1:");
  return out;
}

/** A weight's tensor id from the engine's key `<layer>/<weight name>` (`fc1/bias` → `fc1/weight:bias`). */
function weightTensorId(key: string): string {
  const cut = key.lastIndexOf("/");
  const name = key.slice(cut + 1);
  return `${key.slice(0, cut)}/weight${name === "weight" ? "" : `:${name}`}`;
}

function plural(n: number, noun: string): string {
  return `${formatValue(n)} ${noun}${n === 1 ? "" : "s"}`;
}

/** A tensor's statistics for JSON: rms, max and quantiles null when no finite element was left to measure (not 0). */
function statsJson(stats: TensorStats): Omit<TensorStats, "rms" | "max" | "quantiles"> & { rms: number | null; max: number | null; quantiles: TensorStats["quantiles"] | null } {
  return hasFiniteMagnitudes(stats) ? stats : { ...stats, rms: null, max: null, quantiles: null };
}

/** The steps' divergence for JSON: medians over draws of the steps skipped and of those with non-finite updates. */
function stepTroubleJson(result: SimulationResult): { skippedSteps: number; stepsWithNonFiniteUpdates: number } {
  const trouble = stepTrouble(result);
  return { skippedSteps: trouble.skipped, stepsWithNonFiniteUpdates: trouble.nonFiniteUpdates };
}

/** JSON: the run's settings, every tensor with its measured median beside the prediction, disagreements, steps. */
export function renderSimulationJson(report: SimulationReport): string {
  const { result, comparison } = report;
  const rows = new Map((comparison?.rows ?? []).map((r) => [r.id, r]));
  const finite = (x: number): number | null => (Number.isFinite(x) ? x : null);
  const out = {
    spec: result.specName,
    plan: result.planName,
    formats: result.formats,
    lossScale: result.lossScale,
    lossScaleOrigin: result.lossScaleOrigin,
    ...(result.lossScaleReason !== undefined ? { lossScaleReason: result.lossScaleReason } : {}),
    seeds: result.seeds,
    steps: result.steps,
    rounded: result.rounded,
    microBatches: result.microBatches,
    memory: result.memory,
    shrink: result.shrink,
    tensors: result.tensors.map((t) => {
      const r = rows.get(t.id);
      return {
        id: t.id,
        layer: t.layer,
        role: t.role,
        slot: t.slot,
        ...(t.countsScaledBy !== undefined ? { countsScaledBy: t.countsScaledBy } : {}),
        measured: statsJson(t.median),
        ...(t.after !== undefined ? { afterSteps: statsJson(t.after) } : {}),
        ...(r !== undefined
          ? {
              predicted: {
                rms: r.predictedRms,
                log2Spread: r.predictedLog2Spread,
                zeroFraction: r.predictedZeroFraction,
                flushed: finite(r.predictedFlushed),
                overflow: finite(r.predictedOverflow),
                ...(r.fullSizeRms !== undefined ? { fullSizeRms: r.fullSizeRms } : {}),
                ...(r.allMicroBatches !== undefined ? { allMicroBatches: { rms: r.allMicroBatches.rms, zeroFraction: r.allMicroBatches.zeroFraction } } : {}),
              },
              differenceBinades: finite(r.differenceBinades),
              disagrees: r.disagrees,
              ...(r.notCompared !== undefined ? { notCompared: r.notCompared } : {}),
            }
          : {}),
      };
    }),
    ...(comparison !== undefined
      ? { tolerance: comparison.tolerance, disagreements: comparison.disagreements.map((r) => r.id), notCompared: comparison.notCompared.map((r) => r.id), measuredOnly: comparison.measuredOnly, predictedOnly: comparison.predictedOnly }
      : {}),
    history: result.history,
    ...(result.steps > 0 ? { stepTrouble: stepTroubleJson(result) } : {}),
    ...(result.epsilon !== undefined ? { epsilon: result.epsilon } : {}),
    initialLoss: result.initialLoss,
    assumptions: result.assumptions,
    note: ESTIMATE_NOTE,
  };
  return JSON.stringify(out, null, 2) + "\n";
}

/** |x| at the 1% and 99% points of a profile's nonzero elements (median draw), by its element shape. */
function predictedBand(p: MagnitudeProfile): [number, number] {
  // quantiles of |Z|: P(|Z| ≤ 0.01253) = 1%, P(|Z| ≤ 2.5758) = 99% (standard normal table)
  switch (p.shape) {
    case "gaussian":
    case "half-gaussian":
      return [0.01253 * p.rms, 2.5758 * p.rms];
    case "bounded":
      return [0.01253 * p.rms, Math.min(2.5758 * p.rms, p.bound ?? Infinity)];
    case "uniform":
      return [0.01 * Math.sqrt(3) * p.rms, 0.99 * Math.sqrt(3) * p.rms];
    case "constant":
      return [p.rms, p.rms];
    case "log-normal": {
      // log2|x| ~ N(m, s²) with m = log2 rms − s²·ln 2 (src/magnitude/types.ts); 2.3263 is the 99% normal quantile
      const s = p.elementLog2Spread ?? 0;
      const m = Math.log2(p.rms) - s * s * Math.LN2;
      return [2 ** (m - 2.3263 * s), Math.min(2 ** (m + 2.3263 * s), p.bound ?? Infinity)];
    }
    case "gaussian-mixture": {
      const mixture = p.mixture;
      if (mixture === undefined) return [0.01253 * p.rms, 2.5758 * p.rms];
      const law = fieldMixture(mixture);
      return [mixtureQuantile(law, 0.01) * p.rms, mixtureQuantile(law, 0.99) * p.rms];
    }
  }
}

/**
 * A self-contained page (inline SVG, no scripts): one row per compared tensor on a log2 axis, the predicted band
 * (1%–99% of element magnitudes at the median draw) in grey, the measured band (1%–99% of the measured
 * magnitudes, median over draws) in blue over it, rms marks, and the row's format edges (flush bound, largest finite).
 */
export function renderSimulationHtml(report: SimulationReport): string {
  const { result, comparison } = report;
  const rows = (comparison?.rows ?? []).filter((r) => r.measured.median.rms > 0 || r.predictedRms > 0);
  const logs: number[] = [];
  const bands = rows.map((r) => {
    const predicted = predictedBand(r.predictedProfile).map(Math.log2) as [number, number];
    const q = r.measured.median.quantiles;
    const measured = [Math.log2(q[0]), Math.log2(q[4])] as [number, number];
    for (const v of [...predicted, ...measured]) if (Number.isFinite(v)) logs.push(v);
    return { r, predicted, measured };
  });
  const lo = Math.floor(Math.min(0, ...logs)) - 1;
  const hi = Math.ceil(Math.max(0, ...logs)) + 1;
  const width = 960;
  const left = 330;
  const nonFinite = rows.some((r) => r.measured.median.nonFiniteFraction > 0);
  // room on the right for the share infinite or NaN
  const right = width - (nonFinite ? 170 : 20);
  const rowHeight = 16;
  const top = 34;
  const x = (log2: number): number => left + ((Math.min(Math.max(log2, lo), hi) - lo) / (hi - lo)) * (right - left);
  const f = (v: number): string => String(Math.round(v * 10) / 10);
  const height = top + rows.length * rowHeight + 10;
  const ticks: string[] = [];
  const step = Math.max(1, Math.ceil((hi - lo) / 16));
  for (let k = Math.ceil(lo / step) * step; k <= hi; k += step) {
    ticks.push(`<line x1="${f(x(k))}" x2="${f(x(k))}" y1="${top - 6}" y2="${height - 6}" class="grid"/><text x="${f(x(k))}" y="${top - 10}" class="tick">2^${k}</text>`);
  }
  const flushSubnormals = simulatedPlan(result)?.flushSubnormals ?? false;
  const body = bands
    .map(({ r, predicted, measured }, i) => {
      const y = top + i * rowHeight;
      const format = getFormat(r.format);
      const edges = [Math.log2(flushThreshold(format, flushSubnormals)), Math.log2(format.maxFinite)]
        .filter((v) => v >= lo && v <= hi)
        .map((v) => `<line x1="${f(x(v))}" x2="${f(x(v))}" y1="${y + 1}" y2="${y + rowHeight - 1}" class="edge"/>`)
        .join("");
      const band = (b: [number, number], cls: string, inset: number): string =>
        Number.isFinite(b[0]) && Number.isFinite(b[1])
          ? `<rect x="${f(x(b[0]))}" y="${y + inset}" width="${f(Math.max(x(b[1]) - x(b[0]), 1.5))}" height="${rowHeight - 2 * inset}" class="${cls}"/>`
          : "";
      const mark = (v: number, cls: string): string => (v > 0 ? `<line x1="${f(x(Math.log2(v)))}" x2="${f(x(Math.log2(v)))}" y1="${y + 1}" y2="${y + rowHeight - 1}" class="${cls}"/>` : "");
      const m = r.measured.median;
      const measuredText = measuredRmsWords(m).replace(/^measured rms/, "measured");
      const difference = Number.isNaN(r.differenceBinades) ? "" : ` (${formatBinades(r.differenceBinades)} binades)`;
      const title = `${r.id}: predicted rms ${formatValue(r.predictedRms)}, ${measuredText}${difference}, ${r.format}`;
      const lost =
        m.nonFiniteFraction > 0
          ? `<text x="${right + 6}" y="${y + rowHeight - 4}" class="nonfinite">${escapeHtml(`${hasFiniteMagnitudes(m) ? "" : "none finite, "}∞/NaN ${formatPercent(m.nonFiniteFraction)}`)}</text>`
          : "";
      return (
        `<g${r.disagrees ? ' class="disagrees"' : ""}><title>${escapeHtml(title)}</title>` +
        `<text x="${left - 6}" y="${y + rowHeight - 4}" class="label">${escapeHtml(r.id.length > 48 ? "…" + r.id.slice(-47) : r.id)}</text>` +
        band(predicted, "predicted", 1) +
        band(measured, "measured", 4) +
        mark(r.predictedRms, "rms-predicted") +
        (hasFiniteMagnitudes(m) ? mark(m.rms, "rms-measured") : "") +
        edges +
        lost +
        "</g>"
      );
    })
    .join("\n");
  const shrunk = result.shrink.shrunk ? `<p>Shrunk for speed: ${result.shrink.changes.concat(result.shrink.warnings.map((w) => `warning: ${w}`)).map(escapeHtml).join("; ")}. Predictions are for the shrunk network.</p>` : "";
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'">
<title>${escapeHtml(`headroom simulate: ${result.specName}`)}</title>
<style>
body { font: 13px system-ui, sans-serif; margin: 16px; color: #222; }
.tick { font-size: 10px; text-anchor: middle; fill: #555; } .label { font: 11px monospace; text-anchor: end; fill: #222; }
.grid { stroke: #eee; } .edge { stroke: #c33; stroke-width: 1.5; }
.predicted { fill: #bbb; } .measured { fill: #3a7bd5; opacity: 0.75; }
.rms-predicted { stroke: #000; stroke-width: 2; } .rms-measured { stroke: #0b3d91; stroke-width: 2; stroke-dasharray: 2 1; }
.disagrees .label { fill: #b00; font-weight: bold; } .nonfinite { font: 10px monospace; fill: #b00; }
table.loss { border-collapse: collapse; margin: 8px 0; } table.loss td, table.loss th { padding: 2px 10px; text-align: left; font: 12px monospace; }
</style></head><body>
<h1>${escapeHtml(`${result.specName}: measured against predicted magnitudes`)}</h1>
<p>Plan ${escapeHtml(result.planName)}, ${escapeHtml(lossScaleWords(result))}, seeds ${escapeHtml(result.seeds.join(", "))}${result.rounded ? "" : ", no storage rounding"}.
Grey: predicted 1%–99% of element magnitudes (median draw); blue: measured 1%–99% (median over draws); black and dashed blue marks: predicted and measured rms;
red lines: the tensor's format edges (flush bound, or the smallest normal where subnormals are flushed; largest finite). Labels in red: prediction and measurement disagree.${
    nonFinite
      ? "\nOn the right, ∞/NaN: the share of elements infinite or NaN in the run (after an overflow upstream), left out of the measured band and rms; " +
        "“none finite”: no finite nonzero element was left to measure."
      : ""
  }</p>
${shrunk}
${lossTableHtml(result)}
<svg xmlns="http://www.w3.org/2000/svg" width="${width}" height="${height}" role="img" aria-label="measured and predicted magnitude bands">
${ticks.join("")}
${body}
</svg>
${result.steps > 0 ? stepsHtml(result) : ""}
<p>${escapeHtml(ESTIMATE_NOTE)}</p>
</body></html>
`;
}
