/**
 * The loss-scale pick weighed against the check's own thresholds. The window's edges use a whole-model overflow
 * budget and a per-gradient flushing tolerance (src/scale/window.ts), looser than the thresholds each tensor and
 * operation is judged by, so the window's centre can leave findings (a gradient's share flushed or subnormal, the
 * scaled loss overflowing) that another scale inside the window would not. Where the centre leaves any, the scales
 * of the window are compared and the one with the fewest findings is picked.
 */
import type { FormatName } from "../formats/names.js";
import type { Prediction, TensorPrediction } from "../magnitude/types.js";
import {
  findingsOfTensor,
  isConditionalFinding,
  isScaledSite,
  judgeScaled,
  scaledSubjects,
  type CheckOptions,
  type CheckResult,
  type Finding,
  type FindingKind,
  type ScaledSubjects,
} from "../risk/index.js";
import type { NetworkSpec } from "../spec/types.js";
import { isGradientRole } from "../risk/tensor-finding.js";
import type { ScaleWindow } from "./window.js";

/** Findings that move with the loss scale, in one format, counted by severity. */
export interface ScaledFindings {
  fails: number;
  atRisk: number;
  /** of these, the findings of the overflow side (a value too large), which a larger scale makes worse */
  overflowSide: number;
  /**
   * of these, the findings at risk only where an implementation keeps the value in the activation format though the
   * plan accumulates in a wider one (the scaled loss): weighed after every finding that holds as planned
   */
  conditional: number;
}

/**
 * How the pick was weighed: present on an answer whose window's centre leaves findings that move with the scale, or
 * whose window holds 1 (no scaling) away from its centre.
 */
export interface PickWeighing {
  /** the window's own pick: its centre, kept the margin below the overflow edge when the window allows */
  centreLog2: number;
  /** the findings that move with the scale at the centre, and at the pick (the same when the centre is kept) */
  atCentre: ScaledFindings;
  atPick: ScaledFindings;
  /** the findings at S = 1 (no scaling), present when 1 lies in the window: what running unscaled would leave */
  unscaled?: ScaledFindings;
}

const OVERFLOW_KINDS: ReadonlySet<FindingKind> = new Set<FindingKind>(["overflow", "saturation", "little-headroom", "loss-value-overflow", "gradient-sum-overflow"]);

/**
 * The findings of a judgement in `format` that move with the loss scale: those of the gradient tensors, and of the
 * operations on the scaled loss and gradients; the scaled loss in every format that holds it at the same scale (its
 * activation and accumulate formats: the scale moves it there too). `subjects`, when given, receives the ids of the
 * tensors and the layers of the operations that have them.
 */
export function scaledFindings(result: CheckResult, format: FormatName, subjects?: { tensors: Set<string>; sites: Set<string> }): ScaledFindings {
  const counted = none();
  const tensors = result.tensors;
  // indexed, and LOSS_SCALED_ROLES' two roles by comparison (isGradientRole), not `includes`: a check's thousands of
  // tensors each
  for (let i = 0; i < tensors.length; i++) {
    const t = tensors[i] as CheckResult["tensors"][number];
    if (!isGradientRole(t.role)) continue;
    // a format holds a tensor once (its risks list each format once)
    const findings = findingsOfTensor(t, format);
    for (let k = 0; k < findings.length; k++) add(counted, findings[k] as Finding, false);
    if (findings.length > 0) subjects?.tensors.add(t.id);
  }
  const scale = scaleOf(result, format);
  for (const h of result.hazards) {
    if (!isScaledSite(h.kind, h.gradient)) continue;
    for (const f of h.findings) {
      const held = f.format === format || (h.kind === "loss-value" && scaleOf(result, f.format) === scale);
      if (!held || !movesWithScale(f)) continue;
      add(counted, f, isConditionalFinding(h, f));
      subjects?.sites.add(h.layer);
    }
  }
  return counted;
}

// the loss scale a format of the result was judged at
function scaleOf(result: CheckResult, format: FormatName): number {
  return (result.formats.find((f) => f.format === format)?.lossScale ?? result.lossScale).value;
}

