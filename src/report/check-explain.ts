/**
 * The terminal rendering of `headroom explain`: the ledger of one tensor (each factor from the loss or the input
 * to it, in log2 and as a multiplier, with the rule that produced it), then its risk in each judged format.
 */
import type { LedgerEntry } from "../magnitude/types.js";
import type { FormatName } from "../formats/names.js";
import { MX_BLOCK } from "../formats/index.js";
import type { CheckResult, TensorCheck } from "../risk/index.js";
import { formatBinades, formatPercent, formatProbability, formatValue } from "./number.js";
import { verdictText, wrap } from "./check-text.js";
import { PLAIN, type Style } from "./style.js";
import { renderTable, visibleWidth } from "./table.js";

/** Options of {@link renderExplainText}. */
export interface ExplainTextOptions {
  style?: Style;
  /** wrap sentences at this many columns (default 100) */
  width?: number;
}

function binadeWords(value: number | null): string {
  return value === null ? "n/a (all zeros)" : `${formatBinades(value)} binades`;
}

// the rule column's width in the ledger table; longer rules are cut there and given in full under it
const RULE_WIDTH = 60;

// log2 factors are shown with two decimals: one below half the last digit reads as 0.00 and moves nothing visibly
const SHOWN_LOG2 = 0.005;

function twoDecimals(log2: number): string {
  const text = log2.toFixed(2);
  return text === "-0.00" ? "0.00" : text;
}

function signed(log2: number): string {
  const text = twoDecimals(log2);
  return log2 > 0 && text !== "0.00" ? `+${text}` : text;
}

/** The layers that shrink (most negative log2) or grow (most positive) the tensor most, up to `count` each; factors that read 0.00 are neither, nor the profile's closing entries. */
export function strongestFactors(ledger: readonly LedgerEntry[], count = 3): { shrink: LedgerEntry[]; grow: LedgerEntry[] } {
  // the closing "(profile)" entries turn the mean square into the reported rms: bookkeeping, not a layer to change
  const sorted = ledger.filter((entry) => entry.layer !== "(profile)").sort((a, b) => a.log2Factor - b.log2Factor);
  return {
    shrink: sorted.filter((entry) => entry.log2Factor <= -SHOWN_LOG2).slice(0, count),
    grow: sorted.filter((entry) => entry.log2Factor >= SHOWN_LOG2).reverse().slice(0, count),
  };
}

/**
 * Where the tensor is held, as its risk lines below judge it: the plan entry's format, or the formats that judge it
 * when they are others (the loss, kept in the accumulate format; a format given with --format in place of the plan's).
 */
function whereHeld(result: CheckResult, tensor: TensorCheck): string {
  const planned = result.plan[tensor.slot];
  const judged = tensor.risks.filter((risk) => risk.judged).map((risk) => risk.format);
  if (judged.includes(planned)) return `held in the plan's ${tensor.slot} (${planned})`;
  if (judged.length === 0) return `held in none of the formats judged (the plan's ${tensor.slot} are ${planned})`;
  return `judged in ${judged.join(", ")} (the plan's ${tensor.slot} are ${planned})`;
}

/**
 * Render the ledger and the risk of one tensor of a check.
 * @example renderExplainText(result, result.tensors[0]) // => "headroom explain: ... \n"
 */
