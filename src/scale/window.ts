/**
 * The static loss-scale window: the powers of two S = 2^k for which no gradient tensor overflows beyond the
 * risk budget (at the largest gradients of the horizon) and no tensor loses more than the tolerated share of
 * its gradient energy to flushing (at the smallest gradients of the horizon).
 *
 * Micikevicius et al. 2018 §3.2: choose S so that S·max|g| stays below the format's largest value; a larger S
 * has no downside unless it overflows. The window adds the lower edge from flushing (SCIENCE.md §3.2 [X]).
 */

/** How one gradient tensor reacts to a loss scale 2^k. Both curves must be monotone in k. */
export interface ScaledTensorCurves {
  id: string;
  /** probability that at least one element overflows in one step at scale 2^k (nondecreasing in k) */
  overflowRisk(log2Scale: number): number;
  /** share of the tensor's gradient energy flushed to zero at scale 2^k (nonincreasing in k) */
  flushedEnergy(log2Scale: number): number;
  /** optional cheap bounds [low, high] on overflowRisk: the search then integrates only where they do not decide */
  overflowRiskBounds?(log2Scale: number): readonly [number, number];
  /** optional cheap bounds [low, high] on flushedEnergy: the search then integrates only where they do not decide */
  flushedEnergyBounds?(log2Scale: number): readonly [number, number];
  /**
   * optional guesses of this tensor's own edges (the exponent where its overflow, and its flushing, reach the
   * limits): the searches start there and gallop, which finds the same edges in fewer steps than bisecting the
   * whole range
   */
  edgeGuessesLog2?: { overflow: number; flush: number };
}

export interface WindowOptions {
  /** the largest tolerated probability that any gradient overflows in one step, for the whole model */
  riskBudget: number;
  /** the largest tolerated share of one tensor's gradient energy flushed to zero */
  flushTolerance: number;
  /** the pick sits at the window's centre, but never closer than this many binades to the overflow edge when the window allows */
  marginBinades: number;
  /** the exponents searched */
  lowestLog2: number;
  highestLog2: number;
}

/**
 * Defaults, documented in README.md: one overflowing step in ten thousand for the whole model; a tenth of a
 * percent of any tensor's gradient energy; two binades of margin below the overflow edge (the largest
 * gradients drift by more than a binade between seeds at common widths: the finite-width spread, SCIENCE.md §2.6).
 */
export const DEFAULT_WINDOW_OPTIONS: WindowOptions = {
  riskBudget: 1e-4,
  flushTolerance: 1e-3,
  marginBinades: 2,
  lowestLog2: -40,
  highestLog2: 64,
};

export interface ScaleWindow {
  /** smallest k whose flushing is tolerated; null when no k in the searched range is */
  lowestLog2: number | null;
  /** largest k whose overflow risk is within budget; null when none is */
  highestLog2: number | null;
  /** true when no power of two satisfies both edges */
  empty: boolean;
  /** the recommended exponent, or null when the window is empty */
  pickLog2: number | null;
  /** binades between the pick and each edge */
  marginBelowOverflow: number | null;
  marginAboveFlush: number | null;
  /** the tensor whose overflow sets the upper edge (the first to break the budget one binade up) */
  upperEdgeSetBy: string | null;
  /** the tensor whose flushing sets the lower edge (the worst one binade down) */
  lowerEdgeSetBy: string | null;
  /** when empty: how many binades the two edges pull apart (lowest − highest) */
  gapBinades: number | null;
  /** whether S = 1 (no scaling) lies inside the window */
  unscaledFits: boolean;
}

/**
 * Find the window of loss-scale exponents for a set of gradient tensors.
 * Each edge is found by galloping from the tensors' guesses and bisecting, a few evaluations per tensor.
 */