// a gradient sum's rounding error is relative (√n·u), the same at every scale: not a finding the scale moves
function movesWithScale(f: Pick<Finding, "kind">): boolean {
  return f.kind !== "accumulation-error";
}

function none(): ScaledFindings {
  return { fails: 0, atRisk: 0, overflowSide: 0, conditional: 0 };
}

function add(counted: ScaledFindings, f: Pick<Finding, "kind" | "severity">, conditional: boolean): void {
  if (f.severity === "fails") counted.fails++;
  else counted.atRisk++;
  if (OVERFLOW_KINDS.has(f.kind)) counted.overflowSide++;
  if (conditional) counted.conditional++;
}

export function findingsTotal(f: ScaledFindings): number {
  return f.fails + f.atRisk;
}

/**
 * Whether a count is strictly better than another: fewer failing findings, then fewer of the overflow side, then fewer
 * at risk, each without the conditional ones, then fewer conditional ones. A failing finding makes the verdict "fails",
 * so a scale of the window that leaves one is never picked over one that leaves only findings at risk. Among as many
 * failing ones, the overflow side counts first: inside the window every gradient keeps its flushed share of squared
 * norm under the flush tolerance, so a flush-side finding there costs precision on a bounded share, while an overflow
 * under a static scale gives inf or NaN and costs the step (Micikevicius et al. 2018 §3.2). A conditional finding (the
 * scaled loss overflowing the activation format where the plan accumulates in a wider one) does not happen as planned,
 * so it never outweighs one that does. Each count only grows as findings are added (a conditional finding adds to its
 * kind's count and to the conditional count alike), and the order is lexicographic, so a count that is not better
 * stays so (the judgement's early stop).
 */
export function fewerFindings(a: ScaledFindings, b: ScaledFindings): boolean {
  if (a.fails !== b.fails) return a.fails < b.fails;
  const overflowA = a.overflowSide - a.conditional;
  const overflowB = b.overflowSide - b.conditional;
  if (overflowA !== overflowB) return overflowA < overflowB;
  const atRiskA = a.atRisk - a.conditional;
  const atRiskB = b.atRisk - b.conditional;
  if (atRiskA !== atRiskB) return atRiskA < atRiskB;
  return a.conditional < b.conditional;
}

/**
 * The pick of a window weighed against the findings that move with the scale. `atCentre` is what the window's own
 * pick leaves, with the tensors and operation layers that have them (from the check's judgement when it was judged
 * there; else it is judged here). The other exponents of the window are judged on the gradients and the scaled
 * operations alone, and the pick is the one with
 *   1. the fewest failing findings (a failing finding decides the verdict), then
 *   2. the fewest findings of the overflow side (overflow under a static scale gives inf or NaN and a lost step;
 *      inside the window flushing costs precision on a bounded share, see {@link fewerFindings}), then the fewest at
 *      risk, then
 *   3. the centre's margin below the overflow edge kept, then 1 (no scaling) when the pick would lie below it, then
 *      the nearest the centre, then the larger scale (a scale costs nothing until it overflows, Micikevicius et al.
 *      2018 §3.2; a scale below 1 buys only room below the overflow edge, which 1 keeps when it keeps the margin, and
 *      running unscaled needs no scaling at all: common practice).
 * When 1 lies in the window it is judged too (`unscaled`), so the answer can say what running without a scale leaves.
 * An exponent's judgement stops once its findings so far cannot beat the best (the tensors that had findings at an
 * exponent judged before go first), which gives the same pick as judging every exponent whole; where the centre's
 * findings are all of the flush side, the largest scale that keeps the margin is judged first, so that a best found
 * early stops the others sooner (the order judged does not move the pick).
 * `judgeAt`, when given, is asked for the caller's whole judgement at the largest scale judged first (that of the
 * flush side above): one that holds `format` at that scale gives its count there, and the caller keeps it for its own
 * judgement where that scale is the pick; null where it gives none.
 * Returns null when the window is empty, or the centre leaves no such finding and 1 is the centre or lies outside
 * the window (the centre stands unweighed).
 */