export function renderExplainText(result: CheckResult, tensor: TensorCheck, options: ExplainTextOptions = {}): string {
  const style = options.style ?? PLAIN;
  const width = options.width ?? 100;
  const backward = tensor.role.endsWith("gradient") || (tensor.ledger ?? []).some((entry) => entry.layer === "loss");
  let out = style.role("heading", `headroom explain: ${tensor.id}`) + ` (${result.spec.name}, ${result.spec.source})\n`;
  out += `  ${tensor.role} of ${tensor.layer} (${tensor.family}), shape [${tensor.shape.join(", ")}], ${whereHeld(result, tensor)}.\n`;

  out += "\n" + style.role("strong", `Ledger: from the ${backward ? "loss" : "input"} to this tensor, at the start of training`) + "\n";
  const ledger = tensor.ledger ?? [];
  if (ledger.length === 0) {
    out += "  (the prediction has no factors for this tensor)\n";
  } else {
    let running = 0;
    // sources are cited by number and listed in full under the table: cut to a column they lost the citation itself
    const sources: string[] = [];
    const sourceNumber = new Map<string, number>();
    const rows = ledger.map((entry, index) => {
      running += entry.log2Factor;
      let number = sourceNumber.get(entry.source);
      if (number === undefined) {
        sources.push(entry.source);
        number = sources.length;
        sourceNumber.set(entry.source, number);
      }
      return [
        String(index + 1),
        entry.layer,
        signed(entry.log2Factor),
        `×${formatValue(2 ** entry.log2Factor, 3)}`,
        twoDecimals(running),
        entry.rule,
        `[${number}]`,
      ];
    });
    out += renderTable(
      [
        { title: "#", align: "right" },
        { title: "layer", maxWidth: 40, cut: "middle" },
        { title: "log2", align: "right" },
        { title: "multiplier", align: "right" },
        { title: "running log2", align: "right" },
        { title: "rule", maxWidth: RULE_WIDTH },
        { title: "source", align: "left" },
      ],
      rows,
      { indent: "  ", styleHeader: (text) => style.role("strong", text) },
    );
    // a rule cut to the column loses its numbers at the end: the cut ones are given in full, by row number (measured as
    // the table measures a cell)
    const cut = ledger.map((entry, index) => ({ entry, index })).filter(({ entry }) => visibleWidth(entry.rule) > RULE_WIDTH);
    if (cut.length > 0) {
      out += "  Rules cut above, in full:\n";
      for (const { entry, index } of cut) out += wrap(entry.rule, width, `    ${index + 1}. `, "       ");
    }
    out += "  Sources:\n";
    for (let i = 0; i < sources.length; i++) out += wrap(sources[i] as string, width, `    [${i + 1}] `, "        ");
    const total = ledger.reduce((sum, entry) => sum + entry.log2Factor, 0);
    out += wrap(
      `The factors multiply to 2^${twoDecimals(total)} = ${formatValue(2 ** total)}; the predicted rms at the start is ` +
        `${formatValue(tensor.start.rms)} (2^${twoDecimals(Math.log2(tensor.start.rms || Number.MIN_VALUE))}) and at the end of the horizon ${formatValue(tensor.end.rms)}.`,
      width,
      "  ",
      "  ",
    );
    const { shrink, grow } = strongestFactors(ledger);
    if (shrink.length > 0) {
      out += wrap(`Shrinks it most: ${shrink.map((e) => `${e.layer} (${signed(e.log2Factor)})`).join(", ")}.`, width, "  ", "  ");
    }
    if (grow.length > 0) {
      out += wrap(`Grows it most: ${grow.map((e) => `${e.layer} (${signed(e.log2Factor)})`).join(", ")}.`, width, "  ", "  ");
    }
  }
  if (tensor.statistics.factor !== 1) {
    // where the scale came from, in the words of the check's loss-scale line (a power of two written as one)
    const factor = tensor.statistics.factor;
    const log2 = Math.log2(factor);
    const value = Number.isInteger(log2) ? `2^${log2} = ${formatValue(factor)}` : formatValue(factor);
    const origin = result.lossScale.value !== factor ? "" : { recommended: " (the recommended pick; the plan gives none)", plan: " (from the plan)", option: " (from the command line)", none: "" }[result.lossScale.origin];
    out += wrap(`The check multiplies it by the loss scale ${value}${origin} before judging it.`, width, "  ", "  ");
  }

  out += "\n" + style.role("strong", "Risk") + "\n";
  for (const risk of tensor.risks) {
    const w = risk.worst;
    // a format judged at another loss scale than the one above (its gradients' own window, or none)
    const scaled = risk.statistics !== undefined && risk.statistics.factor !== tensor.statistics.factor ? ` (at loss scale ${formatValue(risk.statistics.factor)})` : "";
    // a format not holding the tensor has no findings, so "fits" would read as a verdict its numbers may contradict
    const head = `  ${risk.format}${scaled}: ${risk.judged ? verdictText(risk.verdict, style) : "not judged (it does not hold this tensor)"}; `;
    // the shares below the range at one end of the horizon (the one whose flushed energy is worse), so that the flushed
    // and the subnormal shares add up; overflow, headroom and footroom the worse of the two ends
    const low = w.flushAt === "end" ? risk.end : risk.start;
    const numbers =
      `flushed ${formatPercent(low.flushedFraction)} of nonzero elements, subnormal ${formatPercent(low.subnormalFraction)} ` +
      `(rounding noise ${formatProbability(low.subnormalNoise)} of the squared norm), ` +
      `flushed energy ${formatPercent(low.flushedEnergy)} ${w.flushAt === "end" ? "at the end of the horizon" : "at the start of training"}; ` +
      `overflow ${formatProbability(w.overflowRisk)} per step, headroom ${binadeWords(w.headroom)}, footroom ${binadeWords(w.footroom)}, the worse of the two ends` +
      (risk.scaleLog2.start !== 0 || risk.scaleLog2.end !== 0 ? `, ${scaleWords(result, risk.format)} 2^${risk.scaleLog2.start}→2^${risk.scaleLog2.end}` : "") +
      ".";
    out += wrap(numbers, width, head, "      ");
    for (const finding of risk.findings) out += wrap(finding.sentence, width, "    - ", "      ");
  }
  out += "\n" + wrap(result.caution, width, "", "");
  return out;
}

// under per-block scale factors the flushing and clipping follow each block; the tensor-wide scale is what the headroom
// and footroom above are read at
function scaleWords(result: CheckResult, format: FormatName): string {
  const scaling = result.formats.find((f) => f.format === format)?.scaling;
  return scaling === "block" ? `per-block scale factors (blocks of ${MX_BLOCK.size}), headroom and footroom at the tensor scale` : "per-tensor scale";
}
