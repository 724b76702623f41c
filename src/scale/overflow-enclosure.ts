/**
 * Two-sided bounds on the probability that any element of a Gaussian-law tensor reaches a threshold, over draws of
 * its scale ({@link probabilityAnyAbove} of src/risk/profile.ts), from a few evaluations of the normal tail instead of
 * an integral: for the loss-scale window and the dynamic-scale simulation, which compare these probabilities with a
 * budget or a random draw and integrate only where the bounds do not decide.
 *
 * The integrand is g(v) = 1 − (1 − erfc(2^v/√2))^n at v = log2(t/r), the probability that the largest of n element
 * magnitudes at scale 1 reaches 2^v: g(v) = P(V ≥ v) with V = log2 max|Z_i| (Z_i independent standard normal). The
 * draws put log2 r = log2 rms + s·Z with Z independent of V, so the draw integral is
 *   I(x) = E_Z[g(x − s·Z)] = P(V + s·Z ≥ x) = E_V[h(V)],  h(v) = Q((x − v)/s),  x = log2(t/rms)
 * (Q the normal upper tail). Taylor's theorem about μ = E[V] to the third order with the Lagrange remainder gives
 *   I = Q(u) + u·φ(u)·σ²/(2s²) + (u² − 1)·φ(u)·κ₃/(6s³) + R,  u = (x − μ)/s,
 *   |R| ≤ Σ_j M_j·E[(V − μ)⁴; V in shell j]/(24s⁴)
 * with κ₃ = E[(V − μ)³], the derivatives h^(k)(v) = He_{k−1}(u_v)·φ(u_v)/s^k (u_v = (x − v)/s; He the Hermite
 * polynomials, Abramowitz & Stegun 22.2.15 with 26.2.11), so h''''(v) = (u_v³ − 3u_v)·φ(u_v)/s⁴; the shells partition
 * the line around μ, and M_j is the largest |(u³ − 3u)φ(u)| between μ and the far edge of shell j (the Lagrange point
 * lies between μ and V), at most its peak at u² = 3 − √6 anywhere. V's spread is a fraction of a binade, so each order
 * gains a factor of about σ_V/s: the fourth-order remainder leaves bounds a few times 1e-3 of the value wide where the
 * spread is a few binades. The moments of V are computed once per process on a grid of counts n_k = e^{k/256}; I grows
 * with n (more elements, more chances), so the grid count below n gives the lower bound and the one above the upper.
 * The bounds are widened for what separates the computed integral from I: the fast erfc's relative error 1.2e-7, the
 * sum's 1e-6 (laws.ts), the moments' quadrature; 2e-5 of the upper bound covers them all (checked against the
 * integrals of src/risk/profile.ts in test/scale/overflow-enclosure.test.ts).
 */
import type { ElementShape, MagnitudeProfile } from "../magnitude/types.js";
import { erfc, normalPdf, normalSf } from "../risk/_math.js";

// below this many elements V's lower tail is only exponential in v (P(V ≤ v) ≈ (0.8·2^v)^n): the moments' range
// would have to reach far down; such tensors keep the integrals' own bounds
const LEAST_COUNT = 16;
// grid counts per unit of ln n: between neighbours V moves by about (1/256)/(2 ln n · ln 2) binade
const PER_LN = 256;
// the quadrature of the moments: Simpson's rule on v in steps of 1/STEPS binade over [c − BELOW, c + ABOVE] around
// c = log2 √(2 ln n), the level of the largest element (Gumbel's location, from memory; only the range's centre)
const STEPS = 256;
const BELOW = 8;
const ABOVE = 3;
// |(u³ − 3u)φ(u)| peaks where its derivative −(u⁴ − 6u² + 3)φ(u) vanishes: u² = 3 ∓ √6 (the larger peak at 3 − √6)
const INNER_PEAK_U = Math.sqrt(3 - Math.sqrt(6));
const OUTER_PEAK_U = Math.sqrt(3 + Math.sqrt(6));
// what separates the computed integral from I, relative to the upper bound (see above)
const WIDEN = 2e-5;

export interface LevelMoments {
  mean: number;
  variance: number;
  /** E[(V − μ)³] */
  third: number;
  /** the shells' edges, as offsets from the mean in binades (−∞ first, +∞ last) */
  edges: Float64Array;
  /** per shell j (between edges j and j + 1): E[(V − μ)⁴; V in the shell] */
  fourths: Float64Array;
  /** E[(V − μ)⁴], the shells' sum */
  fourth: number;
}