export function lossScaleWindow(tensors: readonly ScaledTensorCurves[], options: Partial<WindowOptions> = {}): ScaleWindow {
  const o = { ...DEFAULT_WINDOW_OPTIONS, ...options };
  if (!(o.riskBudget > 0 && o.riskBudget < 1)) throw new RangeError(`riskBudget must lie in (0, 1). Value: ${o.riskBudget}`);
  if (!(o.flushTolerance > 0 && o.flushTolerance < 1)) {
    throw new RangeError(`flushTolerance must lie in (0, 1). Value: ${o.flushTolerance}`);
  }
  const overflowOk = (k: number) => riskWithin(tensors, k, o.riskBudget);
  const flushOk = (k: number) => flushWithin(tensors, k, o.flushTolerance);

  // the window's overflow edge is at or below every tensor's own, its flush edge at or above: start from the
  // tightest guesses (any start gives the same edge; a good one saves steps)
  let overflowGuess = Infinity;
  let flushGuess = -Infinity;
  for (const t of tensors) {
    if (t.edgeGuessesLog2 === undefined) continue;
    overflowGuess = Math.min(overflowGuess, t.edgeGuessesLog2.overflow);
    flushGuess = Math.max(flushGuess, t.edgeGuessesLog2.flush);
  }
  const middle = Math.round((o.lowestLog2 + o.highestLog2) / 2);
  // highest k with overflowOk (monotone: true then false as k grows)
  const highest = lastTrue(o.lowestLog2, o.highestLog2, overflowOk, Number.isFinite(overflowGuess) ? overflowGuess : middle);
  // lowest k with flushOk (monotone: false then true as k grows)
  const lowest = firstTrue(o.lowestLog2, o.highestLog2, flushOk, Number.isFinite(flushGuess) ? flushGuess : middle);

  const upperEdgeSetBy = highest === null ? worstRisk(tensors, o.lowestLog2) : highest < o.highestLog2 ? worstRisk(tensors, highest + 1) : null;
  const lowerEdgeSetBy =
    lowest === null ? worstFlush(tensors, o.highestLog2).id : lowest > o.lowestLog2 ? worstFlush(tensors, lowest - 1).id : null;

  const empty = highest === null || lowest === null || lowest > highest;
  let pick: number | null = null;
  if (!empty) {
    // the centre in binades leaves the most room on both sides for the prediction's own error; a scale costs
    // nothing until it overflows (Micikevicius et al. 2018 §3.2), so round up, but keep the margin below overflow
    const centre = Math.ceil((lowest! + highest!) / 2);
    pick = Math.max(lowest!, Math.min(centre, highest! - o.marginBinades));
  }
  return {
    lowestLog2: lowest,
    highestLog2: highest,
    empty,
    pickLog2: pick,
    marginBelowOverflow: pick === null ? null : highest! - pick,
    marginAboveFlush: pick === null ? null : pick - lowest!,
    upperEdgeSetBy,
    lowerEdgeSetBy,
    gapBinades: empty && highest !== null && lowest !== null ? lowest - highest : null,
    unscaledFits: !empty && lowest! <= 0 && 0 <= highest!,
  };
}

function totalRisk(tensors: readonly ScaledTensorCurves[], k: number): number {
  // union bound over tensors: P(any overflows) ≤ Σ P(tensor overflows) (common practice)
  let sum = 0;
  for (const t of tensors) sum += t.overflowRisk(k);
  return Math.min(1, sum);
}

// Whether the union bound at k is within the budget, deciding by the summed bounds where they can. When they do
// not, tensors are integrated in order of their upper bounds, largest first, until the exact part plus the
// remaining bounds decides: the same answer as summing every integral, for a fraction of the integrals.
function riskWithin(tensors: readonly ScaledTensorCurves[], k: number, budget: number): boolean {
  if (!tensors.every((t) => t.overflowRiskBounds !== undefined)) return totalRisk(tensors, k) <= budget;
  const lows = new Float64Array(tensors.length);
  const highs = new Float64Array(tensors.length);
  let low = 0;
  let high = 0;
  tensors.forEach((t, i) => {
    const [a, b] = t.overflowRiskBounds!(k);
    lows[i] = a;
    highs[i] = b;
    low += a;
    high += b;
  });
  // widened for the rounding of the sums
  if (high * (1 + 1e-12) <= budget) return true;
  if (Math.min(1, low * (1 - 1e-12)) > budget) return false;
  const order = Array.from(tensors.keys())
    .filter((i) => (lows[i] as number) !== (highs[i] as number))
    .sort((a, b) => (highs[b] as number) - (highs[a] as number));
  for (const i of order) {
    const exact = (tensors[i] as ScaledTensorCurves).overflowRisk(k);
    low += exact - (lows[i] as number);
    high += exact - (highs[i] as number);
    if (high * (1 + 1e-12) <= budget) return true;
    if (Math.min(1, low * (1 - 1e-12)) > budget) return false;
  }
  return totalRisk(tensors, k) <= budget;
}

