/**
 * The order of verdicts, best to worst: fits < at risk < fails (README, "Verdicts"). One value module with no imports
 * but types, so that every side that ranks verdicts reads this one: check and compare through risk, and the renderers,
 * which may import risk only as types otherwise (test/architecture.test.ts allows this file alone).
 */
import type { Verdict } from "./types.js";

/** Each verdict's rank: larger is worse. */
export const VERDICT_RANK: Readonly<Record<Verdict, number>> = { fits: 0, "at-risk": 1, fails: 2 };

/** The worse of two verdicts. */
export function worseVerdict(a: Verdict, b: Verdict): Verdict {
  // VERDICT_RANK[b] > VERDICT_RANK[a] written out as comparisons: a look-up by a key that varies is a slow one, and the
  // judgement asks it per tensor and format (a name outside the three ranks as none, as the look-up's undefined does)
  if (b === "fails") return a === "at-risk" || a === "fits" ? b : a;
  if (b === "at-risk") return a === "fits" ? b : a;
  return a;
}