// the shells' inner edges in standard deviations of V from its mean: the remainder takes the largest |h''''| over each
// shell times the shell's share of E(V − μ)⁴. V's upper tail is about exponential in its standard units near the
// mean (Gumbel's, from memory) and then falls as n·erfc(2^v/√2); its lower tail is double-exponential
const SHELL_EDGES = [-8, -4, -2, -1, 0, 1, 2, 3, 4, 5, 6, 8, 10, 13, 17, 22, 28, 36, 46];

// What is worked out once per grid count e^{k/PER_LN}: by k below GRID_INDICES (a count of up to e^64 elements) in an
// array, filled up to k so it stays packed and its reads are plain element loads (a Map's hash took ~100 against ~50 ns
// a read, Dec 2026), any other k in a Map
const GRID_INDICES = 64 * PER_LN;
class GridMemo<T> {
  private readonly byIndex: (T | undefined)[] = [];
  private readonly rest = new Map<number, T>();
  get(k: number): T | undefined {
    return k >= 0 && k < GRID_INDICES ? this.byIndex[k] : this.rest.get(k);
  }
  set(k: number, value: T): void {
    if (!(k >= 0 && k < GRID_INDICES)) {
      this.rest.set(k, value);
      return;
    }
    for (let j = this.byIndex.length; j < k; j++) this.byIndex.push(undefined);
    this.byIndex[k] = value;
  }
}
const MOMENTS = new GridMemo<LevelMoments>();

// the density of V at v: n·(1 − P)^{n−1}·(−dP/dv), P = erfc(a/√2), a = 2^v, −dP/dv = √(2/π)·a·ln 2·e^{−a²/2}
function levelDensity(v: number, n: number): number {
  const a = 2 ** v;
  const p = erfc(a / Math.SQRT2);
  if (!(p < 1)) return 0;
  return n * Math.exp((n - 1) * Math.log1p(-p)) * 0.7978845608028654 * a * Math.LN2 * Math.exp(-0.5 * a * a);
}

/**
 * The last node j of the moments' quadrature (v = from + j·step) up to which levelDensity is exactly 0 at every node,
 * −1 where that is not shown. V's lower tail is n·(1 − P)^{n−1}·…, whose factor e^{(n−1)·ln(1 − P)} underflows to 0
 * (Math.exp of anything below −745.14 is 0, IEEE 754-2019 binary64's least subnormal being 2^−1074) over most of the
 * range for a large n: there the density is exactly 0. 1 − P rises with v, and the computed 1 − P (the fast erfc's
 * P within 1.2e-7 of P relative, src/risk/_math.ts; its argument's rounding far less) lies within 1.3e-7 of the exact
 * one at every node; so every node at or below a node j with (n − 1)·ln(computed 1 − P + 3e-7) < −746 (with room for
 * the logarithm's and the product's rounding) has a computed exponent below −746 too, and a density of exactly 0. The
 * largest such j is found by bisection, each step one evaluation of P, in place of the density at every node below it
 * (exported for tests).
 */
export function zeroBelow(from: number, step: number, count: number, n: number): number {
  const zero = (j: number): boolean => {
    const a = 2 ** (from + j * step);
    const p = erfc(a / Math.SQRT2);
    return (n - 1) * Math.log(1 - p + 3e-7) * (1 - 1e-12) < -746;
  };
  if (!zero(0)) return -1;
  // zero(lo) holds; zero(hi) does not, or hi is past the last node
  let lo = 0;
  let hi = count + 1;
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if (zero(mid)) lo = mid;
    else hi = mid;
  }
  return lo;
}

