/**
 * The verdict of a set of findings and one reason per kind (src/risk/verdict.ts `judge`, which this gives), for a caller
 * that knows part of its findings to come subject by subject: a check's tensors, gathered tensor after tensor
 * (src/risk/judge.ts judgeFormat). Not a public export.
 */
import { FINDING_INFO } from "./catalogue.js";
import { worstVerdict } from "./tensor.js";
import { VERDICT_RANK, worseVerdict } from "./verdict-order.js";
import { FINDING_KINDS, type Finding, type FindingKind } from "./types.js";
import type { Judgement } from "./verdict.js";

// on a tie of values the subject first in text order names the group, as the lists of findings worst first
// (report/summary.ts compareFindings: Markdown, HTML, batch rows) put it, so every output names the same tensor
function worse(a: Finding, b: Finding): Finding {
  // (the ranks by comparison, and the one kind whose value is better when larger, binades of headroom: asked per finding)
  if (a.severity !== b.severity) return worseVerdict(b.severity, a.severity) === a.severity ? a : b;
  if (a.value === b.value) return b.subject < a.subject ? b : a;
  const aWorse = a.kind === "little-headroom" ? a.value < b.value : a.value > b.value;
  return aWorse ? a : b;
}

// a kind's findings so far: the worst, and how many subjects they cover
interface Group {
  worst: Finding;
  /** the subjects covered */
  count: number;
  /** the last subject counted in the run-wise part (see judgeFindings) */
  last: string;
  /** the subjects, once a finding past the run-wise part joins the kind (null before) */
  subjects: Set<string> | null;
}

/**
 * `judge(findings)`, where `findings[0..runs)` come subject by subject: each subject's findings there are next to one
 * another and no subject of that part returns after another's (a check's tensor findings, one tensor's after another's,
 * tensor ids unique in a prediction: src/magnitude/types.ts TensorPrediction.id). A subject of that part is then new to
 * its kind unless it is the last one the kind counted, so it is counted without a set of subjects: a check's thousands
 * of tensor ids would each be flattened and hashed for it. Past `runs` (the operations' findings, whose subjects repeat)
 * a kind counts its subjects in a set, made from the part's subjects of that kind when first needed. `runs` 0: judge.
 */
export function judgeFindings(findings: readonly Finding[], runs: number): Judgement {
  // a group's worst finding carries its worst severity: `worse` ranks severity first
  const groups = new Map<FindingKind, Group>();
  for (let i = 0; i < findings.length; i++) {
    const finding = findings[i] as Finding;
    const subject = finding.subject;
    const group = groups.get(finding.kind);
    if (group === undefined) {
      groups.set(finding.kind, { worst: finding, count: 1, last: subject, subjects: i < runs ? null : new Set([subject]) });
      continue;
    }
    group.worst = worse(group.worst, finding);
    if (i < runs) {
      if (subject !== group.last) {
        group.count++;
        group.last = subject;
      }
      continue;
    }
    const subjects = (group.subjects ??= subjectsOf(findings, runs, finding.kind));
    subjects.add(subject);
    group.count = subjects.size;
  }
  // what matters to the user first: the worse severity, then the reason covering more subjects, then a value past a
  // limit before a margin that is only thin (little headroom is still inside the range), then the catalogue's order
  const margin = (kind: FindingKind): number => (kind === "little-headroom" ? 1 : 0);
  const ordered = [...groups.entries()].sort(
    ([kindA, a], [kindB, b]) =>
      VERDICT_RANK[b.worst.severity] - VERDICT_RANK[a.worst.severity] ||
      b.count - a.count ||
      margin(kindA) - margin(kindB) ||
      FINDING_KINDS.indexOf(kindA) - FINDING_KINDS.indexOf(kindB),
  );
  const reasons = ordered.map(([kind, group]) => {
    const others = group.count - 1;
    if (others === 0) return group.worst.sentence;
    const noun = group.worst.source === "tensor" ? (others === 1 ? "tensor" : "tensors") : others === 1 ? "operation" : "operations";
    return `${group.worst.sentence.replace(/\.$/, "")}; ${others} other ${noun} likewise (${FINDING_INFO[kind].title.toLowerCase()}).`;
  });
  return { verdict: worstVerdict(findings), reasons };
}

// the subjects of a kind's findings in findings[0..runs)
function subjectsOf(findings: readonly Finding[], runs: number, kind: FindingKind): Set<string> {
  const subjects = new Set<string>();
  for (let i = 0; i < runs; i++) if ((findings[i] as Finding).kind === kind) subjects.add((findings[i] as Finding).subject);
  return subjects;
}
