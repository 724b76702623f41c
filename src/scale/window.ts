/**
 * The static loss-scale window: the powers of two S = 2^k for which no gradient tensor overflows beyond the
 * risk budget (at the largest gradients of the horizon) and no tensor loses more than the tolerated share of
 * its gradient energy to flushing (at the smallest gradients of the horizon).
 *
 * Micikevicius et al. 2018 §3.2: choose S so that S·max|g| stays below the format's largest value; a larger S
 * has no downside unless it overflows. The window adds the lower edge from flushing (SCIENCE.md §3.2 [X]).
 */
import { BucketQueue, IndexHeap } from "./heap.js";

/** How one gradient tensor reacts to a loss scale 2^k. Both curves must be monotone in k. */
export interface ScaledTensorCurves {
  id: string;
  /**
   * optional: what the curves are made from, one object per tensor (src/risk/curve-parts.ts: its profiles), so that two
   * curves with one source have one id: telling curves of the same tensors apart then reads no id
   */
  readonly source?: object;
  /** probability that at least one element overflows in one step at scale 2^k (nondecreasing in k) */
  overflowRisk(log2Scale: number): number;
  /** share of the tensor's gradient energy flushed to zero at scale 2^k (nonincreasing in k) */
  flushedEnergy(log2Scale: number): number;
  /** optional cheap bounds [low, high] on overflowRisk: the search then integrates only where they do not decide */
  overflowRiskBounds?(log2Scale: number): readonly [number, number];
  /** optional cheap bounds [low, high] on flushedEnergy: the search then integrates only where they do not decide */
  flushedEnergyBounds?(log2Scale: number): readonly [number, number];
  /** optional: the cheap bounds into `into` at `at` (low) and `at + 1` (high), asked for in place of the above */
  overflowRiskBoundsInto?(log2Scale: number, into: Float64Array, at: number): void;
  flushedEnergyBoundsInto?(log2Scale: number, into: Float64Array, at: number): void;
  /** optional upper bound on overflowRisk tighter than the bounds', at more cost: asked for before integrating */
  overflowRiskUpper?(log2Scale: number): number;
  /** optional upper bound on flushedEnergy tighter than the bounds', at more cost: asked for before integrating */
  flushedEnergyUpper?(log2Scale: number): number;
  /**
   * optional: true where flushedEnergyUpper costs no more than the cheap bounds (a closed form) and is far tighter: the
   * searches then ask it first, and take the cheap bounds only where it does not decide
   */
  flushedEnergyUpperFirst?: boolean;
  /**
   * optional: an exponent from which flushedEnergy(k) ≤ tolerance at every k at or above it, by a bound worked out once
   * per tensor for a few operations (∞ where there is none): the searches then take such a tensor as tolerated there
   * without its bounds at k
   */
  flushedEnergyWithinFrom?(tolerance: number): number;
  /**
   * optional upper bound on overflowRisk between the cheap bounds and overflowRiskUpper in cost and tightness: the
   * edge setter's scan asks for it before overflowRiskUpper (it only asks whether a tensor can reach a value found)
   */
  overflowRiskRough?(log2Scale: number): number;
  /** optional lower bound on overflowRisk that comes with overflowRiskRough at the same exponent, at no more cost */
  overflowRiskRoughLower?(log2Scale: number): number;
  /**
   * optional: overflowRiskRoughLower and overflowRiskRough at once into `into` at 0 and 1, asked for in place of them
   * (two doubles returned from calls are two heap numbers); false (nothing written) where the curve has none
   */
  overflowRiskRoughInto?(log2Scale: number, into: Float64Array): boolean;
  /**
   * optional: an exponent K and a bound B into `into` at 0 and 1, overflowRisk(k) ≤ B at every k ≤ K; false (nothing
   * written) where there are none. Worked out once per tensor for a few operations, with B tiny (far below any budget):
   * the searches then bound such a tensor at those exponents by B alone, without its bounds there
   */
  overflowRiskFarInto?(into: Float64Array): boolean;
  /** optional lower bound on overflowRisk that comes with overflowRiskUpper at the same exponent, at no more cost */
  overflowRiskLower?(log2Scale: number): number;
  /**
   * optional bounds on overflowRisk into `into` at 0 (low) and 1 (high), false (nothing written) where the curve has
   * none at this exponent: between the rougher bounds and overflowRiskUpper in cost and tightness, for the edge
   * setter's scan; given `below`, also false where the upper bound could not come below it (the scan then takes the
   * tighter bound at once)
   */
  overflowRiskQuickInto?(log2Scale: number, into: Float64Array, below?: number): boolean;
  /**
   * optional guesses of this tensor's own edges (the exponent where its overflow, and its flushing, reach the
   * limits): the searches start there and gallop, which finds the same edges in fewer steps than bisecting the
   * whole range
   */
  edgeGuessesLog2?: { overflow: number; flush: number };
  /**
   * optional factor g ≥ 1 by which the flushed share can at most grow per binade the scale falls, from the value
   * itself: flushedEnergy(k − d) ≤ g^d·flushedEnergy(k) + FLUSH_GROWTH_ABSOLUTE. It holds with g = 8 for every law whose
   * magnitudes' density does not rise away from 0 (a Gaussian's, a half-Gaussian's, any mixture of their scales):
   * E[x²; |x| ≤ 2t] = 8·∫₀ᵗ y²·f(2y) dy ≤ 8·E[x²; |x| ≤ t]; a curve offering it gives some room above 8 for the
   * rounding of its integrals. The search then bounds a share from what it knows a few binades up.
   */
  flushedEnergyGrowth?: number;
}

/** The absolute slack of {@link ScaledTensorCurves.flushedEnergyGrowth}'s bound (for shares that round to 0). */
export const FLUSH_GROWTH_ABSOLUTE = 1e-12;

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
  return lossScaleWindows(tensors, options)();
}

/**
 * The windows of a set of gradient tensors and of its subsets: `windowOf(setAside)` is
 * `lossScaleWindow(tensors without those ids, options)`, each search reusing what the earlier ones learnt of each
 * tensor (values, bounds, which tensors flush too much at an exponent). For trying tensors held in another format.
 */
export function lossScaleWindows(
  tensors: readonly ScaledTensorCurves[],
  options: Partial<WindowOptions> = {},
  flushLike?: FlushLike,
  // true where no two tensors share an id (a prediction's): an id set aside that a window named as a setter is then
  // found by that window's index
  uniqueIds = false,
): WindowsOf {
  const o = { ...DEFAULT_WINDOW_OPTIONS, ...options };
  if (!(o.riskBudget > 0 && o.riskBudget < 1)) throw new RangeError(`riskBudget must lie in (0, 1). Value: ${o.riskBudget}`);
  if (!(o.flushTolerance > 0 && o.flushTolerance < 1)) {
    throw new RangeError(`flushTolerance must lie in (0, 1). Value: ${o.flushTolerance}`);
  }
  let shared: { search: WindowSearch; shift: number } | undefined;
  if (flushLike !== undefined) {
    const earlier = SEARCHES.get(flushLike.windows);
    if (earlier === undefined || !earlier.sameTensors(tensors) || earlier.flushTolerance !== o.flushTolerance || !Number.isInteger(flushLike.shift)) {
      throw new RangeError("flushLike must name windows of the same tensors, searched with the same flush tolerance, and a whole shift");
    }
    shared = { search: earlier, shift: flushLike.shift };
  }
  const search = new WindowSearch(tensors, o, shared, uniqueIds);
  // each id set aside, its tensors: the one a window named as an edge's setter where the ids are unique (setterAt), else
  // found by comparing the few ids set aside with every tensor's; kept for the next set (a remedy sets aside a few
  // tensors, adding one at a time; a map of every id would hash all of them, most never asked for)
  const indicesOf = new Map<string, number[]>();
  // each set aside's window, by its ids sorted: the remedies try the setters of both edges, often the same tensors
  // (the search is exact for a set, so a window found once is the window)
  const found = new Map<string, ScaleWindow>();
  const active = new Uint8Array(tensors.length);
  // every tensor's id, read once when the first set aside is asked (each scan for an id read them through the curves)
  let ids: string[] | undefined;
  const windows: WindowsOf = (setAside) => {
    const key = setAside === undefined || setAside.size === 0 ? "" : JSON.stringify([...setAside].sort());
    const known = found.get(key);
    if (known !== undefined) return { ...known };
    active.fill(1);
    if (setAside !== undefined && setAside.size > 0) {
      for (const id of setAside) {
        let indices = indicesOf.get(id);
        if (indices === undefined) {
          const at = search.setterAt(id);
          if (at !== undefined) indices = [at];
          else {
            if (ids === undefined) {
              ids = new Array<string>(tensors.length);
              for (let i = 0; i < tensors.length; i++) ids[i] = (tensors[i] as ScaledTensorCurves).id;
            }
            indices = [];
            for (let i = 0; i < ids.length; i++) if (ids[i] === id) indices.push(i);
          }
          indicesOf.set(id, indices);
        }
        for (let j = 0; j < indices.length; j++) active[indices[j] as number] = 0;
      }
    }
    const window = search.window(active);
    found.set(key, window);
    return { ...window };
  };
  SEARCHES.set(windows, search);
  return windows;
}