/** The moments of V for the grid count e^{k/PER_LN}, computed on first use (exported for tests). */
export function levelMoments(k: number): LevelMoments {
  let m = MOMENTS.get(k);
  if (m !== undefined) return m;
  const n = Math.exp(k / PER_LN);
  const centre = Math.log2(Math.sqrt(2 * Math.log(n)));
  const from = centre - BELOW;
  const count = (BELOW + ABOVE) * STEPS;
  const step = 1 / STEPS;
  const values = new Float64Array(count + 1);
  const weights = new Float64Array(count + 1);
  // the nodes below `start` have a density of exactly 0 (zeroBelow): they add +0 or −0 to every sum, which leaves it
  // as it is, so the sums start there
  const start = zeroBelow(from, step, count, n) + 1;
  let mass = 0;
  let first = 0;
  for (let j = start; j <= count; j++) {
    values[j] = levelDensity(from + j * step, n);
    weights[j] = ((j === 0 || j === count ? 1 : j % 2 === 1 ? 4 : 2) * step) / 3;
    mass += (weights[j] as number) * (values[j] as number);
    first += (weights[j] as number) * (values[j] as number) * (from + j * step);
  }
  const mean = first / mass;
  let variance = 0;
  let third = 0;
  for (let j = start; j <= count; j++) {
    const e = from + j * step - mean;
    const w = (weights[j] as number) * (values[j] as number);
    variance += w * e * e;
    third += w * e * e * e;
  }
  variance /= mass;
  third /= mass;
  const sigma = Math.sqrt(variance);
  const edges = new Float64Array(SHELL_EDGES.length + 2);
  edges[0] = -Infinity;
  for (let j = 0; j < SHELL_EDGES.length; j++) edges[j + 1] = (SHELL_EDGES[j] as number) * sigma;
  edges[edges.length - 1] = Infinity;
  const fourths = new Float64Array(edges.length - 1);
  let shell = 0;
  for (let j = start; j <= count; j++) {
    const e = from + j * step - mean;
    while (e > (edges[shell + 1] as number)) shell++;
    fourths[shell] = (fourths[shell] as number) + ((weights[j] as number) * (values[j] as number) * e * e * e * e) / mass;
  }
  // the mass beyond the quadrature's range: below, P(V ≤ from) = (1 − erfc(2^from/√2))^n; above, at most
  // n·erfc(2^top/√2). Each is charged a distance of the whole range plus 64 binades, to the fourth (V below `from` is
  // far less likely still lower: the tail falls as (0.8·2^v)^n, n ≥ 16), in the outermost shells
  const below = Math.exp(n * Math.log1p(-erfc(2 ** from / Math.SQRT2)));
  const above = Math.min(1, n * erfc(2 ** (from + count * step) / Math.SQRT2));
  const reach = BELOW + ABOVE + 64;
  fourths[0] = (fourths[0] as number) + below * reach ** 4;
  fourths[fourths.length - 1] = (fourths[fourths.length - 1] as number) + above * reach ** 4;
  let fourth = 0;
  for (let j = 0; j < fourths.length; j++) fourth += fourths[j] as number;
  m = { mean, variance, third, edges, fourths, fourth };
  MOMENTS.set(k, m);
  return m;
}

// |(u³ − 3u)·φ(u)|, 0 at ±∞
function fourth(u: number): number {
  return Number.isFinite(u) ? Math.abs((u * u - 3) * u * normalPdf(u)) : 0;
}
const INNER_PEAK = fourth(INNER_PEAK_U);
const OUTER_PEAK = fourth(OUTER_PEAK_U);

// The largest |(u³ − 3u)φ(u)| over [a, b] given its values at the ends: there, or at its peaks ±√(3 ∓ √6) when they lie
// inside (it is monotone between them and its zeros 0, ±√3)
function peakBetween(a: number, fa: number, b: number, fb: number): number {
  if ((a <= INNER_PEAK_U && INNER_PEAK_U <= b) || (a <= -INNER_PEAK_U && -INNER_PEAK_U <= b)) return INNER_PEAK;
  let peak = Math.max(fa, fb);
  if ((a <= OUTER_PEAK_U && OUTER_PEAK_U <= b) || (a <= -OUTER_PEAK_U && -OUTER_PEAK_U <= b)) peak = Math.max(peak, OUTER_PEAK);
  return peak;
}

