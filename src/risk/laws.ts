/**
 * The law of one element's magnitude, for each element shape of a magnitude profile, and the mixture over
 * draws of the tensor's scale. Pure kernels: they never throw; degenerate inputs give 0 or 1.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { erf, erfc, normalCdf, normalPdf, normalSf, LN2 } from "./_math.js";

const SQRT2 = Math.SQRT2;
const SQRT3 = Math.sqrt(3);

/** The magnitude law of one nonzero element when the tensor's scale (its rms) is r. */
export interface ElementLaw {
  /** P(|x| ≤ t) */
  below(r: number, t: number): number;
  /** P(|x| ≥ t), accurate relative to its own size far into the upper tail */
  above(r: number, t: number): number;
  /** E[x²; |x| ≤ t] / E[x²]: the share of the squared norm carried by elements at or below t */
  energyBelow(r: number, t: number): number;
  /** E[x⁴]/E[x²]²: the kurtosis of the element, which sets how much a sum of squares fluctuates */
  kurtosis: number;
  /** P(x ≥ t) / P(|x| ≥ t): 1/2 for a symmetric sign, 1 when the sign is fixed or unknown (worst case) */
  positiveShare: number;
}

// Gaussian magnitudes: x = r·Z. P(|x| ≤ t) = erf(t/(r√2)) (SCIENCE.md §4).
function gaussianBelow(r: number, t: number): number {
  if (!(t > 0)) return 0;
  if (!(r > 0)) return 1;
  return erf(t / (r * SQRT2));
}
function gaussianAbove(r: number, t: number): number {
  if (!(t > 0)) return 1;
  if (!(r > 0)) return 0;
  return erfc(t / (r * SQRT2));
}
// E[Z²; |Z| ≤ a] = erf(a/√2) − 2aφ(a) (integration by parts of z·zφ(z)); below a = 1 the difference cancels,
// so use the termwise integral of the Taylor series of z²e^{−z²/2}: 2φ(0)·Σ (−1/2)^k/k!·a^{2k+3}/(2k+3).
function gaussianEnergyBelow(r: number, t: number): number {
  if (!(t > 0)) return 0;
  if (!(r > 0)) return 1;
  const a = t / r;
  if (a < 1) {
    const a2 = a * a;
    let power = a * a2;
    let coefficient = 1;
    let sum = 0;
    for (let k = 0; k < 30; k++) {
      const term = (coefficient * power) / (2 * k + 3);
      sum += term;
      if (Math.abs(term) < 1e-17 * Math.abs(sum)) break;
      coefficient *= -0.5 / (k + 1);
      power *= a2;
    }
    return 2 * normalPdf(0) * sum;
  }
  // the complement erfc(a/√2) + 2aφ(a) has no cancellation for large a
  return 1 - (erfc(a / SQRT2) + 2 * a * normalPdf(a));
}

const gaussian: ElementLaw = {
  below: gaussianBelow,
  above: gaussianAbove,
  energyBelow: gaussianEnergyBelow,
  kurtosis: 3,
  positiveShare: 0.5,
};

// A ReLU output's nonzero part: the magnitudes of a Gaussian, all of one sign.
const halfGaussian: ElementLaw = { ...gaussian, positiveShare: 1 };

// x ~ U[−A, A] with A = r·√3 (variance A²/3): P(|x| ≤ t) = t/A, E[x²; |x| ≤ t]/E[x²] = (t/A)³, kurtosis 9/5.
const uniform: ElementLaw = {
  below: (r, t) => (!(t > 0) ? 0 : !(r > 0) ? 1 : Math.min(1, t / (r * SQRT3))),
  above: (r, t) => (!(t > 0) ? 1 : !(r > 0) ? 0 : Math.max(0, 1 - t / (r * SQRT3))),
  energyBelow: (r, t) => (!(t > 0) ? 0 : !(r > 0) ? 1 : Math.min(1, t / (r * SQRT3)) ** 3),
  kurtosis: 9 / 5,
  positiveShare: 0.5,
};

// Every nonzero element has magnitude r; its sign is not known, so a one-sided test takes the worst case.
const constant: ElementLaw = {
  below: (r, t) => (r <= t ? 1 : 0),
  above: (r, t) => (r >= t ? 1 : 0),
  energyBelow: (r, t) => (r <= t ? 1 : 0),
  kurtosis: 1,
  positiveShare: 1,
};