/** The windows of a set of gradient tensors and of its subsets, as {@link lossScaleWindows} makes them. */
export type WindowsOf = (setAside?: ReadonlySet<string>) => ScaleWindow;

/**
 * Curves whose flushed shares are those of windows searched before, `shift` binades apart: the new tensors' i-th
 * flushedEnergy (and its bounds) at k is, bit for bit, the earlier tensors' i-th at k + shift. So it is for one
 * tensor's profiles in two formats whose flush bounds differ by the power of two 2^shift (the threshold flushBound·2^−k
 * is then the same double). The new search reads and adds to what the earlier ones learnt of the flushed shares.
 */
export interface FlushLike {
  windows: WindowsOf;
  shift: number;
}

// each windows function's search, for a later search of the same tensors' flushed shares (FlushLike)
const SEARCHES = new WeakMap<WindowsOf, WindowSearch>();

// What the search knows of each tensor at one exponent for one of the two curves: the cheap bounds, a tighter upper
// bound and the value (each once asked for), and for flushing whether it is tolerated. Each curve is monotone in k,
// so what one exponent knows bounds the others: a value or bound at k' is a bound at k on the side the curve's
// direction allows (see `known`).
interface Table {
  k: number;
  // the table's bit in each tensor's infoBits (its place among the curve's first 32 tables), −1 past them
  bit: number;
  // per tensor i: the cheap bounds' low and high, the tighter upper bound and the value at 4i … 4i + 3
  data: Float64Array;
  // per tensor: HAS_VALUE, HAS_UPPER, TOLERANCE_KNOWN, TOLERATED, HAS_BOUNDS
  flags: Uint8Array;
  // what `known` found of each tensor here (low, high), and its knowledge's version then plus 1 (0: not found yet),
  // made on the first `known` at this exponent: a scan over the tensors asks again only where something was learnt
  knownLo?: Float64Array;
  knownHi?: Float64Array;
  knownVersion?: Uint32Array;
  // the edge setter's scan over every tensor here, kept for later scans of a subset of its tensors (Scanned)
  scanned?: Scanned;
}
// What an edge setter's scan at one exponent left (worst): the tensors it scanned, and per tensor an upper bound on its
// value there (the value itself where it was integrated). A later scan of a subset of those tensors (a window with
// tensors set aside, which the remedies ask for in turn) visits them from the highest bound down, and stops at the
// first bound below the largest value found: every tensor after it is bounded below that value, so the largest is
// the same tensor a scan of every tensor finds (ties: the lowest index, as the heap orders equal bounds), without a
// pass over them all. The order is drawn off a heap as far as the scans reach, once for all of them.
interface Scanned {
  active: Uint8Array;
  keys: Float64Array;
  heap: IndexHeap | undefined;
  order: Int32Array | undefined;
  count: number;
}
const HAS_VALUE = 1;
const HAS_UPPER = 2;
const TOLERANCE_KNOWN = 4;
const TOLERATED = 8;
const HAS_BOUNDS = 16;
// the curve's rougher upper bound was taken (kept as the cheap bounds' high where lower)
const HAS_ROUGH = 32;
// the curve's quick overflow bounds were taken (kept as the cheap bounds where tighter)
const HAS_QUICK = 64;
// the edge setter's scan takes the quick bounds of a tensor bounded above this (src/scale/recommend.ts: below it the
// tighter upper bound is two normal tails, and the quick bounds cost four per profile)
const QUICK_ABOVE = 1e-9;
// a value or bound taken from another exponent is widened by this much (relative), for the rounding of two
// evaluations of a curve that is monotone in exact arithmetic
const ACROSS = 1e-9;
type Curve = "overflow" | "flush";
// the overflow edge's search steps down one binade at a time this many times below a start over the budget
const LINEAR_BELOW = 8;
// the exponents' spread the growth's powers are kept for (WindowSearch.powers): the searched range's, with room
const POWERS = 128;
// the union bound's first test takes up to this many tensors' lower bounds (overByFew): all of them where the sum has
// not passed the budget before (a stack of alike layers, each far under it, passes it only after many; the rough bounds
// taken are kept for the narrowing, which would take them first, so what the test takes in vain costs little)
const FEW = 256;

// What a search knows of one curve: its tables by exponent (for the flush curve: k + flushShift), ascending by it, the
// first 32 made and per tensor a bit for each that knows something of it (`known` visits those alone: a tensor is
// known at a few exponents of the many the search visits; past 32 tables, all of them), and per tensor how many times
// something was learnt of it at any exponent.
interface Knowledge {
  tables: Map<number, Table>;
  sorted: Table[];
  byBit: Table[];
  infoBits: Uint32Array;
  versions: Uint32Array;
}
// The flush curve's, with per tensor the lowest key where its flushing was found tolerated (+∞: none) and the highest
// where it was not (−∞: none): a share falling with k is tolerated above the one and not below the other.
interface FlushKnowledge extends Knowledge {
  toleratedFrom: Float64Array;
  untoleratedTo: Float64Array;
}
function knowledge(n: number): Knowledge {
  return { tables: new Map(), sorted: [], byBit: [], infoBits: new Uint32Array(n), versions: new Uint32Array(n) };
}
function flushKnowledge(n: number): FlushKnowledge {
  return { ...knowledge(n), toleratedFrom: new Float64Array(n).fill(Infinity), untoleratedTo: new Float64Array(n).fill(-Infinity) };
}

class WindowSearch {
  private readonly n: number;
  // the flush tables are kept by k + flushShift: shared with an earlier search whose exponents lie flushShift apart
  private readonly flushShift: number;
  // per tensor its flushedEnergyGrowth (0: none; NaN until read: most tensors' flushed shares are settled without it, and
  // a remedy's search of bfloat16's curves reads almost none)
  private readonly growth: Float64Array;
  // per tensor 2 where its flushedEnergyUpper is asked before its cheap flush bounds (flushedEnergyUpperFirst), 1 where
  // not, 0 until read (as the growth: a getter that tests both profiles' laws, asked of few tensors)
  private readonly upperFirst: Uint8Array;
  // per tensor its flushedEnergyWithinFrom at the search's tolerance (NaN until asked; ∞ where the curve has none)
  private readonly withinFrom: Float64Array;
  // powerBase^d for d < POWERS (NaN until asked), the first growth read (in practice every tensor's): the bound by the
  // growth is read here instead of raising it anew (Math.pow, ~50 ns) for each tensor and table; the same doubles, each
  // computed once
  private powerBase = 0;
  private readonly powers = new Float64Array(POWERS).fill(NaN);
  // per tensor its guess of its own overflow edge, and 1 where it has guesses: read by every window instead of each
  // curve's guesses
  private readonly overflowGuesses: Float64Array;
  private readonly guessed: Uint8Array;
  // the tensors most likely to overflow first (lowest own overflow edge), and those most likely to flush (highest own
  // flush edge): the searches decide sooner when the tensors that decide are integrated first
  private readonly overflowOrder: number[];
  private readonly flushOrder: number[];
  private readonly allBounded: boolean;
  // what the search knows of each curve; the flush curve's is shared with an earlier search (FlushLike) as a whole
  private readonly overflowKnown: Knowledge;
  private readonly flushKnown: FlushKnowledge;
  // exponents where the union bound was found over the budget (for some set of tensors): cheap bounds taken there
  // hold at every exponent below, which the rest of the search visits
  private readonly overBudget: number[] = [];
  private readonly pair = new Float64Array(2);
  // entryOf's [lo, hi]
  private readonly entry = new Float64Array(2);
  // one tensor's bounds from overflowRiskQuickInto (takeQuick)
  private readonly quick = new Float64Array(2);
  // one tensor's rougher bounds [lower, upper] (takeRough)
  private readonly rough = new Float64Array(2);
  // the table of each curve last asked for
  private lastOverflow: Table | undefined;
  private lastFlush: Table | undefined;
  // scratch of one union-bound test (riskWithinByBounds): each tensor's bounds, its state, and their sums
  private readonly lows: Float64Array;
  private readonly highs: Float64Array;
  private readonly state: Uint8Array;
  private low = 0;
  private high = 0;
  // the union bound's tensors by their upper bounds, the largest first to within a quarter binade
  private readonly queue: BucketQueue;
  // scratch of one edge setter's search (worst): each tensor's upper bound, and whether it was integrated
  private readonly worstHighs: Float64Array;
  private readonly visited: Uint8Array;
  // per tensor the highest exponent where its overflow risk is known to be exactly 0 (−∞: none): the risk grows with
  // k, so it is 0 at every exponent below, and the union bound and the edge setter's scan pass such a tensor by one
  // comparison (most tensors of a large network at the extreme exponents a search starts from)
  private readonly zeroTo: Float64Array;
  // per tensor its overflowRiskFarInto's exponent (NaN until asked; −∞ where the curve has none) and bound: at or below
  // the exponent the tensor is bounded by the bound alone (at the edges of a stack of alike layers, most of its tensors)
  private readonly farTo: Float64Array;
  private readonly farBound: Float64Array;