// The remainder bound (times 24s⁴) of the Taylor values of I at x for two grid counts' moments at once. For V in a
// shell the Lagrange point lies between μ and V: the bound takes the largest |(u³ − 3u)φ(u)| from the means out to the
// shell's far edges, of both laws (the interval only grows outward, one new end per shell), times the larger of the
// two laws' shares of E(V − μ)⁴ there: it bounds both remainders. A shell whose share could move the bound by less
// than a thousandth of `value` takes the largest anywhere without an evaluation (the interval of the next shell
// evaluated covers it: it runs from the last end evaluated).
function remainder(x: number, s: number, a: LevelMoments, b: LevelMoments, value: number): number {
  const ua = (x - a.mean) / s;
  const ub = (x - b.mean) / s;
  const low = Math.min(ua, ub);
  const high = Math.max(ua, ub);
  const fLow = fourth(low);
  const fHigh = fourth(high);
  const inner = peakBetween(low, fLow, high, fHigh);
  const negligible = (1e-3 * Math.abs(value) * 24 * s * s * s * s) / INNER_PEAK;
  const edgesA = a.edges;
  const edgesB = b.edges;
  const fourthsA = a.fourths;
  const fourthsB = b.fourths;
  // the shell whose lower edge is the mean (the edges hold an offset of exactly 0)
  let centre = 0;
  while ((edgesA[centre] as number) < 0) centre++;
  let sum = 0;
  // outward from the means, each way: u falls as v rises, so the interval's lower end moves out above the means
  for (let direction = 1; direction >= -1; direction -= 2) {
    let end = direction > 0 ? low : high;
    let fEnd = direction > 0 ? fLow : fHigh;
    let running = inner;
    for (let j = direction > 0 ? centre : centre - 1; j >= 0 && j < fourthsA.length; j += direction) {
      const c = Math.max(fourthsA[j] as number, fourthsB[j] as number);
      if (c <= negligible) {
        sum += INNER_PEAK * c;
        continue;
      }
      const edge = direction > 0 ? j + 1 : j;
      const farA = (x - a.mean - (edgesA[edge] as number)) / s;
      const farB = (x - b.mean - (edgesB[edge] as number)) / s;
      const far = direction > 0 ? Math.min(farA, farB) : Math.max(farA, farB);
      if (direction > 0 ? far < end : far > end) {
        const fFar = fourth(far);
        running = Math.max(running, direction > 0 ? peakBetween(far, fFar, end, fEnd) : peakBetween(end, fEnd, far, fFar));
        end = far;
        fEnd = fFar;
      }
      sum += running * c;
    }
  }
  return sum;
}

// The Taylor value of I at x for one grid count's moments (without the remainder)
function taylorValue(x: number, s: number, m: LevelMoments): number {
  const u = (x - m.mean) / s;
  const density = normalPdf(u);
  return normalSf(u) + (u * density * m.variance) / (2 * s * s) + ((u * u - 1) * density * m.third) / (6 * s * s * s);
}

/** Whether {@link anyAboveEnclosure} bounds this profile's any-above probability at t (a Gaussian law, enough elements). */
export function enclosureApplies(profile: MagnitudeProfile, t: number): boolean {
  if (!(t > 0) || !enclosureHolds(profile)) return false;
  // a bound decides the law past it (the probability is 0 there): the integrals' own bounds say so
  return !(profile.bound !== undefined && profile.bound > 0 && t > profile.bound);
}

/** {@link enclosureApplies}' tests that do not read t: a positive rms and spread, and an enclosed law ({@link enclosedLaw}). */
export function enclosureHolds(profile: MagnitudeProfile): boolean {
  return profile.rms > 0 && profile.log2Spread > 0 && enclosedLaw(profile.shape, profile.elements * (1 - profile.zeroFraction));
}

/**
 * Whether a law of this shape over `n` nonzero elements has the moment and shifted-tail bounds: a Gaussian law, 16
 * elements or more ({@link enclosureApplies}' rule on the law alone, for callers that keep a profile's numbers apart).
 */
export function enclosedLaw(shape: ElementShape, n: number): boolean {
  return (shape === "gaussian" || shape === "half-gaussian" || shape === "bounded") && n >= LEAST_COUNT && Number.isFinite(n);
}

/**
 * Bounds [low, high] on {@link probabilityAnyAbove}(profile, t) (every element, both signs) from the moments of the
 * largest element's level, or null where they do not apply (another law, fewer than 16 elements, no spread, t past a
 * bound): a few evaluations of the normal tail, within about 1e-3 of the value where the spread is a few times the
 * level's own width (see the module comment).
 */
export function anyAboveEnclosure(profile: MagnitudeProfile, t: number): [number, number] | null {
  if (!enclosureApplies(profile, t)) return null;
  const n = profile.elements * (1 - profile.zeroFraction);
  const x = Math.log2(t) - Math.log2(profile.rms);
  if (!enclosureAt(n, profile.log2Spread, x, ENCLOSED, 0)) return null;
  return [ENCLOSED[0]!, ENCLOSED[1]!];
}
const ENCLOSED = new Float64Array(2);