// Magnitudes of a Gaussian, never above the bound (sigmoid outputs, probabilities); modelling choice: the
// Gaussian tail up to the bound, nothing beyond it.
function boundedLaw(bound: number): ElementLaw {
  return {
    below: (r, t) => (t >= bound ? 1 : gaussianBelow(r, t)),
    above: (r, t) => (t > bound ? 0 : gaussianAbove(r, t)),
    energyBelow: (r, t) => (t >= bound ? 1 : gaussianEnergyBelow(r, t)),
    kurtosis: 3,
    positiveShare: 1,
  };
}

// log2|x| ~ N(m, s²) with m = log2 r − s²·ln 2, so that E[x²] = r² (E[2^{2sZ}] = e^{2(s ln 2)²}).
// P(|x| ≤ t) = Φ((log2 t − m)/s) (SCIENCE.md §4, in log2 units); the partial second moment of a log-normal:
// E[x²; |x| ≤ t]/E[x²] = Φ((log2 t − m)/s − 2s·ln 2); kurtosis e^{4(s ln 2)²}.
function logNormalLaw(s: number): ElementLaw {
  const mean = (r: number): number => Math.log2(r) - s * s * LN2;
  return {
    below: (r, t) => (!(t > 0) ? 0 : !(r > 0) ? 1 : normalCdf((Math.log2(t) - mean(r)) / s)),
    above: (r, t) => (!(t > 0) ? 1 : !(r > 0) ? 0 : normalSf((Math.log2(t) - mean(r)) / s)),
    energyBelow: (r, t) =>
      !(t > 0) ? 0 : !(r > 0) ? 1 : normalCdf((Math.log2(t) - mean(r)) / s - 2 * s * LN2),
    kurtosis: Math.exp(4 * (s * LN2) ** 2),
    positiveShare: 0.5,
  };
}

/** Number of nonzero elements of one step. */
export function nonzeroElements(profile: MagnitudeProfile): number {
  return Math.max(0, profile.elements * (1 - profile.zeroFraction));
}

/** Whether a profile has no nonzero element to judge (every risk number is then 0). */
export function isEmpty(profile: MagnitudeProfile): boolean {
  return !(profile.rms > 0) || !(nonzeroElements(profile) > 0);
}

/** Every nonzero element equals the drawn scale: constant shape, or a log-normal without element spread. */
export function isConstantLike(profile: MagnitudeProfile): boolean {
  return profile.shape === "constant" || (profile.shape === "log-normal" && !((profile.elementLog2Spread ?? 0) > 0));
}

/**
 * The element law of a profile's nonzero part. A `bound` given with any shape caps the magnitudes there (the
 * engine marks probabilities and softmax gradients with the largest value they can take).
 */
export function elementLaw(profile: MagnitudeProfile): ElementLaw {
  const law = baseLaw(profile);
  const bound = profile.bound;
  if (profile.shape === "bounded" || bound === undefined || !(bound > 0)) return law;
  return {
    below: (r, t) => (t >= bound ? 1 : law.below(r, t)),
    above: (r, t) => (t > bound ? 0 : law.above(r, t)),
    energyBelow: (r, t) => (t >= bound ? 1 : law.energyBelow(r, t)),
    kurtosis: law.kurtosis,
    positiveShare: law.positiveShare,
  };
}

function baseLaw(profile: MagnitudeProfile): ElementLaw {
  switch (profile.shape) {
    case "gaussian":
      return gaussian;
    case "half-gaussian":
      return halfGaussian;
    case "uniform":
      return uniform;
    case "constant":
      return constant;
    case "bounded":
      return profile.bound !== undefined && profile.bound > 0 ? boundedLaw(profile.bound) : gaussian;
    case "log-normal": {
      const s = profile.elementLog2Spread ?? 0;
      return s > 0 ? logNormalLaw(s) : constant;
    }
  }
}