  // each edge setter's index by its id, where the ids are unique (the remedies set setters aside, and their windows then
  // find them here instead of comparing the id with every tensor's)
  private readonly setters: Map<string, number> | undefined;

  constructor(
    private readonly tensors: readonly ScaledTensorCurves[],
    private readonly o: WindowOptions,
    flushFrom?: { search: WindowSearch; shift: number },
    uniqueIds = false,
  ) {
    this.n = tensors.length;
    this.setters = uniqueIds ? new Map() : undefined;
    this.flushShift = flushFrom === undefined ? 0 : flushFrom.search.flushShift + flushFrom.shift;
    this.overflowKnown = knowledge(this.n);
    this.flushKnown = flushFrom === undefined ? flushKnowledge(this.n) : flushFrom.search.flushKnown;
    this.growth = new Float64Array(this.n).fill(NaN);
    this.upperFirst = new Uint8Array(this.n);
    this.withinFrom = new Float64Array(this.n).fill(NaN);
    this.overflowGuesses = new Float64Array(this.n);
    this.guessed = new Uint8Array(this.n);
    // each tensor's guesses read once, for the guesses and both orders' keys (orderByKeys)
    const flushKeys = new Float64Array(this.n);
    let allBounded = true;
    for (let i = 0; i < this.n; i++) {
      const t = tensors[i] as ScaledTensorCurves;
      if (t.overflowRiskBounds === undefined) allBounded = false;
      const guesses = t.edgeGuessesLog2;
      if (guesses === undefined) continue;
      this.overflowGuesses[i] = guesses.overflow;
      this.guessed[i] = 1;
      flushKeys[i] = -guesses.flush;
    }
    // (a tensor without guesses has keys 0, as written there: its overflow guess is kept 0 where it has none)
    this.overflowOrder = orderByKeys(this.overflowGuesses);
    this.flushOrder = orderByKeys(flushKeys);
    this.allBounded = allBounded;
    this.lows = new Float64Array(this.n);
    this.highs = new Float64Array(this.n);
    this.state = new Uint8Array(this.n);
    this.queue = new BucketQueue(this.n);
    this.worstHighs = new Float64Array(this.n);
    this.visited = new Uint8Array(this.n);
    this.zeroTo = new Float64Array(this.n).fill(-Infinity);
    this.farTo = new Float64Array(this.n).fill(NaN);
    this.farBound = new Float64Array(this.n);
  }

  // whether tensor i's overflow risk at k is bounded by farBound[i] (overflowRiskFarInto, asked once)
  private far(k: number, i: number): boolean {
    let to = this.farTo[i] as number;
    if (to !== to) {
      const into = this.pair;
      to = (this.tensors[i] as ScaledTensorCurves).overflowRiskFarInto?.(into) === true ? (into[0] as number) : -Infinity;
      if (to > -Infinity) this.farBound[i] = into[1] as number;
      this.farTo[i] = to;
    }
    return k <= to;
  }

  // tensor i's flushedEnergyGrowth where it offers one (≥ 1 and finite), else 0; read once
  private growthOf(i: number): number {
    let g = this.growth[i] as number;
    if (g === g) return g;
    const offered = (this.tensors[i] as ScaledTensorCurves).flushedEnergyGrowth;
    g = offered !== undefined && offered >= 1 && Number.isFinite(offered) ? offered : 0;
    this.growth[i] = g;
    if (g > 0 && this.powerBase === 0) this.powerBase = g;
    return g;
  }

  // whether tensor i's flushedEnergyUpper is asked before its cheap flush bounds; read once
  private upperFirstOf(i: number): boolean {
    let u = this.upperFirst[i] as number;
    if (u === 0) {
      u = (this.tensors[i] as ScaledTensorCurves).flushedEnergyUpperFirst === true ? 2 : 1;
      this.upperFirst[i] = u;
    }
    return u === 2;
  }

  private power(d: number): number {
    let p = this.powers[d] as number;
    if (p !== p) this.powers[d] = p = this.powerBase ** d;
    return p;
  }

  get flushTolerance(): number {
    return this.o.flushTolerance;
  }

  // whether `tensors` are this search's, in order (a later search shares the flush tables only then)
  sameTensors(tensors: readonly ScaledTensorCurves[]): boolean {
    if (tensors.length !== this.n) return false;
    for (let i = 0; i < this.n; i++) {
      const a = tensors[i] as ScaledTensorCurves;
      const b = this.tensors[i] as ScaledTensorCurves;
      // one source, one id (the ids are read through a tensor each, which the searches never visit otherwise)
      const source = a.source;
      if (source !== undefined && source === b.source) continue;
      if (a.id !== b.id) return false;
    }
    return true;
  }