// anyAboveEnclosure from plain numbers: [low, high] into `into` at `at` and `at + 1`, false (nothing written) where x is
// not finite
function enclosureAt(n: number, s: number, x: number, into: Float64Array, at: number): boolean {
  const k = Math.log(n) * PER_LN;
  return enclosureWith(levelMoments(Math.floor(k)), levelMoments(Math.ceil(k)), s, x, into, at);
}

/**
 * The grid counts' moments {@link anyAboveEnclosure} takes for a count n: below n and above it (for callers that keep a
 * tensor's count, spread and x = log2(t/rms) apart, as the dynamic simulation does in typed arrays).
 */
export function enclosureMoments(n: number): [LevelMoments, LevelMoments] {
  const k = Math.log(n) * PER_LN;
  return [levelMoments(Math.floor(k)), levelMoments(Math.ceil(k))];
}

/**
 * {@link anyAboveEnclosure} from plain numbers with the grid counts' moments given ({@link enclosureMoments}): [low, high]
 * into `into` at `at` and `at + 1`, false (nothing written) where x is not finite. The caller checks that the bounds
 * apply ({@link enclosureApplies}); the same arithmetic, so the same bounds bit for bit.
 */
export function enclosureWith(a: LevelMoments, b: LevelMoments, s: number, x: number, into: Float64Array, at: number): boolean {
  if (!Number.isFinite(x)) return false;
  const valueB = taylorValue(x, s, b);
  enclosed(taylorValue(x, s, a), valueB, remainder(x, s, a, b, valueB) / (24 * s * s * s * s), into, at);
  return true;
}

// [valueA − bound, valueB + bound] widened for what separates the computed integral from I, into `into` at `at`
function enclosed(valueA: number, valueB: number, bound: number, into: Float64Array, at: number): void {
  const low = valueA - bound;
  const high = valueB + bound;
  const widen = WIDEN * Math.max(0, high);
  into[at] = Math.max(0, low - widen);
  into[at + 1] = Math.min(1, high + widen);
}

/**
 * {@link enclosureWith} with the remainder taken at the peak of |(u³ − 3u)φ(u)| over the whole line, (E(V − μ)⁴ at most)
 * · 0.55/(24s⁴), instead of shell by shell: four evaluations of the normal tail and density in place of a dozen or more,
 * as tight where the value is well above that remainder (about 1e-7 both ways at 46,000 elements and a spread of 3
 * binades), looser in the far tail.
 * For the simulation's first narrowing of a tensor; the same contract as enclosureWith.
 */
export function enclosureQuick(a: LevelMoments, b: LevelMoments, s: number, x: number, into: Float64Array, at: number): boolean {
  if (!Number.isFinite(x)) return false;
  enclosed(taylorValue(x, s, a), taylorValue(x, s, b), quickRemainder(a, b, s), into, at);
  return true;
}

/**
 * {@link enclosureQuick}'s remainder bound, the half-width it adds to the Taylor values at every x: its upper bound is
 * at least this wherever the Taylor value is not negative, so a caller that needs an upper bound below a level this
 * reaches learns nothing from the quick bounds there (their four tails are then not worth taking).
 */
export function quickRemainder(a: LevelMoments, b: LevelMoments, s: number): number {
  return (INNER_PEAK * Math.max(a.fourth, b.fourth)) / (24 * s * s * s * s);
}