export function weighPick(
  spec: NetworkSpec,
  prediction: Prediction,
  format: FormatName,
  window: ScaleWindow,
  marginBinades: number,
  options: CheckOptions,
  atCentre?: { findings: ScaledFindings; tensors: ReadonlySet<string>; sites: ReadonlySet<string> },
  made?: ScaledSubjects,
  judgeAt?: (log2: number) => CheckResult | null,
): { pickLog2: number; weighing: PickWeighing } | null {
  if (window.empty || window.pickLog2 === null) return null;
  const centre = window.pickLog2;
  const lowest = window.lowestLog2!;
  const highest = window.highestLog2!;
  let subjects: ScaledSubjects | undefined;
  // the tensors setting the window's edges, then the subjects (sites, then tensors) that had a finding at some exponent
  // judged, go first in every later judgement
  const first: number[] = [];
  let seen = new Uint8Array(0);
  // the order of a judgement: `first`, then the subjects not seen, so every subject once (one array for every judgement:
  // judgeScaled reads it while it judges, and nothing keeps it)
  let order: number[] = [];
  // the exponents judged whole (no early stop), so 1 is not judged twice when the candidates reached it
  const whole = new Map<number, ScaledFindings>();
  const judge = (log2: number, stop: ((found: ScaledFindings) => boolean) | null): ScaledFindings => {
    const known = whole.get(log2);
    if (known !== undefined) return known;
    if (subjects === undefined) {
      const own = made ?? scaledSubjects(spec, prediction);
      const sites = own.sites.length;
      seen = new Uint8Array(sites + own.tensors.length);
      // the tensors nearest the window's edges are the likeliest to leave a finding at any of its scales
      const edges = edgeSubjects(own, window);
      for (let e = 0; e < edges.length; e++) {
        seen[edges[e] as number] = 1;
        first.push(edges[e] as number);
      }
      const hadFinding = (i: number) =>
        i < sites ? atCentre?.sites.has((own.sites[i] as ScaledSubjects["sites"][number]).site.layer) === true : atCentre?.tensors.has((own.tensors[i - sites] as TensorPrediction).id) === true;
      for (let i = 0; i < seen.length; i++) {
        if (seen[i] === 0 && hadFinding(i)) {
          seen[i] = 1;
          first.push(i);
        }
      }
      subjects = own;
      order = new Array<number>(seen.length).fill(0);
    }
    let at = 0;
    for (let k = 0; k < first.length; k++) order[at++] = first[k] as number;
    for (let i = 0; i < seen.length; i++) if (seen[i] === 0) order[at++] = i;
    const found = none();
    let stopped = false;
    const visit = (f: Pick<Finding, "kind" | "severity">, i: number, conditional: boolean): boolean => {
      if (!movesWithScale(f)) return true;
      add(found, f, conditional);
      if (seen[i] === 0) {
        seen[i] = 1;
        first.push(i);
      }
      stopped = stop !== null && stop(found);
      return !stopped;
    };
    judgeScaled(subjects, format, 2 ** log2, options.thresholds, order, visit, true);
    if (!stopped) whole.set(log2, found);
    return found;
  };
  const centreFindings = atCentre?.findings ?? judge(centre, null);
  const unscaledInside = window.unscaledFits && centre !== 0;
  if (findingsTotal(centreFindings) === 0 && !unscaledInside) return null;

  let best = centre;
  let bestFindings = centreFindings;
  const keepsMargin = (k: number) => highest - k >= marginBinades;
  if (findingsTotal(centreFindings) > 0) {
    // rule 3.: the centre among equals, then the margin kept, then the distance, then the larger scale
    const rank = (k: number) => (k === centre ? -1 : (keepsMargin(k) ? 0 : 1e6) + Math.abs(k - centre) * 2 + (k < centre ? 1 : 0));
    const candidates: number[] = [];
    for (let k = lowest; k <= highest; k++) if (k !== centre) candidates.push(k);
    candidates.sort((a, b) => rank(a) - rank(b));
    // where the centre's findings are all of the flush side, the largest scale that keeps the margin is judged first:
    // a larger scale moves every gradient away from the flush edge, so it is the likeliest to leave the fewest, and a
    // best found early lets the candidates ranked before it stop at their first finding that makes them worse
    let probe: number | null = null;
    if (centreFindings.overflowSide === 0) {
      for (const k of candidates) if (k > centre && keepsMargin(k) && (probe === null || k > probe)) probe = k;
    }
    if (probe !== null) {
      // the caller's whole judgement there, when it gives one, gives the probe's count (`judgeAt`, see above)
      const judged = judgeAt?.(probe) ?? null;
      if (judged !== null && !whole.has(probe)) whole.set(probe, scaledFindings(judged, format));
      candidates.splice(candidates.indexOf(probe), 1);
      candidates.unshift(probe);
    }
    for (const k of candidates) {
      // the pick is the fewest findings, then the least rank: the same whatever order the candidates are judged in
      if (findingsTotal(bestFindings) === 0 && rank(k) > rank(best)) continue;
      // ranked before the best, it wins with as few findings (a count already worse than the best stops); else it needs
      // fewer (a count already no better stops)
      const before = rank(k) < rank(best);
      const loses = (so: ScaledFindings) => (before ? fewerFindings(bestFindings, so) : !fewerFindings(so, bestFindings));
      const found = judge(k, loses);
      if (loses(found)) continue;
      best = k;
      bestFindings = found;
    }
  }
  if (!window.unscaledFits) return { pickLog2: best, weighing: { centreLog2: centre, atCentre: centreFindings, atPick: bestFindings } };
  const unscaled = best === 0 ? bestFindings : centre === 0 ? centreFindings : judge(0, null);
  // rule 3.: 1 among equals when the pick lies below it and 1 keeps the margin (or the pick does not either); the best
  // has the fewest of the window, so 1 is at best its equal
  if (best < 0 && !fewerFindings(bestFindings, unscaled) && (keepsMargin(0) || !keepsMargin(best))) {
    best = 0;
    bestFindings = unscaled;
  }
  return { pickLog2: best, weighing: { centreLog2: centre, atCentre: centreFindings, atPick: bestFindings, unscaled } };
}

