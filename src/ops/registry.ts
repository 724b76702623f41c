/**
 * The analytic rules of every layer family, one file per family under src/ops/<family>/analytic.ts.
 * `satisfies Record<GraphFamily, ...>` makes a family without rules a compile error.
 */
import type { GraphFamily } from "../graph/types.js";
import { activationRule } from "./activation/analytic.js";
import { attentionRule } from "./attention/analytic.js";
import { conv2dRule } from "./conv2d/analytic.js";
import { denseRule } from "./dense/analytic.js";
import { dropoutRule } from "./dropout/analytic.js";
import { embeddingRule } from "./embedding/analytic.js";
import { flattenRule } from "./flatten/analytic.js";
import { gatedFeedForwardRule } from "./gated-feed-forward/analytic.js";
import { normRule } from "./norm/analytic.js";
import { poolRule } from "./pool/analytic.js";
import { residualRule } from "./residual/analytic.js";
import type { AnalyticRule } from "./types.js";

/** Analytic rules by layer family. */
export const analyticRules = {
  dense: denseRule,
  conv2d: conv2dRule,
  embedding: embeddingRule,
  activation: activationRule,
  "layer-norm": normRule,
  "rms-norm": normRule,
  "batch-norm": normRule,
  dropout: dropoutRule,
  "average-pool": poolRule,
  "max-pool": poolRule,
  flatten: flattenRule,
  residual: residualRule,
  attention: attentionRule,
  "gated-feed-forward": gatedFeedForwardRule,
} as const satisfies Record<GraphFamily, AnalyticRule<any>>; // eslint-disable-line @typescript-eslint/no-explicit-any -- each family keeps its own stash type

/** The rule of one family, with its stash type erased for generic callers. */
export function ruleFor(family: GraphFamily): AnalyticRule<unknown> {
  return analyticRules[family] as unknown as AnalyticRule<unknown>;
}