/**
 * Cruder bounds on {@link probabilityAnyAbove} than {@link anyAboveEnclosure}'s, for a fraction of their cost (two
 * normal tails): for sweeps that bound every tensor at once. With V and Z as in the module comment, for any levels
 * c_hi and c_lo
 *   P(V + s·Z ≥ x) ≤ P(V > c_hi) + Q((x − c_hi)/s)                (the event needs V > c_hi or s·Z ≥ x − c_hi)
 *   P(V + s·Z ≥ x) ≥ P(V ≥ c_lo) · Q((x − c_lo)/s)                (V and Z independent)
 * P(V > c) = 1 − (1 − e)^n ≤ n·e with e = erfc(2^c/√2) ≤ exp(−2^{2c}/2) (Chernoff's bound on the normal tail,
 * erfc(y) ≤ exp(−y²), from memory), so c_hi with 2^{2c_hi} = 2(ln n + 64 ln 2) leaves P(V > c_hi) ≤ 2^−64;
 * P(V < c) = (1 − e)^n ≤ exp(−n·e), and c_lo is taken where n·e is about 16. Each bound is off the integral by a shift
 * of about a binade over the spread (a factor of a few on a tail probability at a wide spread). The levels depend on
 * the count alone: those of the grid counts about n (levelMoments' grid; V grows with n, so the count above gives c_hi,
 * P(V > c) ≤ n·e ≤ n_above·e, and the count below c_lo, P(V < c) ≤ exp(−n_below·e)).
 * The upper bound's shift is the larger (c_hi sits a binade or more above V's bulk, c_lo a few of V's tenths of a
 * binade below it); a middle level c_mid, where n·e is about 1/64, splits V's range once more:
 *   P(V + s·Z ≥ x) ≤ Q((x − c_mid)/s) + P(V > c_mid)·Q((x − c_hi)/s) + P(V > c_hi)
 * (the event with V ≤ c_mid needs s·Z ≥ x − c_mid; with c_mid < V ≤ c_hi it needs V > c_mid and, Z independent of V,
 * s·Z ≥ x − c_hi), within about 1.3× of the integral where the one-level bound is 3–6× above it (the simulation's
 * sums of −ln(1 − p) over 2,000 tensors at growth 1.1: 24.9 against 30.7, and 61.5 with c_hi alone).
 */
interface ShiftLevels {
  /** c_hi: P(V > c_hi) ≤ 2^−64 */
  high: number;
  /** c_lo */
  low: number;
  /** a lower bound on P(V ≥ c_lo) */
  lowMass: number;
  /** c_mid */
  middle: number;
  /** an upper bound on P(V > c_mid) */
  middleTail: number;
}

const SHIFT_LEVELS = new GridMemo<ShiftLevels>();

// The levels for the grid count n = e^{k/PER_LN}, computed on first use
function gridShiftLevels(k: number): ShiftLevels {
  let levels = SHIFT_LEVELS.get(k);
  if (levels !== undefined) return levels;
  const lnN = k / PER_LN;
  const n = Math.exp(lnN);
  // 2^{2c_hi} = 2(ln n + 64 ln 2): n·exp(−2^{2c_hi}/2) = 2^−64
  const high = 0.5 * Math.log2(2 * (lnN + 64 * Math.LN2));
  // y with erfc(y) near 16/n (y·√2 = 2^c_lo), two steps; any y gives a valid bound (the mass is computed for the y
  // taken), a good one a tight bound
  const y = erfcArgumentNear(lnN - Math.log(16), 2);
  // P(V ≥ c_lo) ≥ 1 − exp(−n·e), e from the fast erfc (relative error below 1.2e-7, src/risk/_math.ts) taken low
  const lowMass = -Math.expm1(-n * erfc(y) * (1 - 1e-6));
  // m with erfc(m) near 1/(64n) (m·√2 = 2^c_mid), three steps (any m gives a valid bound: the tail is computed for the m
  // taken); P(V > c_mid) ≤ n·e, e from the fast erfc taken high
  const m = erfcArgumentNear(lnN + Math.log(64), 3);
  const middleTail = Math.min(1, n * erfc(m) * (1 + 1e-6));
  levels = { high, low: Math.log2(y * Math.SQRT2), lowMass, middle: Math.log2(m * Math.SQRT2), middleTail };
  SHIFT_LEVELS.set(k, levels);
  return levels;
}

// y with erfc(y) near e^−target, by `steps` fixed-point steps from y = 2 on erfc(y) ≈ e^{−y²}/(y·√π) (the tail's
// leading asymptotic term, common practice): y² = target − ln(y·√π)
function erfcArgumentNear(target: number, steps: number): number {
  let y = 2;
  for (let j = 0; j < steps; j++) y = Math.sqrt(Math.max(0.01, target - Math.log(y * 1.7724538509055159)));
  return y;
}

/**
 * The shift levels of a count n ≥ 16 of nonzero elements (c_hi and c_mid from the grid count above n, c_lo below) into
 * `into` at `at` … `at + 4`: c_hi, c_lo, the lower bound on P(V ≥ c_lo), c_mid and the upper bound on P(V > c_mid).
 */
export function shiftLevels(n: number, into: Float64Array, at: number): void {
  const k = Math.log(n) * PER_LN;
  const below = gridShiftLevels(Math.floor(k));
  const above = gridShiftLevels(Math.ceil(k));
  into[at] = above.high;
  into[at + 1] = below.low;
  into[at + 2] = below.lowMass;
  into[at + 3] = above.middle;
  into[at + 4] = above.middleTail;
}
/** How many numbers {@link shiftLevels} writes. */
export const SHIFT_LEVELS_LENGTH = 5;