// Draws of the scale: log2(r) = log2(rms) + spread·z, z ~ N(0, 1). The integrand over z is often a smoothed
// step (a tail probability that switches on past some draw), which a Gauss–Hermite rule with its few outer
// nodes resolves poorly; composite Simpson on a uniform grid (step 1/8) over ±9 standard deviations resolves it,
// and the mass beyond 9 (about 2e-19) is below any probability we report.
const DRAW_LIMIT = 9;
const DRAW_STEP = 1 / 8;
const DRAW_NODES: { z: Float64Array; w: Float64Array } = (() => {
  const count = Math.round((2 * DRAW_LIMIT) / DRAW_STEP) + 1;
  const z = new Float64Array(count);
  const w = new Float64Array(count);
  let total = 0;
  for (let i = 0; i < count; i++) {
    z[i] = -DRAW_LIMIT + i * DRAW_STEP;
    const simpson = i === 0 || i === count - 1 ? 1 : i % 2 === 1 ? 4 : 2;
    w[i] = simpson * normalPdf(z[i] as number);
    total += w[i] as number;
  }
  for (let i = 0; i < count; i++) w[i] = (w[i] as number) / total;
  return { z, w };
})();

// The same integral by the trapezoid rule on two coarse sub-grids of the grid above: step 1/2 (every 4th node)
// and step 3/4 (every 6th), each with its own normalised weights. For a smooth integrand the trapezoid rule on the
// whole line converges geometrically in 1/step (Trefethen & Weideman 2014, SIAM Review 56(3), §5; from memory),
// and the Gaussian weight alone is resolved to about 2e^{−2π²/step²} (1e-15 at step 3/4). When the two sums agree
// to 1e-10, the step-1/2 sum is good to about the 3/2 power of that: the far digits of the Simpson sum, at 49
// evaluations instead of 145. Steps in the integrand (a bound, a threshold the draws cross) fail the test and get
// the full rule, as does an integrand whose end nodes carry weight (the rules treat the cut at ±9 differently).
const HALF_STRIDE = 4;
const THREE_QUARTER_STRIDE = 6;
function trapezoidWeights(stride: number): Float64Array {
  const { z } = DRAW_NODES;
  const weights = new Float64Array(z.length);
  let total = 0;
  for (let i = 0; i < z.length; i += stride) {
    const end = i === 0 || i === z.length - 1 ? 0.5 : 1;
    weights[i] = end * normalPdf(z[i] as number);
    total += weights[i] as number;
  }
  for (let i = 0; i < z.length; i += stride) weights[i] = (weights[i] as number) / total;
  return weights;
}
const HALF_WEIGHTS = trapezoidWeights(HALF_STRIDE);
const THREE_QUARTER_WEIGHTS = trapezoidWeights(THREE_QUARTER_STRIDE);
const COARSE_AGREEMENT = 1e-10;
const COARSE_END_SHARE = 1e-13;
// The scale factors 2^(spread·z_i) of the rule's nodes per spread: the calls for one profile (several thresholds
// of a tensor, a search over loss scales) share its spread, so each power is taken once. Bounded, so a
// long-running batch worker does not grow without end.
const FACTORS = new Map<number, Float64Array>();
const FACTORS_LIMIT = 4096;
function nodeFactors(log2Spread: number): Float64Array {
  let factors = FACTORS.get(log2Spread);
  if (factors === undefined) {
    const { z } = DRAW_NODES;
    factors = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) factors[i] = 2 ** (log2Spread * (z[i] as number));
    if (FACTORS.size >= FACTORS_LIMIT) FACTORS.clear();
    FACTORS.set(log2Spread, factors);
  }
  return factors;
}

// integrand values of one call (overDraws never re-enters itself: its f are element laws)
const VALUES = new Float64Array(DRAW_NODES.z.length);

/**
 * E over draws of a probability or share f(r), where log2(r) ~ N(log2(rms), log2Spread²) (finite-width
 * spread, Hanin & Nica 2019): f(rms) itself when the scale does not spread. Clamped to [0, 1] against the
 * rounding of the quadrature sum. Smooth integrands take the coarse rule (49 evaluations, see HALF_STRIDE), the
 * others the Simpson rule (145).
 */
