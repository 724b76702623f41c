/**
 * The loss scale as every renderer words it: a check's loss-scale items (`CheckAnswer.lossScales`, worked out in
 * src/check.ts) in a row's terms, and one clause per status that text, Markdown, HTML and batch rows all show. Pure.
 */
import type { FormatLossScale, LossScaleSummary } from "../batch/types.js";
import type { CheckAnswer, LossScaleItem } from "../check.js";
import type { CheckResult } from "../risk/index.js";
import type { ScaleRemedy } from "../scale/recommend.js";
import { formatPowerOfTwo } from "./number.js";

/** A check's loss-scale item in a row's terms: the window's exponents, the empty window's first sentence, the reason. */
export function itemSummary(item: LossScaleItem): FormatLossScale {
  if (item.status === "not-needed") {
    return item.flushedSums === undefined
      ? { format: item.format, status: "not-needed", reason: item.reason }
      : { format: item.format, status: "not-needed", reason: item.reason, flushedSums: item.flushedSums };
  }
  const w = item.answer.window;
  if (item.status === "window" && w.pickLog2 !== null && w.lowestLog2 !== null && w.highestLog2 !== null) {
    return { format: item.format, status: "window", pickLog2: w.pickLog2, lowestLog2: w.lowestLog2, highestLog2: w.highestLog2 };
  }
  return { format: item.format, status: "empty", sentence: item.answer.sentences[0] ?? "no power of two keeps every gradient from both overflowing and flushing" };
}

/** Every loss-scale item of a check in a row's terms; empty for a result without them (a bare judgement). */
export function lossScaleSummaries(result: CheckResult | CheckAnswer): FormatLossScale[] {
  return "lossScales" in result ? result.lossScales.map(itemSummary) : [];
}

/**
 * Whether the outputs name the gradient format of each item: when there are several, or the one is about another
 * format than the plan's gradients (`check --format bfloat16` on a binary16 plan).
 */
export function namesGradientFormats(result: CheckResult | CheckAnswer): boolean {
  if (!("lossScales" in result)) return false;
  return result.lossScales.length > 1 || result.lossScales.some((item) => item.format !== result.plan.gradients);
}

/** The loss-scale pick and window as two short cells (batch tables; the window clause of every renderer). */
export function lossScaleCells(lossScale: LossScaleSummary): { pick: string; window: string } {
  switch (lossScale.status) {
    case "window":
      return {
        pick: formatPowerOfTwo(lossScale.pickLog2),
        window: `${formatPowerOfTwo(lossScale.lowestLog2)}..${formatPowerOfTwo(lossScale.highestLog2)}`,
      };
    case "empty":
      return { pick: "none", window: "empty" };
    case "not-needed":
      return { pick: "not needed", window: "-" };
    case "not-evaluated":
      return { pick: "not evaluated", window: "not evaluated" };
  }
}

/**
 * The one wording of a loss-scale status, as a clause without a capital or a full stop: "pick 2^9, window
 * 2^-1..2^18", "no static scale serves the whole horizon", "not needed (gradients are held in bfloat16, which has
 * binary32's exponent range)", "not evaluated". Renderers put it after their own head and format it.
 */
export function lossScaleClause(lossScale: LossScaleSummary): string {
  const cells = lossScaleCells(lossScale);
  switch (lossScale.status) {
    case "window":
      return `pick ${cells.pick}, window ${cells.window}`;
    case "empty":
      return "no static scale serves the whole horizon";
    case "not-needed":
    {
      const head = lossScale.reason === undefined ? "not needed" : `not needed (${lossScale.reason.sentence})`;
      return lossScale.flushedSums === undefined ? head : `${head}; ${lossScale.flushedSums.sentence}`;
    }
    case "not-evaluated":
      return "not evaluated";
  }
}

/** A remedy of an empty window as the terminal and the HTML report word it: "works: …" or "does not work: …". */
export function remedyWords(remedy: ScaleRemedy): string {
  return `${remedy.works ? "works" : "does not work"}: ${remedy.sentence}`;
}