/**
 * The shifted-tail bounds at x = log2(t/rms) for spread s and a count's levels (the upper bound split at the middle
 * level, ShiftLevels), into `into` at `at` and `at + 1` ([low, high]). Widened by 1e-4 of the value for what
 * separates the computed integral from the probability (2e-5 above); a lower bound under 1e-15 is taken as 0 (the
 * integral's rule covers ±9 standard deviations of the draws).
 * The caller checks that the bounds apply ({@link enclosureApplies}).
 */
export function shiftBounds(x: number, s: number, high: number, low: number, lowMass: number, middle: number, middleTail: number, into: Float64Array, at: number): void {
  const tail = normalSf((x - high) / s);
  into[at + 1] = upperOfTwo(tail, normalSf((x - middle) / s), middleTail);
  // c_lo < c_hi, so the lower bound's tail is at most the upper's (Q falls; the fast tail within 2.4e-7 of that order):
  // under 1e-15 with it, without evaluating it
  if (tail < 1e-15 / (1 + 1e-6)) {
    into[at] = 0;
    return;
  }
  const lower = lowMass * normalSf((x - low) / s);
  into[at] = lower < 1e-15 ? 0 : lower * (1 - 1e-4);
}

// The normal tail Q on a fixed grid of u = j/TAIL_STEPS from TAIL_LOW to TAIL_HIGH, made on first use (the fast tail
// of src/risk/_math.ts, within 1.2e-7 of Q): Q falls, so the grid point below u bounds Q(u) above and the one above it
// bounds it below, without an evaluation (a table of a special function, not of any spec).
const TAIL_STEPS = 256;
const TAIL_LOW = -10;
const TAIL_HIGH = 40;
let tailTable: Float64Array | undefined;
function tailGrid(): Float64Array {
  if (tailTable !== undefined) return tailTable;
  const count = (TAIL_HIGH - TAIL_LOW) * TAIL_STEPS + 1;
  const table = new Float64Array(count);
  for (let j = 0; j < count; j++) table[j] = normalSf(TAIL_LOW + j / TAIL_STEPS);
  tailTable = table;
  return table;
}
// the fast tail's relative error, both ways (below 1.2e-7, src/risk/_math.ts), with room
const TAIL_FIT = 1.3e-7;

// Q at grid index j bounded above: the grid point at or below the argument (1 below the grid; not a number where j is not)
function gridTailAbove(table: Float64Array, j: number): number {
  const last = table.length - 1;
  return j < 0 ? 1 : j >= last ? (table[last] as number) * (1 + TAIL_FIT) : (table[j] as number) * (1 + TAIL_FIT);
}

// Q at grid index k bounded below: the grid point at or above the argument (0 above the grid)
function gridTailBelow(table: Float64Array, k: number): number {
  const last = table.length - 1;
  return k > last ? 0 : k <= 0 ? (table[0] as number) * (1 - TAIL_FIT) : (table[k] as number) * (1 - TAIL_FIT);
}

// The upper bound of shiftBounds and its tabled forms from Q at c_hi (`tail`) and at c_mid (`middleQ`): the bound split
// at the middle level where it is the lower, else (or where it is not a number) c_hi's alone, each widened by 1e-4
function upperOfTwo(tail: number, middleQ: number, middleTail: number): number {
  const split = (middleQ + middleTail * tail + 2 ** -64) * (1 + 1e-4);
  const one = Math.min(1, (tail + 2 ** -64) * (1 + 1e-4));
  return split < one ? split : one;
}

/**
 * {@link shiftBoundsTabled} from its grid arguments, up = ((x − c_hi)/s − TAIL_LOW)·TAIL_STEPS, middle and down the same
 * with c_mid and c_lo, for a caller that keeps them as affine functions of log2 t (x = log2 t − log2 rms: up = log2
 * t·(TAIL_STEPS/s) + a constant per tensor, {@link SHIFT_GRID_STEPS}, {@link SHIFT_GRID_ORIGIN}), without divisions per
 * tensor, and with the middle level's upper bound (middleTail the bound on P(V > c_mid); see ShiftLevels). Rounded
 * that way an argument strays from shiftBoundsTabled's by a few units in the last place of (|log2 t| + |log2 rms| +
 * |c|)·TAIL_STEPS/s, as shiftBoundsTabled's own rounding of x − c does: as if a level moved by ~1e-14 binade (levels
 * within 2^±64), which moves P(V > c_hi) ≤ 2^−64, the other levels' masses and the tails by a relative ~u·1e-14/s, far
 * inside the 1e-4 each bound is widened by (2e-5 of it taken, see shiftBounds). False (nothing written) where up is
 * not a number: the caller then takes shiftBounds.
 */
