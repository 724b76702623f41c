/**
 * From findings to a verdict per format, with the top reasons in one sentence each.
 */
import { judgeFindings } from "./judgement.js";
import type { Finding, Verdict } from "./types.js";

/** A verdict and the sentences that explain it, most serious first. */
export interface Judgement {
  verdict: Verdict;
  /** one sentence per kind of finding, most serious first */
  reasons: string[];
}

/**
 * The verdict of a set of findings (fits when empty), and one reason per kind: the worst finding's sentence,
 * and how many more subjects share the kind. Ordered: fails before at risk, then the kinds covering more subjects, then
 * values past a limit before thin margins (little headroom), then the catalogue order.
 * @example judge([]) // => { verdict: "fits", reasons: [] }
 */
export function judge(findings: readonly Finding[]): Judgement {
  return judgeFindings(findings, 0);
}

// the order of verdicts lives in one module that the renderers may import too
export { worseVerdict } from "./verdict-order.js";