export function overDraws(rms: number, log2Spread: number, f: (r: number) => number): number {
  if (!(log2Spread > 0)) return f(rms);
  const { z, w } = DRAW_NODES;
  const last = z.length - 1;
  const factors = nodeFactors(log2Spread);
  // every f here is monotone in r, so equal values at the two extreme draws mean a constant integrand
  // (an overflow far out of reach, a share that is 0 or 1 for every draw): one evaluation pair instead of all
  const low = f(rms * (factors[0] as number));
  const high = f(rms * (factors[last] as number));
  if (low === high) return Math.min(1, Math.max(0, low));
  const values = VALUES;
  values[0] = low;
  values[last] = high;
  let half = HALF_WEIGHTS[0]! * low + HALF_WEIGHTS[last]! * high;
  let threeQuarter = THREE_QUARTER_WEIGHTS[0]! * low + THREE_QUARTER_WEIGHTS[last]! * high;
  for (let i = HALF_STRIDE; i < last; i += HALF_STRIDE) {
    const value = f(rms * (factors[i] as number));
    values[i] = value;
    half += HALF_WEIGHTS[i]! * value;
  }
  for (let i = THREE_QUARTER_STRIDE; i < last; i += THREE_QUARTER_STRIDE) {
    let value = values[i] as number;
    if (i % HALF_STRIDE !== 0) {
      value = f(rms * (factors[i] as number));
      values[i] = value;
    }
    threeQuarter += THREE_QUARTER_WEIGHTS[i]! * value;
  }
  const ends = HALF_WEIGHTS[0]! * Math.abs(low) + HALF_WEIGHTS[last]! * Math.abs(high);
  if (Math.abs(half - threeQuarter) <= COARSE_AGREEMENT * Math.abs(half) && ends <= COARSE_END_SHARE * Math.abs(half)) {
    return Math.min(1, Math.max(0, half));
  }
  // f is monotone, so between two evaluated nodes of equal value (a share already 0 or 1, a probability that
  // underflows) every node has that value: the sum is the Simpson sum, with the flat stretches not re-evaluated
  for (let i = 1; i < last; i++) {
    if (i % HALF_STRIDE === 0 || i % THREE_QUARTER_STRIDE === 0) continue;
    const previous = Math.max(i - (i % HALF_STRIDE), i - (i % THREE_QUARTER_STRIDE));
    const next = Math.min(i - (i % HALF_STRIDE) + HALF_STRIDE, i - (i % THREE_QUARTER_STRIDE) + THREE_QUARTER_STRIDE, last);
    const before = values[previous] as number;
    values[i] = before === values[next] ? before : f(rms * (factors[i] as number));
  }
  let sum = (w[0] as number) * low + (w[last] as number) * high;
  for (let i = 1; i < last; i++) sum += (w[i] as number) * (values[i] as number);
  return Math.min(1, Math.max(0, sum));
}

// Far below the scale (every draw's t/r at most 1/2) the Gaussian shares are power series in a = t/r, and the draws
// make a log-normal: E[a^m] = (t/rms)^m·e^{(m·spread·ln 2)²/2} (the moments of a log-normal). The series below are
// the ones gaussianBelow and gaussianEnergyBelow sum node by node there, so the closed form is the draw integral
// without the quadrature (it differs from the rule's sum in the last digits: the rule is exact for these to
// rounding, as the mass of the shifted weights beyond ±9 is negligible for the terms that count).
const SMALL_RATIO = 0.5;

/**
 * E over draws of erf(a/√2), a = t/r, log2 r ~ N(log2 rms, spread²), when every draw of the rule has a ≤ 1/2;
 * NaN when some draw does not (the caller then integrates). `ratio` is t/rms.
 */
export function gaussianBelowOverDraws(ratio: number, spread: number): number {
  if (!(ratio > 0) || !(ratio * 2 ** (spread * DRAW_LIMIT) <= SMALL_RATIO)) return NaN;
  // erf(x) = (2/√π)·Σ (−1)^n x^{2n+1}/(n!(2n+1)) with x = a/√2 (Abramowitz & Stegun 7.1.5)
  const sigma = spread * LN2;
  const x = ratio / SQRT2;
  const x2 = x * x;
  let power = x;
  let coefficient = 1;
  let sum = 0;
  for (let n = 0; n < 40; n++) {
    const m = 2 * n + 1;
    const term = (coefficient * power * Math.exp(0.5 * (m * sigma) ** 2)) / m;
    sum += term;
    if (Math.abs(term) < 1e-17 * Math.abs(sum)) return Math.min(1, Math.max(0, 1.1283791670955126 * sum));
    coefficient *= -1 / (n + 1);
    power *= x2;
  }
  return NaN;
}