/**
 * Whether the window's centre surely leaves a finding that moves with the scale, told by counting at the centre only
 * the likeliest subjects: the tensors that set the window's edges (the gradients nearest a flush or overflow edge; the
 * check's thresholds are stricter than the window's tolerance and budget) and the scaled loss (the window does not
 * bound it). False says nothing: the centre may leave findings elsewhere. Where it is true, {@link weighPick} weighs the
 * window whatever the centre's other findings, so `check` weighs the pick before its judgement and judges once at the
 * pick, not at the centre and again at a pick that moved (the same result: src/check.ts).
 */
export function centreLeavesFindings(subjects: ScaledSubjects, format: FormatName, window: ScaleWindow, options: CheckOptions): boolean {
  if (window.empty || window.pickLog2 === null) return false;
  const order = edgeSubjects(subjects, window);
  const sites = subjects.sites.length;
  for (let i = 0; i < sites; i++) if ((subjects.sites[i] as ScaledSubjects["sites"][number]).site.kind === "loss-value") order.push(i);
  let found = false;
  const visit = (f: Pick<Finding, "kind">): boolean => {
    if (!movesWithScale(f)) return true;
    found = true;
    return false;
  };
  judgeScaled(subjects, format, 2 ** window.pickLog2, options.thresholds, order, visit, true);
  return found;
}

// the indices (judgeScaled's) of the tensors that set the window's lower edge, then its upper one
function edgeSubjects(subjects: ScaledSubjects, window: ScaleWindow): number[] {
  const sites = subjects.sites.length;
  const order: number[] = [];
  const edges = [window.lowerEdgeSetBy, window.upperEdgeSetBy];
  for (let e = 0; e < edges.length; e++) {
    const id = edges[e];
    if (id === null || id === undefined) continue;
    const i = subjects.tensors.findIndex((t) => t.id === id);
    if (i >= 0 && !order.includes(sites + i)) order.push(sites + i);
  }
  return order;
}

/** Whether running unscaled leaves no more findings than the weighed pick (undefined when 1 was not judged). */
export function unscaledAsGood(weighing: PickWeighing | undefined): boolean | undefined {
  if (weighing?.unscaled === undefined) return undefined;
  return !fewerFindings(weighing.atPick, weighing.unscaled);
}
