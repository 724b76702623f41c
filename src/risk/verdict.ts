/**
 * From findings to a verdict per format, with the top reasons in one sentence each.
 */
import { FINDING_INFO } from "./catalogue.js";
import { worstVerdict } from "./tensor.js";
import { VERDICT_RANK } from "./verdict-order.js";
import { FINDING_KINDS, type Finding, type FindingKind, type Verdict } from "./types.js";

/** A verdict and the sentences that explain it, most serious first. */
export interface Judgement {
  verdict: Verdict;
  /** one sentence per kind of finding, most serious first */
  reasons: string[];
}

// kinds whose value is better when larger (binades of headroom); the others are worse when larger
const LARGER_IS_BETTER: ReadonlySet<FindingKind> = new Set(["little-headroom"]);

// on a tie of values the subject first in text order names the group, as the lists of findings worst first
// (report/summary.ts compareFindings: Markdown, HTML, batch rows) put it, so every output names the same tensor
function worse(a: Finding, b: Finding): Finding {
  if (a.severity !== b.severity) return VERDICT_RANK[a.severity] > VERDICT_RANK[b.severity] ? a : b;
  if (a.value === b.value) return b.subject < a.subject ? b : a;
  const aWorse = LARGER_IS_BETTER.has(a.kind) ? a.value < b.value : a.value > b.value;
  return aWorse ? a : b;
}

/**
 * The verdict of a set of findings (fits when empty), and one reason per kind: the worst finding's sentence,
 * and how many more subjects share the kind. Ordered: fails before at risk, then the kinds covering more subjects, then
 * values past a limit before thin margins (little headroom), then the catalogue order.
 * @example judge([]) // => { verdict: "fits", reasons: [] }
 */
export function judge(findings: readonly Finding[]): Judgement {
  // a group's worst finding carries its worst severity: `worse` ranks severity first
  const groups = new Map<FindingKind, { worst: Finding; subjects: Set<string> }>();
  for (let i = 0; i < findings.length; i++) {
    const finding = findings[i] as Finding;
    const group = groups.get(finding.kind);
    if (group === undefined) {
      groups.set(finding.kind, { worst: finding, subjects: new Set([finding.subject]) });
    } else {
      group.worst = worse(group.worst, finding);
      group.subjects.add(finding.subject);
    }
  }
  // what matters to the user first: the worse severity, then the reason covering more subjects, then a value past a
  // limit before a margin that is only thin (little headroom is still inside the range), then the catalogue's order
  const margin = (kind: FindingKind): number => (LARGER_IS_BETTER.has(kind) ? 1 : 0);
  const ordered = [...groups.entries()].sort(
    ([kindA, a], [kindB, b]) =>
      VERDICT_RANK[b.worst.severity] - VERDICT_RANK[a.worst.severity] ||
      b.subjects.size - a.subjects.size ||
      margin(kindA) - margin(kindB) ||
      FINDING_KINDS.indexOf(kindA) - FINDING_KINDS.indexOf(kindB),
  );
  const reasons = ordered.map(([kind, group]) => {
    const others = group.subjects.size - 1;
    if (others === 0) return group.worst.sentence;
    const noun = group.worst.source === "tensor" ? (others === 1 ? "tensor" : "tensors") : others === 1 ? "operation" : "operations";
    return `${group.worst.sentence.replace(/\.$/, "")}; ${others} other ${noun} likewise (${FINDING_INFO[kind].title.toLowerCase()}).`;
  });
  return { verdict: worstVerdict(findings), reasons };
}

// the order of verdicts lives in one module that the renderers may import too
export { worseVerdict } from "./verdict-order.js";