/** E over draws of E[Z²; |Z| ≤ a] (the energy share below t), under the same condition as {@link gaussianBelowOverDraws}. */
export function gaussianEnergyBelowOverDraws(ratio: number, spread: number): number {
  if (!(ratio > 0) || !(ratio * 2 ** (spread * DRAW_LIMIT) <= SMALL_RATIO)) return NaN;
  // 2φ(0)·Σ (−1/2)^k/k!·a^{2k+3}/(2k+3), as in gaussianEnergyBelow
  const sigma = spread * LN2;
  const a2 = ratio * ratio;
  let power = ratio * a2;
  let coefficient = 1;
  let sum = 0;
  for (let k = 0; k < 40; k++) {
    const m = 2 * k + 3;
    const term = (coefficient * power * Math.exp(0.5 * (m * sigma) ** 2)) / m;
    sum += term;
    if (Math.abs(term) < 1e-17 * Math.abs(sum)) return Math.min(1, Math.max(0, 2 * normalPdf(0) * sum));
    coefficient *= -0.5 / (k + 1);
    power *= a2;
  }
  return NaN;
}

/**
 * The integrand of {@link overDraws} at its two extreme draws, lowest value first: bounds of the integral for
 * a monotone f (the weights are positive and sum to 1), widened by 1e-12 for the rounding of the sum.
 */
export function overDrawsBounds(rms: number, log2Spread: number, f: (r: number) => number): [number, number] {
  if (!(log2Spread > 0)) {
    const value = f(rms);
    return [value, value];
  }
  const { z } = DRAW_NODES;
  const a = f(rms * 2 ** (log2Spread * (z[0] as number)));
  const b = f(rms * 2 ** (log2Spread * (z[z.length - 1] as number)));
  if (a === b) return [Math.min(1, Math.max(0, a)), Math.min(1, Math.max(0, a))];
  return [Math.max(0, Math.min(a, b) * (1 - 1e-12)), Math.min(1, Math.max(a, b) * (1 + 1e-12))];
}

// Nodes |z| ≤ 4 of the rule carry all but INNER_OUTSIDE of its weight (about 6e-5: twice the normal tail at 4).
const INNER_LIMIT = 4;
const INNER_OUTSIDE = (() => {
  const { z, w } = DRAW_NODES;
  let outside = 0;
  for (let i = 0; i < z.length; i++) if (Math.abs(z[i] as number) > INNER_LIMIT) outside += w[i] as number;
  return outside;
})();

/**
 * Tighter bounds of a [0, 1]-valued monotone integrand's draw integral than {@link overDrawsBounds}, for a test
 * against a tolerance well above 1e-4: the draws within ±4 standard deviations give the integrand's range there,
 * the rest of the weight (about 6e-5) is bounded by 0 and 1. Intersected with the extreme-draw bounds; widened by
 * 1e-9 for the difference between the rule's coarse and full sums (overDraws accepts the coarse one at 1e-10).
 */
export function overDrawsInnerBounds(rms: number, log2Spread: number, f: (r: number) => number): [number, number] {
  const [outerLow, outerHigh] = overDrawsBounds(rms, log2Spread, f);
  if (outerLow === outerHigh || !(log2Spread > 0)) return [outerLow, outerHigh];
  const a = f(rms * 2 ** (-log2Spread * INNER_LIMIT));
  const b = f(rms * 2 ** (log2Spread * INNER_LIMIT));
  const inside = 1 - INNER_OUTSIDE;
  const low = Math.max(0, Math.min(a, b) * inside * (1 - 1e-9));
  const high = Math.min(1, (Math.max(a, b) * inside + INNER_OUTSIDE) * (1 + 1e-9));
  return [Math.max(outerLow, low), Math.min(outerHigh, high)];
}