function worstRisk(tensors: readonly ScaledTensorCurves[], k: number): string | null {
  // a tensor whose upper bound is below another's lower bound cannot be the worst: integrate only the others
  const highs = new Float64Array(tensors.length).fill(Infinity);
  let floor = -Infinity;
  tensors.forEach((t, i) => {
    if (!t.overflowRiskBounds) return;
    const [low, high] = t.overflowRiskBounds(k);
    highs[i] = high;
    if (low > floor) floor = low;
  });
  let best: string | null = null;
  let bestRisk = -1;
  for (let i = 0; i < tensors.length; i++) {
    if ((highs[i] as number) < floor) continue;
    const t = tensors[i] as ScaledTensorCurves;
    const r = t.overflowRisk(k);
    if (r > bestRisk) {
      bestRisk = r;
      best = t.id;
    }
  }
  return best;
}

// Whether every tensor's flushed share at k is within the tolerance (the worst share ≤ tolerance), deciding by the
// bounds where they can.
function flushWithin(tensors: readonly ScaledTensorCurves[], k: number, tolerance: number): boolean {
  for (const t of tensors) {
    if (t.flushedEnergyBounds) {
      const [low, high] = t.flushedEnergyBounds(k);
      if (high <= tolerance) continue;
      if (low > tolerance) return false;
    }
    if (!(t.flushedEnergy(k) <= tolerance)) return false;
  }
  return true;
}

function worstFlush(tensors: readonly ScaledTensorCurves[], k: number): { id: string | null; share: number } {
  // a tensor whose upper bound is below another's lower bound cannot be the worst: integrate only the others
  const highs = new Float64Array(tensors.length).fill(Infinity);
  let floor = -Infinity;
  tensors.forEach((t, i) => {
    if (!t.flushedEnergyBounds) return;
    const [low, high] = t.flushedEnergyBounds(k);
    highs[i] = high;
    if (low > floor) floor = low;
  });
  let id: string | null = null;
  let share = 0;
  tensors.forEach((t, i) => {
    if ((highs[i] as number) < floor) return;
    const s = t.flushedEnergy(k);
    if (s > share || id === null) {
      share = Math.max(share, s);
      id = t.id;
    }
  });
  return { id, share };
}

/**
 * The largest integer k in [lo, hi] with pred(k) true, for pred true-then-false; null if pred(lo) is false.
 * Gallops from `start` (doubling steps) to bracket the change, then bisects the bracket.
 */
function lastTrue(lo: number, hi: number, pred: (k: number) => boolean, start: number): number | null {
  const from = Math.min(hi, Math.max(lo, Math.round(start)));
  let a: number; // pred(a) true
  let b: number; // pred(b) false
  if (pred(from)) {
    a = from;
    let step = 1;
    for (;;) {
      if (a === hi) return hi;
      const next = Math.min(hi, a + step);
      if (!pred(next)) {
        b = next;
        break;
      }
      a = next;
      step *= 2;
    }
  } else {
    b = from;
    let step = 1;
    for (;;) {
      if (b === lo) return null;
      const next = Math.max(lo, b - step);
      if (pred(next)) {
        a = next;
        break;
      }
      b = next;
      step *= 2;
    }
  }
  while (b - a > 1) {
    const m = (a + b) >> 1;
    if (pred(m)) a = m;
    else b = m;
  }
  return a;
}

/** The smallest integer k in [lo, hi] with pred(k) true, for pred false-then-true; null if pred(hi) is false. */
function firstTrue(lo: number, hi: number, pred: (k: number) => boolean, start: number): number | null {
  // mirror image: the largest −k with pred true-then-false in −k
  const found = lastTrue(-hi, -lo, (k) => pred(-k), -start);
  return found === null ? null : -found;
}