export function shiftBoundsGridded(up: number, middle: number, middleTail: number, down: number, lowMass: number, into: Float64Array, at: number): boolean {
  const table = tailGrid();
  const tail = gridTailAbove(table, Math.floor(up));
  if (!(tail === tail)) return false;
  // Q at the middle level, bounded above as the top level's is; the two-level bound holds for any two levels
  into[at + 1] = upperOfTwo(tail, gridTailAbove(table, Math.floor(middle)), middleTail);
  if (tail < 1e-15) {
    into[at] = 0;
    return true;
  }
  const lower = lowMass * gridTailBelow(table, Math.ceil(down));
  into[at] = lower < 1e-15 ? 0 : lower * (1 - 1e-4);
  return true;
}
/**
 * The x from which {@link shiftBoundsTabled}'s two tails, for levels c_hi (`high`) and c_mid (`middle`) at spread
 * s > 0, both read the grid at or past u = FAR_TAIL (a sixteenth of s to spare, far more than the rounding of
 * (x − c)/s): Q falls, and upperOfTwo rises with both tails, so from there its upper bound is at most
 * {@link shiftTabledFar}(middleTail), and its lower bound is 0.
 */
export function shiftTabledFarFrom(high: number, middle: number, s: number): number {
  return Math.max(high, middle) + (FAR_TAIL + 1 / 16) * s;
}

/** {@link shiftBoundsTabled}'s upper bound at and past {@link shiftTabledFarFrom}: a few times 1e-19. */
export function shiftTabledFar(middleTail: number): number {
  const q = gridTailAbove(tailGrid(), (FAR_TAIL - TAIL_LOW) * TAIL_STEPS);
  return upperOfTwo(q, q, middleTail);
}
// Q(9) ≈ 1.1e-19: two thousand tensors bounded so add ~1e-15, far under any overflow budget
const FAR_TAIL = 9;

/** {@link shiftBoundsGridded}'s grid steps per unit of the normal tail's argument, and the grid's origin (−TAIL_LOW·TAIL_STEPS). */
export const SHIFT_GRID_STEPS = TAIL_STEPS;
export const SHIFT_GRID_ORIGIN = -TAIL_LOW * TAIL_STEPS;

/**
 * {@link shiftBounds} with each normal tail bounded by the grid points about its argument instead of evaluated: a
 * little looser (at most a factor e^{(u + 1)/256} on Q(u), 4% at u = 8, against the shift's factor of a few) for a table
 * read each, and the upper bound split at the middle level c_mid where that is lower (middleTail the bound on
 * P(V > c_mid); see ShiftLevels). For sweeps over every tensor; the same contract as shiftBounds.
 */
export function shiftBoundsTabled(x: number, s: number, high: number, low: number, lowMass: number, middle: number, middleTail: number, into: Float64Array, at: number): void {
  const table = tailGrid();
  // upper: Q((x − c_hi)/s) ≤ Q at the grid point at or below the argument (1 below the grid)
  const tail = gridTailAbove(table, Math.floor(((x - high) / s - TAIL_LOW) * TAIL_STEPS));
  if (!(tail === tail)) {
    shiftBounds(x, s, high, low, lowMass, middle, middleTail, into, at);
    return;
  }
  into[at + 1] = upperOfTwo(tail, gridTailAbove(table, Math.floor(((x - middle) / s - TAIL_LOW) * TAIL_STEPS)), middleTail);
  // lower: Q((x − c_lo)/s) ≥ Q at the grid point at or above the argument (0 above the grid); c_lo < c_hi, so it is at
  // most the upper's tail: under 1e-15 with it, without a read
  if (tail < 1e-15) {
    into[at] = 0;
    return;
  }
  const lower = lowMass * gridTailBelow(table, Math.ceil(((x - low) / s - TAIL_LOW) * TAIL_STEPS));
  into[at] = lower < 1e-15 ? 0 : lower * (1 - 1e-4);
}
