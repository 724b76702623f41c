/**
 * The terminal rendering of a plan comparison: one row per plan, best first, then why the order is what it is.
 * Pure: a PlanComparison in, a string out.
 */
import type { PlanComparison } from "../compare.js";
import { bytesPerElementText, MX_BLOCK } from "../formats/index.js";
import { formatBytes, formatPercent, formatPowerOfTwo } from "./number.js";
import { PLAIN, type Style } from "./style.js";
import { renderTable } from "./table.js";
import { verdictText, wrap } from "./check-text.js";

export interface CompareTextOptions {
  style?: Style;
  width?: number;
}

/** @example renderCompareText(comparePlans(spec)) // => "headroom compare: wide-classifier ...\n" */
export function renderCompareText(comparison: PlanComparison, options: CompareTextOptions = {}): string {
  const style = options.style ?? PLAIN;
  const width = options.width ?? 100;
  let out = style.role("heading", `headroom compare: ${comparison.spec.name}`) + ` (${comparison.spec.source})\n\n`;
  const rows = comparison.outcomes.map((o, i) => [
    String(i + 1),
    o.plan.name + (o.fromSpec ? " (spec)" : ""),
    verdictText(o.verdict, style),
    // told apart as the batch table tells them ("not needed" there too; its "none" for an empty window is "none fits" here):
    // a bare "none" read the same for a plan that needs no scale and one that no static scale fits
    o.lossScale.origin !== "none" ? formatPowerOfTwo(Math.log2(o.lossScale.value)) : o.lossScaleAnswer?.window.empty === true ? "none fits" : "not needed",
    `${bytesPerElementText(o.cost.bytesPerParameter)} B`,
    `${bytesPerElementText(o.cost.bytesPerActivation)} B`,
    formatBytes(o.cost.parameterBytes + o.cost.activationBytes),
    o.storesAsBaseline ? "—" : formatPercent(o.savedShare),
  ]);
  out += renderTable(
    [
      { title: "rank", align: "right" },
      { title: "plan" },
      { title: "verdict" },
      { title: "loss scale", align: "right" },
      { title: "per parameter", align: "right" },
      { title: "per activation", align: "right" },
      { title: "memory", align: "right" },
      { title: "saved", align: "right" },
    ],
    rows,
    { indent: "  " },
  );
  // where gradients are summed, how the plans sum them: the built-in ones alike, so none is judged on a sum the others are spared
  const n = comparison.gradientContributions;
  const sums =
    n > 1
      ? `; gradient sums: the built-in plans sum the ${n} gradient contributions of an update (workers × accumulation steps) in binary32, ` +
        "a sum buffer counted per parameter where the gradients are narrower, and the spec's plans as written (`gradient-sums`, by default in the gradient format)"
      : "";
  out += style.role(
    "muted",
    wrap(
      "per parameter: weights, master copy, gradients (and a sum buffer where gradients are summed in another format) and optimizer states; memory: the spec's parameters plus one step's stored activations " +
        `(block-scaled 8-bit tensors also hold one scale byte per ${MX_BLOCK.size} elements; a per-tensor scale, one number per tensor, is not counted); ` +
        `saved: against ${comparison.baseline.name} (every tensor in binary32, no master copy: ${formatBytes(comparison.baseline.bytes)})${sums}.`,
      width,
      "  ",
      "  ",
    ),
  );
  out += "\n" + style.role("strong", "Why this order") + "\n";
  for (const line of comparison.explanation) out += wrap(line, width, "  - ", "    ");
  out += "\n" + wrap(comparison.caution, width, "", "");
  return out;
}

/** The comparison as JSON, two-space indented, with a trailing newline. */
export function renderCompareJson(comparison: PlanComparison): string {
  return JSON.stringify(comparison, null, 2) + "\n";
}