// Where a monotone function f(v) crosses p: "beyond" is the side past the crossing as v grows (f ≤ p for a
// decreasing f, f ≥ p for an increasing one). Brackets by doubling steps from v = 0, then bisects.
function crossing(f: (v: number) => number, p: number, decreasing: boolean): number {
  const beyond = (v: number): boolean => (decreasing ? f(v) <= p : f(v) >= p);
  const LIMIT = 2200;
  let lo: number;
  let hi: number;
  if (beyond(0)) {
    hi = 0;
    let step = 1;
    lo = -step;
    while (beyond(lo) && lo > -LIMIT) {
      hi = lo;
      step *= 2;
      lo = Math.max(-LIMIT, lo - step);
    }
  } else {
    lo = 0;
    let step = 1;
    hi = step;
    while (!beyond(hi) && hi < LIMIT) {
      lo = hi;
      step *= 2;
      hi = Math.min(LIMIT, hi + step);
    }
  }
  for (let i = 0; i < 80 && hi - lo > 1e-9; i++) {
    const mid = 0.5 * (lo + hi);
    if (beyond(mid)) hi = mid;
    else lo = mid;
  }
  return 0.5 * (lo + hi);
}

/**
 * The level v (in binades above the median scale) where the draw mixture of a scale-family probability crosses
 * p: E_z[g(v − spread·z)] = p, z ~ N(0, 1). `g(v)` is the probability at the median scale for the threshold
 * 2^v·rms; every element law but "bounded" depends on t/r only, which makes this a convolution. It is
 * evaluated on the lattice of the draw rule (step spread/8), so each g value is computed once and shared by
 * every step of the search; the crossing is interpolated between lattice points in log probability.
 * `decreasing`: g falls as v grows (exceedance probabilities); otherwise it rises (shares below a level).
 */
export function mixtureCrossing(g: (v: number) => number, spread: number, p: number, decreasing: boolean): number {
  const direct = crossing(g, p, decreasing);
  if (!(spread > 0)) return direct;
  const { w } = DRAW_NODES;
  const half = (w.length - 1) / 2;
  const step = spread * DRAW_STEP;
  // lattice values memoised in a window around the start, grown when the search leaves it
  let base = Math.round(direct / step) - 4 * half;
  let memo = new Float64Array(8 * half + 1).fill(NaN);
  const at = (m: number): number => {
    let index = m - base;
    if (index < 0 || index >= memo.length) {
      const grown = new Float64Array(memo.length * 2 + Math.abs(index)).fill(NaN);
      const shift = index < 0 ? grown.length - memo.length : 0;
      grown.set(memo, shift);
      base -= shift;
      memo = grown;
      index = m - base;
    }
    let value = memo[index] as number;
    if (Number.isNaN(value)) {
      value = g(m * step);
      memo[index] = value;
    }
    return value;
  };
  // node i sits at z = (i − half)·DRAW_STEP, so v_j − spread·z_i is lattice point j + half − i
  const mixture = (j: number): number => {
    let sum = 0;
    for (let i = 0; i < w.length; i++) sum += (w[i] as number) * at(j + half - i);
    return sum;
  };
  const beyond = (j: number): boolean => (decreasing ? mixture(j) <= p : mixture(j) >= p);
  const limit = Math.ceil(2200 / step);
  const start = Math.round(direct / step);
  const sigma = Math.round(1 / DRAW_STEP);
  let lo: number;
  let hi: number;
  if (beyond(start)) {
    hi = start;
    let jump = sigma;
    lo = start - jump;
    while (beyond(lo) && lo > -limit) {
      hi = lo;
      jump *= 2;
      lo -= jump;
    }
  } else {
    lo = start;
    let jump = sigma;
    hi = start + jump;
    while (!beyond(hi) && hi < limit) {
      lo = hi;
      jump *= 2;
      hi += jump;
    }
  }
  while (hi - lo > 1) {
    const mid = Math.floor((lo + hi) / 2);
    if (beyond(mid)) hi = mid;
    else lo = mid;
  }
  const a = mixture(lo);
  const b = mixture(hi);
  let fraction = 0.5;
  if (a > 0 && b > 0 && a !== b) fraction = (Math.log(p) - Math.log(a)) / (Math.log(b) - Math.log(a));
  else if (a !== b) fraction = (p - a) / (b - a);
  return (lo + Math.min(1, Math.max(0, fraction))) * step;
}