  window(active: Uint8Array): ScaleWindow {
    const o = this.o;
    // the window's overflow edge is at or below every tensor's own: start from the tightest guess (any start gives
    // the same edge; a good one saves steps)
    let overflowGuess = Infinity;
    const guesses = this.overflowGuesses;
    const guessed = this.guessed;
    for (let i = 0; i < this.n; i++) if (active[i] === 1 && guessed[i] === 1) overflowGuess = Math.min(overflowGuess, guesses[i] as number);
    const middle = Math.round((o.lowestLog2 + o.highestLog2) / 2);
    // highest k with the union bound within the budget (monotone: true then false as k grows)
    // (over the budget is shown by a few tensors' lower bounds, within it only by every tensor's upper bound: the
    // search steps down a binade at a time below a start over the budget, where a gallop would pass the edge and
    // answer within the budget twice)
    const highest = lastTrue(o.lowestLog2, o.highestLog2, (k) => this.riskWithin(k, active), Number.isFinite(overflowGuess) ? overflowGuess : middle, LINEAR_BELOW);
    // lowest k with every tensor's flushing tolerated: the largest of the tensors' own flush edges
    const lowest = this.flushEdge(active);

    const empty = highest === null || lowest === null || lowest > highest;
    // an empty window's scans keep their bounds for the subsets' windows that may follow (the loss-scale answer's
    // remedies, which come with an empty window only)
    const upperEdgeSetBy = this.setter(highest === null ? this.worst("overflow", o.lowestLog2, active, empty) : highest < o.highestLog2 ? this.worst("overflow", highest + 1, active, empty) : -1);
    const lowerEdgeSetBy = this.setter(lowest === null ? this.worst("flush", o.highestLog2, active, empty) : lowest > o.lowestLog2 ? this.worst("flush", lowest - 1, active, empty) : -1);

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

  // tensor i's id (null for −1), kept by id where the tensors' ids are unique (setterAt)
  private setter(i: number): string | null {
    if (i < 0) return null;
    const id = (this.tensors[i] as ScaledTensorCurves).id;
    this.setters?.set(id, i);
    return id;
  }

  /** the one tensor with this id, where the ids are unique and a window named it as an edge's setter */
  setterAt(id: string): number | undefined {
    return this.setters?.get(id);
  }

  private table(curve: Curve, at: number): Table {
    const k = curve === "flush" ? at + this.flushShift : at;
    // the searches ask for one exponent many times in a row
    const last = curve === "overflow" ? this.lastOverflow : this.lastFlush;
    if (last !== undefined && last.k === k) return last;
    const table = this.tableAt(curve, k);
    if (curve === "overflow") this.lastOverflow = table;
    else this.lastFlush = table;
    return table;
  }

  private tableAt(curve: Curve, k: number): Table {
    // (the curve's records read by name: a key that varies makes every read a keyed look-up)
    const known = curve === "overflow" ? this.overflowKnown : this.flushKnown;
    let table = known.tables.get(k);
    if (table === undefined) {
      const n = this.n;
      const byBit = known.byBit;
      table = { k, bit: byBit.length < 32 ? byBit.length : -1, data: new Float64Array(4 * n), flags: new Uint8Array(n) };
      if (table.bit >= 0) byBit.push(table);
      known.tables.set(k, table);
      const sorted = known.sorted;
      let j = sorted.length;
      while (j > 0 && sorted[j - 1]!.k > k) j--;
      sorted.splice(j, 0, table);
    }
    return table;
  }

  // The cheap bounds of tensor i at k (a tensor without them: [−∞, ∞]), each asked for once.
  private cheapBounds(curve: Curve, i: number, table: Table): void {
    if (((table.flags[i] as number) & HAS_BOUNDS) !== 0) return;
    const t = this.tensors[i] as ScaledTensorCurves;
    // straight into the table where the curve can (no array per tensor and exponent)
    const into = curve === "overflow" ? t.overflowRiskBoundsInto : t.flushedEnergyBoundsInto;
    if (into !== undefined) into.call(t, curve === "overflow" ? table.k : table.k - this.flushShift, table.data, 4 * i);
    else {
      const b = curve === "overflow" ? t.overflowRiskBounds?.(table.k) : t.flushedEnergyBounds?.(table.k - this.flushShift);
      table.data[4 * i] = b === undefined ? -Infinity : b[0];
      table.data[4 * i + 1] = b === undefined ? Infinity : b[1];
    }
    table.flags[i] = (table.flags[i] as number) | HAS_BOUNDS;
    this.mark(curve, table, i);
    if (curve === "overflow" && table.data[4 * i + 1] === 0) this.zeroAt(i, table.k);
  }

  // tensor i's overflow risk is at most 0 at k
  private zeroAt(i: number, k: number): void {
    if (k > (this.zeroTo[i] as number)) this.zeroTo[i] = k;
  }

  // something was learnt of tensor i at the table's exponent
  private mark(curve: Curve, table: Table, i: number): void {
    const versions = (curve === "overflow" ? this.overflowKnown : this.flushKnown).versions;
    versions[i] = (versions[i] as number) + 1;
    if (table.bit < 0) return;
    const bits = (curve === "overflow" ? this.overflowKnown : this.flushKnown).infoBits;
    bits[i] = (bits[i] as number) | (1 << table.bit);
  }

  private value(curve: Curve, k: number, i: number, table = this.table(curve, k)): number {
    if (((table.flags[i] as number) & HAS_VALUE) !== 0) return table.data[4 * i + 3] as number;
    const t = this.tensors[i] as ScaledTensorCurves;
    const v = curve === "overflow" ? t.overflowRisk(k) : t.flushedEnergy(k);
    table.data[4 * i + 3] = v;
    table.flags[i] = (table.flags[i] as number) | HAS_VALUE;
    this.mark(curve, table, i);
    if (curve === "overflow" && v === 0) this.zeroAt(i, table.k);
    return v;
  }

  // A tighter upper bound where the curve offers one (the value once known), else undefined.
  private upper(curve: Curve, k: number, i: number, table = this.table(curve, k)): number | undefined {
    const flags = table.flags[i] as number;
    if ((flags & HAS_VALUE) !== 0) return table.data[4 * i + 3] as number;
    if ((flags & HAS_UPPER) !== 0) return table.data[4 * i + 2] as number;
    const t = this.tensors[i] as ScaledTensorCurves;
    const u = curve === "overflow" ? t.overflowRiskUpper?.(k) : t.flushedEnergyUpper?.(k);
    if (u === undefined) return undefined;
    table.data[4 * i + 2] = u;
    table.flags[i] = flags | HAS_UPPER;
    const lower = curve === "overflow" ? t.overflowRiskLower?.(k) : undefined;
    if (lower !== undefined) {
      // kept with the cheap bounds, where every exponent reads it (see `known`)
      if ((flags & HAS_BOUNDS) === 0) {
        table.data[4 * i] = lower;
        table.data[4 * i + 1] = u;
        table.flags[i] = (table.flags[i] as number) | HAS_BOUNDS;
      } else if (lower > (table.data[4 * i] as number)) table.data[4 * i] = lower;
    }
    this.mark(curve, table, i);
    return u;
  }

  // Bounds [pair[0], pair[1]] on tensor i's value at k from everything known of it at any exponent: the overflow risk
  // grows with k (what is known below k bounds it from below, above k from above), the flushed share falls.
  // (the found bounds read back where nothing was learnt since: small, so that the scans over every tensor inline it)
  private known(curve: Curve, at: number, i: number, here: Table): Float64Array {
    const version = ((curve === "overflow" ? this.overflowKnown : this.flushKnown).versions[i] as number) + 1;
    if (here.knownVersion !== undefined && here.knownVersion[i] === version) {
      this.pair[0] = here.knownLo![i] as number;
      this.pair[1] = here.knownHi![i] as number;
      return this.pair;
    }
    return this.knownAfresh(curve, at, i, here, version);
  }

  // `known` at the table's exponent where only the table's own entry of tensor i changed since it found [lo, hi] (its
  // bounds, tighter upper bound or value taken there): what knownAfresh would find, without visiting the other tables
  // again (the same comparisons on the same doubles, which min and max take in any order)
  private knownWithHere(curve: Curve, i: number, here: Table, lo: number, hi: number): Float64Array {
    if (this.entryOf(here, i)) {
      const entry = this.entry;
      if ((entry[0] as number) > lo) lo = entry[0] as number;
      if ((entry[1] as number) < hi) hi = entry[1] as number;
    }
    return this.keepKnown(i, here, lo, hi, ((curve === "overflow" ? this.overflowKnown : this.flushKnown).versions[i] as number) + 1);
  }

  // what table t itself holds of tensor i, as [lo, hi] into `entry` (its value; else its cheap bounds, the upper one
  // tightened by its tighter upper bound); false where it holds none. Through `entry`, not returned: doubles returned
  // from a call not inlined are heap numbers each
  private entryOf(t: Table, i: number): boolean {
    const flags = t.flags[i] as number;
    if ((flags & (HAS_VALUE | HAS_BOUNDS | HAS_UPPER)) === 0) return false;
    let a = -Infinity;
    let b = Infinity;
    if ((flags & HAS_VALUE) !== 0) a = b = t.data[4 * i + 3] as number;
    else {
      if ((flags & HAS_BOUNDS) !== 0) {
        a = t.data[4 * i] as number;
        b = t.data[4 * i + 1] as number;
      }
      if ((flags & HAS_UPPER) !== 0) b = Math.min(b, t.data[4 * i + 2] as number);
    }
    this.entry[0] = a;
    this.entry[1] = b;
    return true;
  }

  // what `known` found of tensor i at the table's exponent, kept with its knowledge's version plus 1, and returned in pair
  private keepKnown(i: number, here: Table, lo: number, hi: number, version: number): Float64Array {
    if (here.knownVersion === undefined) {
      here.knownLo = new Float64Array(this.n);
      here.knownHi = new Float64Array(this.n);
      here.knownVersion = new Uint32Array(this.n);
    }
    here.knownLo![i] = lo;
    here.knownHi![i] = hi;
    here.knownVersion[i] = version;
    this.pair[0] = lo;
    this.pair[1] = hi;
    return this.pair;
  }

  private knownAfresh(curve: Curve, at: number, i: number, here: Table, version: number): Float64Array {
    const rising = curve === "overflow";
    let lo = -Infinity;
    let hi = Infinity;
    const k = rising ? at : at + this.flushShift;
    const growth = rising ? 0 : this.growthOf(i);
    const kn = rising ? this.overflowKnown : this.flushKnown;
    const sorted = kn.sorted;
    const byBit = kn.byBit;
    // every table has its bit: only those that know tensor i (lowest bit first); else every table
    const bitsOnly = sorted.length === byBit.length;
    let bits = bitsOnly ? (kn.infoBits[i] as number) : 0;
    const count = bitsOnly ? 32 : sorted.length;
    for (let j = 0; j < count; j++) {
      let t: Table;
      if (bitsOnly) {
        if (bits === 0) break;
        const lowest = bits & -bits;
        bits ^= lowest;
        t = byBit[31 - Math.clz32(lowest)] as Table;
      } else t = sorted[j] as Table;
      if (!this.entryOf(t, i)) continue;
      const a = this.entry[0] as number;
      const b = this.entry[1] as number;
      if (t.k === k) {
        if (a > lo) lo = a;
        if (b < hi) hi = b;
      } else if (t.k < k === rising) {
        const across = a * (1 - ACROSS);
        if (across > lo) lo = across;
        // a flushed share known a few binades up bounds it here by the curve's growth
        if (growth > 0 && b < Infinity) {
          const d = t.k - k;
          const grown = b * (growth === this.powerBase && d < POWERS && (d | 0) === d ? this.power(d) : growth ** d) * (1 + ACROSS) + FLUSH_GROWTH_ABSOLUTE;
          if (grown < hi) hi = grown;
        }
      } else {
        const across = b * (1 + ACROSS);
        if (across < hi) hi = across;
      }
    }
    return this.keepKnown(i, here, lo, hi, version);
  }

  // Whether the union bound at k is within the budget, from bounds where they decide. Each tensor starts from what
  // is known of it at any exponent; the tensors still unbounded get their cheap bounds (at the lowest exponent above
  // k found over the budget, which serves the later steps of the search too); then the tensor with the largest upper
  // bound is tightened, one step at a time (a tighter upper bound, then the integral; at once the integral when its
  // tighter bound could break the budget alone), until the exact part plus the remaining bounds decides: the same
  // answer as summing every integral.
  private riskWithin(k: number, active: Uint8Array): boolean {
    const budget = this.o.riskBudget;
    const n = this.n;
    if (!this.allBounded) {
      // union bound over tensors: P(any overflows) ≤ Σ P(tensor overflows) (common practice)
      let sum = 0;
      for (let i = 0; i < n; i++) if (active[i] === 1) sum += this.value("overflow", k, i);
      return Math.min(1, sum) <= budget;
    }
    const answer = !this.overByFew(k, active) && this.riskWithinByBounds(k, active);
    if (!answer) this.overBudget.push(k);
    return answer;
  }

  // Whether the lower bounds at k of the first few tensors in priority order (most likely to overflow first) already
  // sum over the budget: the value there, else the rougher bounds' lower end (taken into the table, where the narrowing
  // below would take them first), else the cheap bounds' low. Far above the edge one or two tensors say so, without a
  // pass over every tensor; otherwise the narrowing decides, with what was taken here kept.
  private overByFew(k: number, active: Uint8Array): boolean {
    const budget = this.o.riskBudget;
    const table = this.table("overflow", k);
    const order = this.overflowOrder;
    const zeroTo = this.zeroTo;
    let low = 0;
    let taken = 0;
    for (let r = 0; r < this.n && taken < FEW; r++) {
      const i = order[r] as number;
      // (a tensor bounded by its far bound adds nothing to a sum of lower bounds)
      if (active[i] === 0 || k <= (zeroTo[i] as number) || this.far(k, i)) continue;
      taken++;
      const flags = table.flags[i] as number;
      let a = 0;
      if ((flags & HAS_VALUE) !== 0) a = table.data[4 * i + 3] as number;
      else if ((flags & HAS_BOUNDS) !== 0) {
        if ((flags & (HAS_UPPER | HAS_ROUGH)) === 0) this.takeRough(k, i, table);
        a = table.data[4 * i] as number;
      } else if ((flags & (HAS_UPPER | HAS_ROUGH)) === 0) {
        // the rougher bounds first (roughFirst: kept where their upper end says something, else left to the cheap
        // bounds); their lower end, written into the table either way (0 for a curve without them), counts here
        this.roughFirst(k, i, table);
        a = table.data[4 * i] as number;
      }
      // a probability is at least 0; the lower bounds' sum is over the budget as riskWithinByBounds tests it
      if (a > 0) low += a;
      if (Math.min(1, low * (1 - 1e-12)) > budget) return true;
    }
    return false;
  }

  // Bounds on the union bound at k, narrowed until they decide. The bounds live in the search's scratch arrays
  // (sized once, rewritten by each call); their sums are kept in `low` and `high` as bounds change.
  private riskWithinByBounds(k: number, active: Uint8Array): boolean {
    const budget = this.o.riskBudget;
    const n = this.n;
    const table = this.table("overflow", k);
    const lows = this.lows;
    const highs = this.highs;
    // 0: bounds from what is known, 1: the upper bound at k taken, 2: exact, 3: set aside, 4: its far bound (in the
    // sums, never narrowed: only the exact sum at the end takes its value)
    const state = this.state;
    let low = 0;
    let high = 0;
    let unbounded = 0;
    const zeroTo = this.zeroTo;
    for (let i = 0; i < n; i++) {
      // a tensor set aside, or one whose risk is 0 here, adds nothing to either sum: left out of them (state 3)
      if (active[i] === 0 || k <= (zeroTo[i] as number)) {
        state[i] = 3;
        continue;
      }
      if (this.far(k, i)) {
        const b = this.farBound[i] as number;
        lows[i] = 0;
        highs[i] = b;
        state[i] = 4;
        high += b;
        continue;
      }
      const flags = table.flags[i] as number;
      const known = this.known("overflow", k, i, table);
      // a probability is at least 0
      const a = Math.max(0, known[0] as number);
      const b = known[1] as number;
      lows[i] = a;
      highs[i] = b;
      state[i] = (flags & HAS_VALUE) !== 0 ? 2 : (flags & HAS_UPPER) !== 0 ? 1 : 0;
      if (b === Infinity) unbounded++;
      low += a;
      high += b;
      // the lower bounds are nonnegative: once part of their sum is over the budget, the whole sum is
      if (Math.min(1, low * (1 - 1e-12)) > budget) return false;
    }
    this.low = low;
    this.high = high;
    let answer = this.decided();
    if (answer !== undefined) return answer;
    if (unbounded > 0) {
      this.boundUnbounded(k);
      answer = this.decided();
      if (answer !== undefined) return answer;
    }
    // tighten the largest upper bound first, to within a quarter binade (any order reaches the same answer; this one in
    // fewer steps), upper bounds only falling; among bounds alike, in priority order: the queue gives its latest first,
    // so the tensors go in from the last in priority order
    const queue = this.queue;
    queue.clear();
    const order = this.overflowOrder;
    for (let r = n - 1; r >= 0; r--) {
      const i = order[r] as number;
      if ((state[i] as number) < 2) queue.push(i, highs[i] as number);
    }
    while (queue.size > 0) {
      const i = queue.pop();
      // the rougher bound first where the curve has one (a fraction of the tighter one's cost); back in the queue
      if (state[i] === 0 && this.roughen(k, i, table)) {
        queue.push(i, highs[i] as number);
        answer = this.decided();
        if (answer !== undefined) return answer;
        continue;
      }
      // a tensor whose tighter bound could still break the budget alone is integrated at once: either answer needs it
      if (state[i] === 0 && this.tighten(k, i, table) && (highs[i] as number) <= budget) queue.push(i, highs[i] as number);
      else this.integrate(k, i, table);
      answer = this.decided();
      if (answer !== undefined) return answer;
    }
    let sum = 0;
    for (let i = 0; i < n; i++) if (active[i] === 1) sum += this.value("overflow", k, i, table);
    return Math.min(1, sum) <= budget;
  }

  // The sums are updated as bounds change; a decision they suggest is confirmed by summing afresh (the updates
  // cancel, and their rounding adds up), widened for the rounding of a sum.
  private decided(): boolean | undefined {
    const budget = this.o.riskBudget;
    if (!(this.high * (1 + 1e-12) <= budget) && !(Math.min(1, this.low * (1 - 1e-12)) > budget)) return undefined;
    this.sumBounds();
    if (this.high * (1 + 1e-12) <= budget) return true;
    if (Math.min(1, this.low * (1 - 1e-12)) > budget) return false;
    return undefined;
  }

  // `low` and `high` summed afresh over the tensors not set aside
  private sumBounds(): void {
    const n = this.n;
    const state = this.state;
    let low = 0;
    let high = 0;
    for (let i = 0; i < n; i++) {
      if (state[i] === 3) continue;
      low += this.lows[i] as number;
      high += this.highs[i] as number;
    }
    this.low = low;
    this.high = high;
  }

  // The tensors still unbounded at k: their cheap bounds at the lowest exponent above k known over the budget.
  private boundUnbounded(k: number): void {
    const n = this.n;
    const state = this.state;
    const lows = this.lows;
    const highs = this.highs;
    let ceiling = k;
    const overBudget = this.overBudget;
    for (let j = 0; j < overBudget.length; j++) {
      const m = overBudget[j] as number;
      if (m > k && (ceiling === k || m < ceiling)) ceiling = m;
    }
    const here = this.table("overflow", k);
    const at = this.table("overflow", ceiling);
    for (let i = 0; i < n; i++) {
      if (state[i] === 3 || highs[i] !== Infinity) continue;
      // the rougher bounds at k itself first where the curve has them and they say something (they cost less than the
      // cheap bounds, and their lower end counts here): the tensor is then where the narrowing's roughen leaves it
      if (this.roughFirst(k, i, here)) {
        const low = Math.max(lows[i] as number, here.data[4 * i] as number);
        if (low > (lows[i] as number)) {
          this.low += low - (lows[i] as number);
          lows[i] = low;
        }
        highs[i] = Math.max(low, here.data[4 * i + 1] as number);
        continue;
      }
      this.cheapBounds("overflow", i, at);
      const a = ceiling === k ? Math.max(0, at.data[4 * i] as number) : 0;
      const b = ceiling === k ? (at.data[4 * i + 1] as number) : (at.data[4 * i + 1] as number) * (1 + ACROSS);
      if (a > (lows[i] as number)) {
        this.low += a - (lows[i] as number);
        lows[i] = a;
      }
      highs[i] = b;
    }
    this.sumHighs();
  }

  // `high` summed afresh over the tensors not set aside (an infinite bound has left it infinite)
  private sumHighs(): void {
    const state = this.state;
    const highs = this.highs;
    let high = 0;
    for (let i = 0; i < this.n; i++) if (state[i] !== 3) high += highs[i] as number;
    this.high = high;
  }

  private setBounds(i: number, a: number, b: number): void {
    const lows = this.lows;
    const highs = this.highs;
    if (a > (lows[i] as number)) {
      this.low += a - (lows[i] as number);
      lows[i] = a;
    }
    if (b < (highs[i] as number)) {
      // an infinite sum is summed afresh
      if (highs[i] === Infinity) {
        highs[i] = b;
        this.sumHighs();
      } else {
        this.high += b - (highs[i] as number);
        highs[i] = b;
      }
    }
  }

  private integrate(k: number, i: number, table: Table): void {
    const exact = this.value("overflow", k, i, table);
    const lows = this.lows;
    const highs = this.highs;
    this.low += exact - (lows[i] as number);
    lows[i] = exact;
    if (highs[i] === Infinity) this.setBounds(i, exact, exact);
    else {
      this.high += exact - (highs[i] as number);
      highs[i] = exact;
    }
    this.state[i] = 2;
  }

  // the rougher bounds at k, once, kept as the cheap bounds (a probability's low 0 where there were none); false when
  // the curve has none or they were taken
  private roughen(k: number, i: number, table: Table): boolean {
    if (((table.flags[i] as number) & (HAS_VALUE | HAS_UPPER | HAS_ROUGH)) !== 0) return false;
    if (!this.takeRough(k, i, table)) return false;
    const low = Math.max(this.lows[i] as number, table.data[4 * i] as number);
    this.setBounds(i, low, Math.max(low, this.rough[1] as number));
    return true;
  }

  // The rougher overflow bounds at k where the table knows nothing of tensor i there yet, in place of the cheap bounds:
  // they cost less (about 150 against 250 ns a tensor) and bound it at k itself from both sides. True when they say
  // something (an upper end below 1); otherwise the table is left to the cheap bounds (the rough [lower, 1] set aside).
  private roughFirst(k: number, i: number, table: Table): boolean {
    if (((table.flags[i] as number) & (HAS_VALUE | HAS_UPPER | HAS_ROUGH | HAS_BOUNDS)) !== 0) return false;
    if (this.takeRough(k, i, table) && (this.rough[1] as number) < 1) return true;
    table.flags[i] = (table.flags[i] as number) & ~HAS_BOUNDS;
    return false;
  }

  // the curve's rougher overflow bounds at k taken into the table (marked as asked, the high lowered to the upper, the
  // low raised to the lower, a low of 0 where the table had no bounds) and left in `rough` ([lower, upper]); false when
  // the curve has none
  private takeRough(k: number, i: number, table: Table): boolean {
    const flags = table.flags[i] as number;
    const t = this.tensors[i] as ScaledTensorCurves;
    const rough = this.rough;
    table.flags[i] = flags | HAS_ROUGH;
    if (t.overflowRiskRoughInto !== undefined) {
      if (!t.overflowRiskRoughInto(k, rough)) return false;
    } else {
      const upper = t.overflowRiskRough?.(k);
      if (upper === undefined) return false;
      rough[0] = t.overflowRiskRoughLower?.(k) ?? 0;
      rough[1] = upper;
    }
    this.takeBounds(i, table, flags, rough[0] as number, rough[1] as number);
    return true;
  }

  // Overflow bounds [low, high] of tensor i taken into the table (its flags as they were before this ask): the table's
  // bounds where it had none, else its high lowered and its low raised; marked where they moved
  private takeBounds(i: number, table: Table, flags: number, low: number, high: number): void {
    const data = table.data;
    if ((flags & HAS_BOUNDS) === 0) {
      data[4 * i] = low;
      data[4 * i + 1] = high;
      table.flags[i] = (table.flags[i] as number) | HAS_BOUNDS;
      this.mark("overflow", table, i);
    } else if (high < (data[4 * i + 1] as number) || low > (data[4 * i] as number)) {
      if (high < (data[4 * i + 1] as number)) data[4 * i + 1] = high;
      if (low > (data[4 * i] as number)) data[4 * i] = low;
      this.mark("overflow", table, i);
    }
  }

  // The curve's quick overflow bounds at k taken into the table as takeRough takes the rougher ones (marked as asked, the
  // high lowered, the low raised), so that the later windows of these tensors read them; false when the curve has none
  // (`floor`: the value to beat; where the quick upper bound cannot come below it the curve says so without them)
  private takeQuick(k: number, i: number, table: Table, floor: number): boolean {
    const flags = table.flags[i] as number;
    table.flags[i] = flags | HAS_QUICK;
    const quick = this.quick;
    if ((this.tensors[i] as ScaledTensorCurves).overflowRiskQuickInto?.(k, quick, floor) !== true) return false;
    this.takeBounds(i, table, flags, quick[0] as number, quick[1] as number);
    return true;
  }

  // the tighter upper bound at k; false when the curve has none
  private tighten(k: number, i: number, table: Table): boolean {
    this.state[i] = 1;
    const u = this.upper("overflow", k, i, table);
    if (u === undefined) return false;
    const flags = table.flags[i] as number;
    const lower = (flags & HAS_BOUNDS) !== 0 ? Math.max(0, table.data[4 * i] as number) : 0;
    this.setBounds(i, lower, Math.max(this.lows[i] as number, lower, u));
    return true;
  }

  // The active tensor with the largest value at k (the first such in the tensors' order; the first tensor when no
  // value is above 0). A tensor whose upper bound is below a value already found, or below another's lower bound,
  // cannot be the largest, nor can one whose bound only reaches a value found on a tensor before it: only the others
  // are integrated, in priority order so that a large value is found early.
  private worst(curve: Curve, k: number, active: Uint8Array, keep: boolean): number {
    const table = this.table(curve, k);
    const scanned = table.scanned;
    if (scanned !== undefined && this.subsetOf(active, scanned.active)) {
      const found = this.worstOfScanned(curve, k, active, table, scanned);
      if (found !== -2) return found;
    }
    const n = this.n;
    const highs = this.worstHighs;
    const visited = this.visited;
    visited.fill(0);
    let floor = -Infinity;
    const zeroTo = this.zeroTo;
    for (let i = 0; i < n; i++) {
      if (active[i] === 0) continue;
      // a risk of 0 here: bounded by 0, and it raises no floor (every lower bound of it is at most 0)
      if (curve === "overflow" && k <= (zeroTo[i] as number)) {
        highs[i] = 0;
        continue;
      }
      // bounded by its far bound: likewise (it raises no floor), and beaten by any value above that bound
      if (curve === "overflow" && this.far(k, i)) {
        highs[i] = this.farBound[i] as number;
        continue;
      }
      // a flushed share within the tolerance by the curve's once-per-tensor bound: bounded by the tolerance, raising no
      // floor (where the searches ask, k lies below the flush edge, so the largest share is above the tolerance and
      // beats such a tensor without its bounds here)
      if (curve === "flush" && this.surelyTolerated(k, i)) {
        highs[i] = this.o.flushTolerance;
        continue;
      }
      let known = this.known(curve, k, i, table);
      if (known[1] === Infinity) {
        if (curve === "overflow") this.roughFirst(k, i, table);
        // a flushed share whose tighter bound costs no more: that bound alone (the cheap bounds' low raises the floor
        // little, and the visit below asks the tighter one of most tensors anyway)
        if (curve === "overflow" || !this.upperFirstOf(i)) this.cheapBounds(curve, i, table);
        else this.upper(curve, k, i, table);
        known = this.knownWithHere(curve, i, table, known[0] as number, known[1] as number);
      }
      highs[i] = known[1] as number;
      if ((known[0] as number) > floor) floor = known[0] as number;
    }
    // the lowest index of a tensor visited whose value is the floor, or −1 when the floor is only a bound; a tensor
    // is beaten when its bound is below the floor, or only reaches a floor held by a tensor before it
    let holder = -1;
    const order = curve === "overflow" ? this.overflowOrder : this.flushOrder;
    // the overflow curve's tensor whose rougher bound here is highest is visited first: those bounds follow the values
    // closely enough that a value near the largest is found at once, and beats most of the others by their tighter
    // bounds (in priority order alone, tensors of nearly equal values met in rising order were each integrated in
    // turn); any order finds the same tensor. The rougher (or cheap) bounds are taken as the visit below takes them.
    let seed = -1;
    if (curve === "overflow") {
      for (let i = 0; i < n; i++) {
        if (active[i] === 0 || !((highs[i] as number) > floor)) continue;
        const flags = table.flags[i] as number;
        if ((flags & (HAS_VALUE | HAS_BOUNDS)) === 0) {
          this.roughFirst(k, i, table);
          this.cheapBounds(curve, i, table);
        } else if ((flags & (HAS_VALUE | HAS_UPPER | HAS_ROUGH)) === 0) this.takeRough(k, i, table);
        if (((table.flags[i] as number) & HAS_VALUE) === 0) {
          if ((table.data[4 * i + 1] as number) < (highs[i] as number)) highs[i] = table.data[4 * i + 1] as number;
          if ((table.data[4 * i] as number) > floor) floor = table.data[4 * i] as number;
        }
        if (seed < 0 || (highs[i] as number) > (highs[seed] as number)) seed = i;
      }
      if (seed >= 0 && !((highs[seed] as number) >= floor)) seed = -1;
    } else {
      // so for the flushed shares: the tensor whose bound found above is highest first (the closed form's upper bound
      // is within a nearly constant factor of the share across a stack of alike layers, 1.27 on the 1,000-layer spec at
      // growth 1, so its largest bound is most often the largest share, and every tensor bounded below that share is
      // then passed without its integral: of 290 integrals there, 89 were of shares met before the largest)
      for (let i = 0; i < n; i++) {
        if (active[i] === 0 || !((highs[i] as number) > floor)) continue;
        if (seed < 0 || (highs[i] as number) > (highs[seed] as number)) seed = i;
      }
    }
    for (let r = seed < 0 ? 0 : -1; r < n; r++) {
      const i = r < 0 ? seed : (order[r] as number);
      if (active[i] === 0 || (r >= 0 && i === seed)) continue;
      if ((highs[i] as number) < floor || (holder >= 0 && i > holder && (highs[i] as number) <= floor)) continue;
      if (((table.flags[i] as number) & (HAS_VALUE | HAS_BOUNDS)) === 0 && (curve === "overflow" || !this.upperFirstOf(i))) {
        // bounded from another exponent only: the rougher or the cheap bounds here first (a flushed share whose tighter
        // bound costs no more takes that one below instead)
        if (curve === "overflow") this.roughFirst(k, i, table);
        this.cheapBounds(curve, i, table);
        if ((table.data[4 * i + 1] as number) < (highs[i] as number)) highs[i] = table.data[4 * i + 1] as number;
        if ((table.data[4 * i] as number) > floor) {
          floor = table.data[4 * i] as number;
          holder = -1;
        }
        if ((highs[i] as number) < floor || (holder >= 0 && i > holder && (highs[i] as number) <= floor)) continue;
      }
      const flags = table.flags[i] as number;
      if (curve === "overflow" && (highs[i] as number) > floor && (flags & (HAS_VALUE | HAS_UPPER | HAS_ROUGH)) === 0 && (flags & HAS_BOUNDS) !== 0) {
        // a rougher bound first, where the curve has one: it settles many tensors below the value found
        if (this.takeRough(k, i, table) && (this.rough[1] as number) < (highs[i] as number)) highs[i] = this.rough[1] as number;
        if ((highs[i] as number) < floor) continue;
      }
      if (curve === "overflow" && (highs[i] as number) > floor && (highs[i] as number) > QUICK_ABOVE && ((table.flags[i] as number) & (HAS_VALUE | HAS_UPPER | HAS_QUICK)) === 0 && this.takeQuick(k, i, table, floor)) {
        // bounds between the rougher and the tighter in cost, where the curve has them: near the largest value they
        // settle most tensors that the rougher bounds leave above it (below QUICK_ABOVE the tighter bound is the
        // shifted tails alone, cheaper still)
        if ((table.data[4 * i + 1] as number) < (highs[i] as number)) highs[i] = table.data[4 * i + 1] as number;
        if ((table.data[4 * i] as number) > floor) {
          floor = table.data[4 * i] as number;
          holder = -1;
        }
        if ((highs[i] as number) < floor) continue;
      }
      const u = (highs[i] as number) > floor ? this.upper(curve, k, i, table) : undefined;
      if (u !== undefined && u < floor) continue;
      const v = this.value(curve, k, i, table);
      visited[i] = 1;
      if (v > floor) {
        floor = v;
        holder = i;
      } else if (v === floor && (holder < 0 || i < holder)) holder = i;
    }
    let id = -1;
    let best = -Infinity;
    // the bounds kept for a later scan of a subset (Scanned): each tensor's, its value where integrated (none kept where
    // one is not a number: the heap's order needs numbers)
    const keys = keep ? new Float64Array(n) : undefined;
    let ordered = keep;
    for (let i = 0; i < n; i++) {
      if (active[i] === 0) continue;
      if (visited[i] === 0) {
        if (keys !== undefined) {
          const high = highs[i] as number;
          if (!(high === high)) ordered = false;
          keys[i] = high;
        }
        continue;
      }
      const v = table.data[4 * i + 3] as number;
      if (keys !== undefined) keys[i] = v;
      if (!(v === v)) ordered = false;
      if (v > best || id < 0) {
        best = Math.max(best, v);
        id = i;
      }
    }
    if (keep) table.scanned = ordered ? { active: active.slice(), keys: keys!, heap: undefined, order: undefined, count: 0 } : undefined;
    return id;
  }

  // whether every tensor active in `a` is active in `b`
  private subsetOf(a: Uint8Array, b: Uint8Array): boolean {
    for (let i = 0; i < this.n; i++) if (a[i] === 1 && b[i] === 0) return false;
    return true;
  }

  // worst's answer for a subset of the tensors an earlier scan here saw, from its bounds (Scanned): the tensors visited
  // from the highest bound down, each bounded or integrated as worst does it, until a bound lies below the largest value
  // found (−1: none); −2 where a value is not a number (worst's scan of every tensor then answers)
  private worstOfScanned(curve: Curve, k: number, active: Uint8Array, table: Table, scanned: Scanned): number {
    const keys = scanned.keys;
    if (scanned.order === undefined) {
      const order = new Int32Array(this.n);
      let count = 0;
      for (let i = 0; i < this.n; i++) if (scanned.active[i] === 1) order[count++] = i;
      // ties by the lower index on top
      const heap = new IndexHeap(keys);
      heap.fill(order, count);
      scanned.heap = heap;
      scanned.order = order;
    }
    const order = scanned.order;
    const heap = scanned.heap!;
    let floor = -Infinity;
    let holder = -1;
    for (let r = 0; ; r++) {
      if (r === scanned.count) {
        if (heap.size === 0) break;
        order[scanned.count++] = heap.pop();
      }
      const i = order[r] as number;
      let high = keys[i] as number;
      // every later tensor is bounded by this bound or below it
      if (high < floor) break;
      if (active[i] === 0 || (holder >= 0 && i > holder && high <= floor)) continue;
      let v: number;
      if (((table.flags[i] as number) & HAS_VALUE) !== 0) v = table.data[4 * i + 3] as number;
      else {
        if (curve === "overflow" && high > floor && high > QUICK_ABOVE && ((table.flags[i] as number) & (HAS_UPPER | HAS_QUICK)) === 0 && this.takeQuick(k, i, table, floor)) {
          if ((table.data[4 * i + 1] as number) < high) high = table.data[4 * i + 1] as number;
          if (high < floor) continue;
        }
        const u = high > floor ? this.upper(curve, k, i, table) : undefined;
        if (u !== undefined && u < floor) continue;
        v = this.value(curve, k, i, table);
      }
      if (!(v === v)) return -2;
      if (v > floor) {
        floor = v;
        holder = i;
      } else if (v === floor && (holder < 0 || i < holder)) holder = i;
    }
    return holder;
  }

  // Whether tensor i's flushed share at k is within the tolerance by its curve's once-per-tensor bound (withinFrom)
  private surelyTolerated(k: number, i: number): boolean {
    let from = this.withinFrom[i] as number;
    if (from !== from) {
      const t = this.tensors[i] as ScaledTensorCurves;
      from = t.flushedEnergyWithinFrom === undefined ? Infinity : t.flushedEnergyWithinFrom(this.o.flushTolerance);
      this.withinFrom[i] = from;
    }
    return k >= from;
  }

  // Whether one tensor's flushed share at k is within the tolerance, deciding by what is known of it (at k or, the
  // share falling with k, at other exponents) where it can.
  private tolerated(k: number, i: number, table = this.table("flush", k)): boolean {
    const flags = table.flags[i] as number;
    if ((flags & TOLERANCE_KNOWN) !== 0) return (flags & TOLERATED) !== 0;
    return this.toleratedAfresh(k, i, table, flags);
  }

  private toleratedAfresh(k: number, i: number, table: Table, flags: number): boolean {
    const tolerance = this.o.flushTolerance;
    let ok: boolean | undefined;
    // tolerated below k: tolerated at k; not tolerated above k: not at k
    const key = table.k;
    if ((this.flushKnown.untoleratedTo[i] as number) > key) ok = false;
    else if ((this.flushKnown.toleratedFrom[i] as number) < key) ok = true;
    else if (this.surelyTolerated(k, i)) ok = true;
    if (ok === undefined) {
      const known = this.known("flush", k, i, table);
      if ((known[1] as number) <= tolerance) ok = true;
      else if ((known[0] as number) > tolerance) ok = false;
    }
    if (ok === undefined && (flags & (HAS_VALUE | HAS_BOUNDS)) === 0) {
      // the tighter bound first where it costs no more than the cheap ones: it settles most tolerated shares alone, and
      // the flush edge's setter one binade down is then found by the growth bound from it. Not at the lowest exponent:
      // an edge there has nothing below it to search, and the cheap bounds, the cheaper where they decide, settle
      // nearly every share there
      if (k > this.o.lowestLog2 && this.upperFirstOf(i)) {
        const upper = this.upper("flush", k, i, table);
        if (upper !== undefined && upper <= tolerance) ok = true;
      }
      if (ok === undefined) {
        this.cheapBounds("flush", i, table);
        if ((table.data[4 * i + 1] as number) <= tolerance) ok = true;
        else if ((table.data[4 * i] as number) > tolerance) ok = false;
      }
    }
    if (ok === undefined) {
      const upper = this.upper("flush", k, i, table);
      ok = upper !== undefined && upper <= tolerance ? true : this.value("flush", k, i, table) <= tolerance;
    }
    table.flags[i] = (table.flags[i] as number) | TOLERANCE_KNOWN | (ok ? TOLERATED : 0);
    if (ok && key < (this.flushKnown.toleratedFrom[i] as number)) this.flushKnown.toleratedFrom[i] = key;
    if (!ok && key > (this.flushKnown.untoleratedTo[i] as number)) this.flushKnown.untoleratedTo[i] = key;
    return ok;
  }

  // The smallest k in [lo, hi] at which every active tensor's flushing is tolerated (null if none): each tensor's
  // share falls as k grows, so this is the largest of the tensors' own edges. The tensors are visited in priority
  // order (highest guessed edge first); one that is tolerated at the edge found so far cannot raise it (one test,
  // mostly by its bounds), one that is not raises it to its own edge (a gallop from its guess).
  private flushEdge(active: Uint8Array): number | null {
    const { lowestLog2: lo, highestLog2: hi } = this.o;
    let edge = lo;
    let table = this.table("flush", edge);
    const order = this.flushOrder;
    for (let r = 0; r < order.length; r++) {
      const i = order[r] as number;
      // (a share within the tolerance by the once-per-tensor bound first: most tensors at the edge, without their table)
      if (active[i] === 0 || this.surelyTolerated(edge, i) || this.tolerated(edge, i, table)) continue;
      if (edge === hi) return null;
      const own = this.ownFlushEdge(edge, hi, i);
      if (own === null) return null;
      edge = own;
      table = this.table("flush", edge);
    }
    return edge;
  }

  // tensor i's own flush edge above `edge` (a gallop from its guess); apart from flushEdge's loop, whose body would
  // otherwise hold i in a context made at every step for the closure, though few steps make it
  private ownFlushEdge(edge: number, hi: number, i: number): number | null {
    const guess = (this.tensors[i] as ScaledTensorCurves).edgeGuessesLog2?.flush ?? edge + 1;
    return firstTrue(edge + 1, hi, (k) => this.tolerated(k, i), guess);
  }
}

/**
 * Tensor indices by their keys (`keys[i]` tensor i's), smallest first (stable): the order in which the searches
 * integrate (exported for tests).
 */
export function orderByKeys(keys: Float64Array): number[] {
  const n = keys.length;
  let low = Infinity;
  let high = -Infinity;
  let whole = true;
  for (let i = 0; i < n; i++) {
    const k = keys[i] as number;
    if (!Number.isInteger(k)) whole = false;
    if (k < low) low = k;
    if (k > high) high = k;
  }
  if (n === 0) return [];
  if (!whole || high - low > 4 * n + 64) return Array.from(keys.keys()).sort((a, b) => (keys[a] as number) - (keys[b] as number) || a - b);
  // whole-exponent keys over a short range: a counting sort, stable, so ties stay in index order as in the sort above
  const starts = new Int32Array(high - low + 2);
  for (let i = 0; i < n; i++) {
    const j = (keys[i] as number) - low + 1;
    starts[j] = (starts[j] as number) + 1;
  }
  for (let j = 1; j < starts.length; j++) starts[j] = (starts[j] as number) + (starts[j - 1] as number);
  const order = new Array<number>(n);
  for (let i = 0; i < n; i++) {
    const j = (keys[i] as number) - low;
    order[starts[j] as number] = i;
    starts[j] = (starts[j] as number) + 1;
  }
  return order;
}

/**
 * The largest integer k in [lo, hi] with pred(k) true, for pred true-then-false; null if pred(lo) is false.
 * Gallops from `start` (doubling steps) to bracket the change, then bisects the bracket (exported for tests). Going
 * down from a false start it first takes `linearBelow` steps of one: for a predicate whose true answers cost far more
 * than its false ones, so that the search meets the change from above and answers true once, at the edge.
 */
export function lastTrue(lo: number, hi: number, pred: (k: number) => boolean, start: number, linearBelow = 0): number | null {
  // a guess that is not a number (a curve the prediction could not carry) starts at the middle: from NaN the gallop
  // would never meet `hi` or `lo`, and the search would not end
  const from = Number.isNaN(start) ? Math.floor((lo + hi) / 2) : Math.min(hi, Math.max(lo, Math.round(start)));
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
    let linear = linearBelow;
    for (;;) {
      if (b === lo) return null;
      const next = Math.max(lo, b - step);
      if (pred(next)) {
        a = next;
        break;
      }
      b = next;
      if (linear > 0) linear--;
      else step *= 2;
    }
  }
  while (b - a > 1) {
    const m = (a + b) >> 1;
    if (pred(m)) a = m;
    else b = m;
  }
  return a;
}

/** The smallest integer k in [lo, hi] with pred(k) true, for pred false-then-true; null if pred(hi) is false (exported for tests). */
export function firstTrue(lo: number, hi: number, pred: (k: number) => boolean, start: number): number | null {
  // mirror image: the largest −k with pred true-then-false in −k
  const found = lastTrue(-hi, -lo, (k) => pred(-k), -start);
  return found === null ? null : -found;
}
