/**
 * The law of one element's magnitude, for each element shape of a magnitude profile, and the mixture over
 * draws of the tensor's scale. Pure kernels: they never throw; degenerate inputs give 0 or 1.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { anyOf, CHEBYSHEV_ERFC_TAYLOR, erf, erfc, exp2, hashSlot, normalCdf, normalPdf, normalSf, normalUpperQuantile, LN2 } from "./_math.js";
import { erf as preciseErf, erfc as preciseErfc, normalCdf as preciseNormalCdf, normalSf as preciseNormalSf } from "../numeric/normal.js";
import { bisectDecreasing } from "../numeric/bisection.js";
import { prefixCount, prefixErf, PREFIX_POWERS, type ScaleMixture } from "../numeric/derivative-mixture.js";
import { fieldMixture } from "../numeric/gated-mixture.js";

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
// so use the termwise integral of the Taylor series of z²e^{−z²/2}: 2φ(0)·Σ (−1/2)^k/k!·a^{2k+3}/(2k+3), by Horner
// in a² through the term where the next one falls below 1e-18 of the first (at a² below 1/64, 1/4 and 1: 7, 11 and 16
// terms). The draw sums evaluate this at every node, so its coefficients are taken once.
const ENERGY_SERIES = (() => {
  const coefficients = new Float64Array(16);
  let factor = 2 * normalPdf(0);
  for (let k = 0; k < coefficients.length; k++) {
    coefficients[k] = factor / (2 * k + 3);
    factor *= -0.5 / (k + 1);
  }
  return coefficients;
})();
// past a = 9 the complement erfc(a/√2) + 2aφ(a) is below 1.9e-17 (erfc(x) ≤ 2e^{−x²}/(√π·(x + √(x² + 4/π))),
// Abramowitz & Stegun 7.1.13: 2.3e-19 at x = 9/√2), under 2^−54, half the spacing of doubles below 1: 1 minus it
// rounds to 1 exactly
const ENERGY_ONE = 9;
function energySeries(a2: number, terms: number): number {
  const c = ENERGY_SERIES;
  let sum = c[terms - 1] as number;
  for (let k = terms - 2; k >= 0; k--) sum = sum * a2 + (c[k] as number);
  return sum;
}
function gaussianEnergyBelow(r: number, t: number): number {
  if (!(t > 0)) return 0;
  if (!(r > 0)) return 1;
  const a = t / r;
  if (a < 1) {
    const a2 = a * a;
    return a * a2 * energySeries(a2, a2 < 1 / 64 ? 7 : a2 < 0.25 ? 11 : 16);
  }
  if (a >= ENERGY_ONE) return 1;
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
function uniformBelow(r: number, t: number): number {
  return !(t > 0) ? 0 : !(r > 0) ? 1 : Math.min(1, t / (r * SQRT3));
}
function uniformAbove(r: number, t: number): number {
  return !(t > 0) ? 1 : !(r > 0) ? 0 : Math.max(0, 1 - t / (r * SQRT3));
}
function uniformEnergyBelow(r: number, t: number): number {
  return !(t > 0) ? 0 : !(r > 0) ? 1 : Math.min(1, t / (r * SQRT3)) ** 3;
}
const uniform: ElementLaw = {
  below: uniformBelow,
  above: uniformAbove,
  energyBelow: uniformEnergyBelow,
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
function logNormalBelow(s: number, r: number, t: number): number {
  return !(t > 0) ? 0 : !(r > 0) ? 1 : normalCdf((Math.log2(t) - (Math.log2(r) - s * s * LN2)) / s);
}
function logNormalAbove(s: number, r: number, t: number): number {
  return !(t > 0) ? 1 : !(r > 0) ? 0 : normalSf((Math.log2(t) - (Math.log2(r) - s * s * LN2)) / s);
}
function logNormalEnergyBelow(s: number, r: number, t: number): number {
  return !(t > 0) ? 0 : !(r > 0) ? 1 : normalCdf((Math.log2(t) - (Math.log2(r) - s * s * LN2)) / s - 2 * s * LN2);
}
function logNormalLaw(s: number): ElementLaw {
  return {
    below: (r, t) => logNormalBelow(s, r, t),
    above: (r, t) => logNormalAbove(s, r, t),
    energyBelow: (r, t) => logNormalEnergyBelow(s, r, t),
    kurtosis: Math.exp(4 * (s * LN2) ** 2),
    positiveShare: 0.5,
  };
}

// A Gaussian scale mixture (shape "gaussian-mixture", the gradient behind a smooth activation or a leaky ReLU, or a gated
// product's): P(|x| ≤ t) = Σ wᵢ·P(|Z| ≤ t/(r·cᵢ)), and the energy below t Σ wᵢcᵢ²·(the Gaussian's at r·cᵢ), as Σ wᵢcᵢ² = 1 (a mixture's law is the
// weighted sum of its components' laws; src/numeric/derivative-mixture.ts).
// The scales fall with i, so t/(r·cᵢ) rises. Three parts, so that a call costs a binary search, one series and the few
// components near t instead of every component (~60 for a tanh' mixture, whose sums took most of a deep tanh stack's
// check where its gradients were mixtures):
// - the widest components, where the Gaussian's own kernels are series (erf's below an argument of 1/2, the energy's
//   below t/(r·cᵢ) = 1) or where the fast erfc is a series of its own (CHEBYSHEV_ERFC_TAYLOR, argument under 1/4), meet t
//   through those series summed over the components at once (the mixture's prefix sums: prefixErf, prefixEnergy,
//   prefixTail);
// - past t/(r·cᵢ) = 9 a component's share below is 1 and its energy below 1 (as gaussianEnergyBelow's ENERGY_ONE), past
//   40 its tail 0 (erfc(40/√2) is under the smallest double): the rest is taken whole; and the sums also stop once the
//   weight left times the last component's complement is under 1e-16 of the sum (each later one's is smaller);
// - the components between, one by one with the Gaussian's kernels, as before.
// The same numbers as the plain sums over every component to ~1e-15 relative (test/risk/mixture-laws.test.ts).
const MIXTURE_ALL_BELOW = 9;
const MIXTURE_NONE_ABOVE = 40;
// where the plain sums' erf is its series (_math's erf) and where the fast erfc's Taylor series holds (see above)
const ERF_SERIES_LIMIT = 0.5;
const ERFC_SERIES_LIMIT = 0.25;
const MIXTURE_REST = 1e-16;
// Σ_{j < p} wⱼcⱼ²·E[Z²; |Z| ≤ a·c_{p−1}/cⱼ] for a = t/(r·c_{p−1}) < 1: the energy series (ENERGY_SERIES) of each
// component summed term by term, wⱼcⱼ²·(a·c_{p−1}/cⱼ)^{2k+3} = c_{p−1}²·a^{2k+3}·wⱼ(c_{p−1}/cⱼ)^{2k+1}; 12 terms: at
// a² < 1/2 the first left out is under 2^−24·3/(12!·27) ≈ 1.4e-17 of the first
const ENERGY_PREFIX_TERMS = 12;
function prefixEnergy(m: ScaleMixture, p: number, a: number): number {
  const sums = m.prefix;
  const at = p * PREFIX_POWERS;
  const a2 = a * a;
  const c = ENERGY_SERIES;
  let sum = (c[ENERGY_PREFIX_TERMS - 1] as number) * (sums[at + 2 * ENERGY_PREFIX_TERMS - 1] as number);
  for (let k = ENERGY_PREFIX_TERMS - 2; k >= 0; k--) sum = sum * a2 + (c[k] as number) * (sums[at + 2 * k + 1] as number);
  const reference = m.scales[p - 1] as number;
  return reference * reference * a * a2 * sum;
}
// Σ_{j < p} wⱼ·chebyshevErfc(y·c_{p−1}/cⱼ) for y < 1/4: the fit's own Taylor series summed term by term
function prefixTail(m: ScaleMixture, p: number, y: number): number {
  const sums = m.prefix;
  const at = p * PREFIX_POWERS;
  const b = CHEBYSHEV_ERFC_TAYLOR;
  let sum = (b[PREFIX_POWERS - 1] as number) * (sums[at + PREFIX_POWERS - 1] as number);
  for (let k = PREFIX_POWERS - 2; k >= 0; k--) sum = sum * y + (b[k] as number) * (sums[at + k] as number);
  return sum;
}
function mixtureBelow(m: ScaleMixture, r: number, t: number): number {
  if (!(t > 0)) return 0;
  if (!(r > 0)) return 1;
  const w = m.weights;
  const c = m.scales;
  const p = prefixCount(m, r, t, ERF_SERIES_LIMIT);
  let sum = p > 0 ? prefixErf(m, p, t / (r * (c[p - 1] as number) * SQRT2)) : 0;
  for (let i = p; i < w.length; i++) {
    const ri = r * (c[i] as number);
    if (t >= MIXTURE_ALL_BELOW * ri) return Math.min(1, sum + (m.restWeight[i] as number));
    // the argument is at least 1/2 here, where _math's erf is 1 − erfc
    const tail = erfc(t / (ri * SQRT2));
    sum += (w[i] as number) * (1 - tail);
    const rest = m.restWeight[i + 1] as number;
    if (rest * tail <= MIXTURE_REST * sum) return Math.min(1, sum + rest);
  }
  return Math.min(1, sum);
}
function mixtureAbove(m: ScaleMixture, r: number, t: number): number {
  if (!(t > 0)) return 1;
  if (!(r > 0)) return 0;
  const w = m.weights;
  const c = m.scales;
  const p = prefixCount(m, r, t, ERFC_SERIES_LIMIT);
  let sum = p > 0 ? prefixTail(m, p, t / (r * (c[p - 1] as number) * SQRT2)) : 0;
  for (let i = p; i < w.length; i++) {
    const ri = r * (c[i] as number);
    if (t >= MIXTURE_NONE_ABOVE * ri) break;
    const tail = erfc(t / (ri * SQRT2));
    sum += (w[i] as number) * tail;
    if ((m.restWeight[i + 1] as number) * tail <= MIXTURE_REST * sum) break;
  }
  return Math.min(1, sum);
}
function mixtureEnergyBelow(m: ScaleMixture, r: number, t: number): number {
  if (!(t > 0)) return 0;
  if (!(r > 0)) return 1;
  const w = m.weights;
  const c = m.scales;
  // a component whose erf argument is under 1/2 has t/(r·cᵢ) < 1, where gaussianEnergyBelow is its series too
  const p = prefixCount(m, r, t, ERF_SERIES_LIMIT);
  let sum = p > 0 ? prefixEnergy(m, p, t / (r * (c[p - 1] as number))) : 0;
  for (let i = p; i < w.length; i++) {
    const ci = c[i] as number;
    const ri = r * ci;
    if (t >= MIXTURE_ALL_BELOW * ri) return Math.min(1, sum + (m.restEnergy[i] as number));
    const share = gaussianEnergyBelow(ri, t);
    sum += (w[i] as number) * ci * ci * share;
    const rest = m.restEnergy[i + 1] as number;
    if (rest * (1 - share) <= MIXTURE_REST * sum) return Math.min(1, sum + rest);
  }
  return Math.min(1, sum);
}
function mixtureLaw(m: ScaleMixture): ElementLaw {
  return {
    below: (r, t) => mixtureBelow(m, r, t),
    above: (r, t) => mixtureAbove(m, r, t),
    energyBelow: (r, t) => mixtureEnergyBelow(m, r, t),
    kurtosis: 3 * m.fourth,
    positiveShare: 0.5,
  };
}
// the components of a profile's mixture, kept per mixture object (copies of a profile share it)
const MIXTURES = new WeakMap<object, ScaleMixture>();
/** The scale mixture of a "gaussian-mixture" profile, or undefined for any other profile. */
export function mixtureOf(profile: MagnitudeProfile): ScaleMixture | undefined {
  const given = profile.mixture;
  if (profile.shape !== "gaussian-mixture" || given === undefined) return undefined;
  let m = MIXTURES.get(given);
  if (m === undefined) {
    m = fieldMixture(given);
    MIXTURES.set(given, m);
  }
  return m;
}

/**
 * The number that tells apart two laws of one shape code: the element spread of a log-normal, the key of a scale
 * mixture (src/numeric/derivative-mixture.ts: never reused), 0 for the others; the tables key on it beside the code.
 */
export function lawParameter(profile: MagnitudeProfile): number {
  if (profile.shape === "log-normal") return profile.elementLog2Spread ?? 0;
  const m = mixtureOf(profile);
  return m === undefined ? 0 : m.key;
}

/**
 * The element shapes lawOverDraws tells apart, as numbers, for the draw and level tables (and the subnormal noise's
 * memo); -1 for one it does not know (the tables do not memoise it). A switch, not a search of a list per look-up.
 */
export function shapeCode(shape: MagnitudeProfile["shape"]): number {
  switch (shape) {
    case "gaussian":
      return 0;
    case "half-gaussian":
      return 1;
    case "uniform":
      return 2;
    case "constant":
      return 3;
    case "bounded":
      return 4;
    case "log-normal":
      return 5;
    case "gaussian-mixture":
      return 6;
    default:
      return -1;
  }
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
    case "gaussian-mixture": {
      const m = mixtureOf(profile);
      return m === undefined ? gaussian : mixtureLaw(m);
    }
  }
}

// Draws of the scale: log2(r) = log2(rms) + spread·z, z ~ N(0, 1). The integrand over z is often a smoothed
// step (a tail probability that switches on past some draw), which a Gauss–Hermite rule with its few outer
// nodes resolves poorly; composite Simpson on a uniform grid (step 1/8) over ±9 standard deviations resolves a step
// as wide as a few nodes, and the mass beyond 9 (about 2e-19) is below any probability we report. Narrower steps
// take their own rules: the any-above sums (anyAboveSum) and the panels of stepwiseSum.
/** the draws' outermost node, in standard deviations (the hazards' closed-form tails start from it too) */
export const DRAW_LIMIT = 9;
const DRAW_STEP = 1 / 8;
/** spreads below this many binades are taken as none by the level searches (lawMixtureCrossing) */
const NEGLIGIBLE_SPREAD = 1e-16;
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
// evaluations instead of 145. Steps in the integrand (a bound, a threshold the draws cross) fail the test and are
// summed panel by panel (stepwiseSum); an integrand whose end nodes carry weight gets the full rule (the rules treat
// the cut at ±9 differently).
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
// of a tensor, a search over loss scales) share its spread, so each power is taken once, and only for the nodes a
// sum visits (0 marks a power not yet taken). A direct-mapped table on the spread's bits (no Map of doubles, no
// bound to enforce: a collision replaces the older row). A power is the product of two the row keeps after the nodes:
// 2^(spread·m) at the whole z = m (19 of them) and 2^(spread·j/8) for the eighths j = 0 … 7, made by products from
// three powers when the row is made: a power costs more than the law at a node, and a sum over the whole rule took
// 145 of them. The factors stay within 4e-15 relative of the power taken at once (the draws' scale moves by that:
// nothing a reported digit reads).
const FACTOR_SLOTS = 4096;
const FACTOR_KEYS = new Float64Array(FACTOR_SLOTS).fill(NaN);
const FACTOR_ROWS: Float64Array[] = [];
const BITS = new Float64Array(1);
const BITS_WORDS = new Uint32Array(BITS.buffer);
// node i sits at z = m + j/8 with m = floor((i − FACTOR_CENTRE)/8); the row's whole powers start at FACTOR_WHOLE
// (m = −DRAW_LIMIT there), its eighths at FACTOR_EIGHTHS
const FACTOR_CENTRE = Math.round(DRAW_LIMIT / DRAW_STEP);
const FACTOR_WHOLE = DRAW_NODES.z.length;
const FACTOR_EIGHTHS = FACTOR_WHOLE + 2 * DRAW_LIMIT + 1;
const FACTOR_PER_WHOLE = Math.round(1 / DRAW_STEP);
const FACTOR_ROW = FACTOR_EIGHTHS + FACTOR_PER_WHOLE;
function nodeFactors(log2Spread: number): Float64Array {
  BITS[0] = log2Spread;
  const slot = (Math.imul((BITS_WORDS[0] as number) ^ Math.imul(BITS_WORDS[1] as number, 0x9e3779b1), 0x85ebca6b) >>> 20) & (FACTOR_SLOTS - 1);
  let factors = FACTOR_ROWS[slot];
  if (FACTOR_KEYS[slot] !== log2Spread || factors === undefined) {
    if (factors === undefined) {
      factors = new Float64Array(FACTOR_ROW);
      FACTOR_ROWS[slot] = factors;
    } else factors.fill(0, 0, FACTOR_WHOLE);
    FACTOR_KEYS[slot] = log2Spread;
    // the whole and eighth powers by products of three powers: each within 2e-15 relative (at most 17 roundings)
    const up = exp2(log2Spread);
    const down = exp2(-log2Spread);
    factors[FACTOR_WHOLE + DRAW_LIMIT] = 1;
    for (let m = 1; m <= DRAW_LIMIT; m++) {
      factors[FACTOR_WHOLE + DRAW_LIMIT + m] = (factors[FACTOR_WHOLE + DRAW_LIMIT + m - 1] as number) * up;
      factors[FACTOR_WHOLE + DRAW_LIMIT - m] = (factors[FACTOR_WHOLE + DRAW_LIMIT - m + 1] as number) * down;
    }
    const eighth = exp2(log2Spread * DRAW_STEP);
    factors[FACTOR_EIGHTHS] = 1;
    for (let j = 1; j < FACTOR_ROW - FACTOR_EIGHTHS; j++) factors[FACTOR_EIGHTHS + j] = (factors[FACTOR_EIGHTHS + j - 1] as number) * eighth;
  }
  return factors;
}
// 2^(spread·z_i), taken once per spread and node
function factorAt(factors: Float64Array, i: number): number {
  let factor = factors[i] as number;
  if (factor === 0) {
    const k = i - FACTOR_CENTRE;
    const m = Math.floor(k * DRAW_STEP);
    factor = (factors[FACTOR_WHOLE + DRAW_LIMIT + m] as number) * (factors[FACTOR_EIGHTHS + k - FACTOR_PER_WHOLE * m] as number);
    factors[i] = factor;
  }
  return factor;
}

// integrand values of one call (overDraws never re-enters itself: its f are element laws)
const VALUES = new Float64Array(DRAW_NODES.z.length);

// The integrand of a draw sum. The profile functions set these and the sum calls `integrand`, one function for
// every element law: no closure per call, and one call site the compiler can specialise. The arithmetic is the
// element laws' own functions (the constant law's one comparison written again).
const ANY_ABOVE = 0;
const BELOW = 1;
const ENERGY_BELOW = 2;
const CLOSURE = 3;
const GAUSSIAN = 0;
const UNIFORM = 1;
const LOG_NORMAL = 2;
const CONSTANT = 3;
const MIXTURE = 4;
// The current integrand's threshold, element count, positive share and element spread, the current draw's scale and
// spread, the lattice's step and spread: slots of one typed array, not module variables (a double stored in a module
// variable is boxed at every store: garbage on every call)
const I_T = 0;
const I_COUNT = 1;
const I_SHARE = 2;
const I_SPREAD = 3;
const D_RMS = 4;
const D_SPREAD = 5;
const L_STEP = 6;
const L_SPREAD = 7;
const STATE = new Float64Array(8);
STATE[I_SHARE] = 1;
let integrandKind = CLOSURE;
let integrandLaw = GAUSSIAN;
let integrandClosure: (r: number) => number = () => 0;
// the current integrand's scale mixture (law MIXTURE; its key in STATE[I_SPREAD])
let integrandMixture: ScaleMixture | undefined;
// the number beside the law that the tables key on: the log-normal's element spread, the mixture's key, else 0
function elementParameter(): number {
  return integrandLaw === LOG_NORMAL || integrandLaw === MIXTURE ? (STATE[I_SPREAD] as number) : 0;
}
function lawAbove(r: number, t: number): number {
  switch (integrandLaw) {
    case GAUSSIAN:
      return gaussianAbove(r, t);
    case UNIFORM:
      return uniformAbove(r, t);
    case LOG_NORMAL:
      return logNormalAbove((STATE[I_SPREAD] as number), r, t);
    case MIXTURE:
      return mixtureAbove(integrandMixture as ScaleMixture, r, t);
    default:
      return r >= t ? 1 : 0;
  }
}
function lawBelow(r: number, t: number): number {
  switch (integrandLaw) {
    case GAUSSIAN:
      return gaussianBelow(r, t);
    case UNIFORM:
      return uniformBelow(r, t);
    case LOG_NORMAL:
      return logNormalBelow((STATE[I_SPREAD] as number), r, t);
    case MIXTURE:
      return mixtureBelow(integrandMixture as ScaleMixture, r, t);
    default:
      return r <= t ? 1 : 0;
  }
}
function lawEnergyBelow(r: number, t: number): number {
  switch (integrandLaw) {
    case GAUSSIAN:
      return gaussianEnergyBelow(r, t);
    case UNIFORM:
      return uniformEnergyBelow(r, t);
    case LOG_NORMAL:
      return logNormalEnergyBelow((STATE[I_SPREAD] as number), r, t);
    case MIXTURE:
      return mixtureEnergyBelow(integrandMixture as ScaleMixture, r, t);
    default:
      return r <= t ? 1 : 0;
  }
}
function integrand(r: number): number {
  switch (integrandKind) {
    case ANY_ABOVE:
      return anyOf((STATE[I_SHARE] as number) * lawAbove(r, (STATE[I_T] as number)), (STATE[I_COUNT] as number));
    case BELOW:
      return lawBelow(r, (STATE[I_T] as number));
    case ENERGY_BELOW:
      return lawEnergyBelow(r, (STATE[I_T] as number));
    default:
      return integrandClosure(r);
  }
}

/**
 * Set the integrand to a profile's element law at threshold t (`kind` ANY_ABOVE, BELOW or ENERGY_BELOW).
 * Returns the integrand's value when a bound decides it for every draw (t at or past the bound), else NaN.
 */
function setLawIntegrand(profile: MagnitudeProfile, kind: number, t: number, positiveOnly: boolean): number {
  integrandKind = kind;
  STATE[I_T] = t;
  STATE[I_COUNT] = nonzeroElements(profile);
  const bound = profile.bound;
  let share = 0.5;
  let law = GAUSSIAN;
  switch (profile.shape) {
    case "half-gaussian":
      share = 1;
      break;
    case "uniform":
      law = UNIFORM;
      break;
    case "constant":
      law = CONSTANT;
      share = 1;
      break;
    case "bounded":
      if (bound !== undefined && bound > 0) share = 1;
      break;
    case "log-normal": {
      const s = profile.elementLog2Spread ?? 0;
      if (s > 0) {
        law = LOG_NORMAL;
        STATE[I_SPREAD] = s;
      } else {
        law = CONSTANT;
        share = 1;
      }
      break;
    }
    case "gaussian-mixture": {
      const m = mixtureOf(profile);
      if (m !== undefined) {
        law = MIXTURE;
        integrandMixture = m;
        STATE[I_SPREAD] = m.key;
      }
      break;
    }
  }
  integrandLaw = law;
  STATE[I_SHARE] = positiveOnly ? share : 1;
  // a bound (shape "bounded", or any shape's cap) decides the law at t for every draw, as in elementLaw
  if (bound !== undefined && bound > 0) {
    if (kind === ANY_ABOVE ? t > bound : t >= bound) return kind === ANY_ABOVE ? 0 : 1;
  }
  return NaN;
}

// the integrand kind of a measure named in lawOverDraws and lawOverDrawsBounds
function measureKind(measure: "any-above" | "below" | "energy-below"): number {
  return measure === "any-above" ? ANY_ABOVE : measure === "below" ? BELOW : ENERGY_BELOW;
}

/**
 * {@link overDraws} of a profile's element law at threshold t, without a closure: `anyOf(share·above(r, t), n)`
 * (share the positive share when `positiveOnly`), `below(r, t)` or `energyBelow(r, t)` of {@link elementLaw}.
 * The any-above sums follow the step of many elements (see anyAboveSum: within 1e-6 of the draw integral, not the
 * draw rule's sums); the Gaussian shares below are read off rows of the draw integral shared by every threshold
 * (within 2e-7 of the integral, without the rule's ripple, see gaussianTableValue); the other shares are {@link directLawOverDraws}: the Simpson rule for the smooth
 * Gaussian and log-normal shares, the panels of a closure for the uniform and constant laws.
 */
export function lawOverDraws(profile: MagnitudeProfile, measure: "any-above" | "below" | "energy-below", t: number, positiveOnly = false): number {
  const kind = measureKind(measure);
  const decided = setLawIntegrand(profile, kind, t, positiveOnly);
  if (!Number.isNaN(decided)) return decided;
  if (kind === ANY_ABOVE) return anyAboveOverDraws(profile.rms, profile.log2Spread, t);
  if (integrandLaw === GAUSSIAN) {
    const value = gaussianTableValue(kind, profile.log2Spread, Math.log2(t) - Math.log2(profile.rms));
    if (!Number.isNaN(value)) return value;
  }
  return drawSum(profile.rms, profile.log2Spread);
}

/**
 * The Gaussian share below t (`measure` "below") or of the energy below it over draws, read off the shared rows at
 * x = log2(t/rms): {@link lawOverDraws}' value for a profile whose law at t is the Gaussian's for every draw (no bound
 * at or below t), or NaN where the rows do not serve it (lawOverDraws then takes the rule).
 */
export function gaussianRowsOverDraws(measure: "below" | "energy-below", x: number, spread: number): number {
  return gaussianTableValue(measure === "below" ? BELOW : ENERGY_BELOW, spread, x);
}

/**
 * {@link lawOverDraws} by the draw rule itself, without the shared rows of the Gaussian shares: the direct
 * method the rows' interpolation is held to in the tests (the any-above sums are lawOverDraws' own).
 */
export function directLawOverDraws(profile: MagnitudeProfile, measure: "any-above" | "below" | "energy-below", t: number, positiveOnly = false): number {
  const kind = measureKind(measure);
  const decided = setLawIntegrand(profile, kind, t, positiveOnly);
  if (!Number.isNaN(decided)) return decided;
  if (kind === ANY_ABOVE) return anyAboveOverDraws(profile.rms, profile.log2Spread, t);
  return drawSum(profile.rms, profile.log2Spread);
}

// the any-above sum of the current integrand (set by setLawIntegrand) at threshold t (see anyAboveSum)
function anyAboveOverDraws(rms: number, log2Spread: number, t: number): number {
  const x = Math.log2(t) - Math.log2(rms);
  if (!(log2Spread > 0) || !Number.isFinite(x)) return integrand(rms);
  const reached = anyAboveReached(x, log2Spread);
  if (reached === reached) return reached;
  return anyAboveSum(x, log2Spread, anyRule(log2Spread));
}

// A threshold far below the scale is reached in every draw but the lowest: g(v) = anyOf(share·above(1, 2^v), n) falls
// as v grows, so I(x) = E_z[g(x − s·z)] ≥ g(v₀)·P(z ≥ (x − v₀)/s), and at v₀ = x + REACHED_Z·s that is g(v₀)·(1 − Q(8.5))
// (Q(8.5) = 9.5e-18, src/numeric's normalSf), while I ≤ A = anyOf(share, n). When the lower bound is within
// REACHED_GAP of A the sum is A to that (as the rules' own sums end there, clamped at A): two law evaluations instead
// of a sum over the whole step (a fifth of a fresh 1,000-layer check's any-above sums are at thresholds 2^−39 below the
// scale). The tail share is taken REACHED_FIT lower than the law gives, as the risk module's erfc fit is
// good to 1.2e-7 of itself (_math.ts): a bound on the true g, not on the fit's.
const REACHED_Z = 8.5;
const REACHED_MASS = 1 - preciseNormalSf(REACHED_Z);
const REACHED_FIT = 1e-6;
const REACHED_GAP = 1e-15;
// A when the bound above decides the any-above sum of the current integrand at (x, s), else NaN
function anyAboveReached(x: number, s: number): number {
  const v = x + REACHED_Z * s;
  // g(v) near A needs a tail share near 1 (at v = 0 the Gaussian's is 0.32): no law evaluation past the scale
  if (!(v < 0)) return NaN;
  const n = (STATE[I_COUNT] as number);
  const limit = anyOf((STATE[I_SHARE] as number), n);
  if (!(limit > 0)) return NaN;
  const lower = anyOf((STATE[I_SHARE] as number) * lawAbove(1, exp2(v)) * (1 - REACHED_FIT), n) * REACHED_MASS;
  return lower >= limit * (1 - REACHED_GAP) ? limit : NaN;
}

/**
 * E over draws of a probability or share f(r), where log2(r) ~ N(log2(rms), log2Spread²) (finite-width
 * spread, Hanin & Nica 2019): f(rms) itself when the scale does not spread. Clamped to [0, 1] against the
 * rounding of the quadrature sum. Smooth integrands take the coarse rule (49 evaluations, see HALF_STRIDE), steps and
 * kinks the panels of stepwiseSum (f must be monotone in r).
 */
export function overDraws(rms: number, log2Spread: number, f: (r: number) => number): number {
  integrandKind = CLOSURE;
  integrandClosure = f;
  return drawSum(rms, log2Spread);
}

/**
 * {@link overDraws} by the quadrature rule alone (the coarse sum where it is accepted, else the Simpson sum), without
 * the panels for steps: the rule itself, as the tests hold it to the full Simpson sum.
 */
export function ruleOverDraws(rms: number, log2Spread: number, f: (r: number) => number): number {
  integrandKind = CLOSURE;
  integrandClosure = f;
  if (!(log2Spread > 0)) return integrand(rms);
  beginDraw(rms, log2Spread);
  const low = nodeValue(0);
  const high = nodeValue(VALUES.length - 1);
  if (low === high) return Math.min(1, Math.max(0, low));
  return ruleSum(false);
}

// The draw sum of the current integrand: the coarse sum where the two coarse rules accept it (see HALF_STRIDE), the
// Simpson sum for a smooth integrand (the any-above sums that reach here: steps as wide as the draws), or panel by
// panel for a step or a kink (stepwiseSum).
function drawSum(rms: number, log2Spread: number): number {
  if (!(log2Spread > 0)) return integrand(rms);
  beginDraw(rms, log2Spread);
  const last = VALUES.length - 1;
  // every f here is monotone in r, so equal values at the two extreme draws mean a constant integrand
  // (an overflow far out of reach, a share that is 0 or 1 for every draw): one evaluation pair instead of all
  const low = nodeValue(0);
  const high = nodeValue(last);
  if (low === high) return Math.min(1, Math.max(0, low));
  if (integrandKind === ANY_ABOVE) return ruleSum(true);
  // a smooth integrand: the coarse rules agree; a step or a kink (a hazard's coherent sum, the constant and uniform
  // laws) is integrated panel by panel instead, where the Simpson sum would be off by up to a few percent
  const coarse = coarseSum();
  if (!Number.isNaN(coarse)) return coarse;
  // smooth, but carried by the draws at the rule's ends (a share far below the scale), or the Gaussian and log-normal
  // shares, smooth in the scale (narrower than the coarse steps at large spreads, within ~1e-5 under the Simpson rule
  // at step 1/8): the Simpson rule, as before, at a third of the panels' cost
  if (COARSE_AGREED[0] === 1 || (integrandKind !== CLOSURE && (integrandLaw === GAUSSIAN || integrandLaw === LOG_NORMAL || integrandLaw === MIXTURE))) return ruleSum(true);
  return Math.min(1, Math.max(0, stepwiseSum()));
}

// Φ and Q = 1 − Φ at the nodes, from src/numeric's erfc (A&S 7.1.6 and its continued fraction): the normal mass
// between two nodes, each side summed from its own tail so that far masses keep their relative precision
const NODE_CDF = new Float64Array(DRAW_NODES.z.length);
const NODE_SF = new Float64Array(DRAW_NODES.z.length);
for (let i = 0; i < DRAW_NODES.z.length; i++) {
  NODE_CDF[i] = preciseNormalCdf(DRAW_NODES.z[i] as number);
  NODE_SF[i] = preciseNormalSf(DRAW_NODES.z[i] as number);
}
function massBetween(a: number, b: number): number {
  const { z } = DRAW_NODES;
  if ((z[b] as number) <= 0) return (NODE_CDF[b] as number) - (NODE_CDF[a] as number);
  if ((z[a] as number) >= 0) return (NODE_SF[a] as number) - (NODE_SF[b] as number);
  return 1 - (NODE_CDF[a] as number) - (NODE_SF[b] as number);
}
// φ(z)·f at z, for the panels' adaptive rule
function weighted(z: number): number {
  return normalPdf(z) * integrand((STATE[D_RMS] as number) * exp2((STATE[D_SPREAD] as number) * z));
}
// adaptive Simpson (Lyness 1969; the Richardson term added) on [a, b] of φ·f, with its middle value and whole sum
function adaptSimpson(a: number, fa: number, m: number, fm: number, b: number, fb: number, whole: number, tolerance: number, depth: number): number {
  const lm = 0.5 * (a + m);
  const rm = 0.5 * (m + b);
  const flm = weighted(lm);
  const frm = weighted(rm);
  const left = ((m - a) / 6) * (fa + 4 * flm + fm);
  const right = ((b - m) / 6) * (fm + 4 * frm + fb);
  const delta = left + right - whole;
  if (depth <= 0 || Math.abs(delta) <= 15 * tolerance) return left + right + delta / 15;
  return (
    adaptSimpson(a, fa, lm, flm, m, fm, left, 0.5 * tolerance, depth - 1) + adaptSimpson(m, fm, rm, frm, b, fb, right, 0.5 * tolerance, depth - 1)
  );
}
// panels [node i, node i + 1] where the integrand changes, found by the current stepwiseSum
const VARYING = new Int32Array(DRAW_NODES.z.length);
const STACK = new Int32Array(2 * DRAW_NODES.z.length);
// each changing panel's middle value φ·f and first Simpson sum
const PANEL_MIDDLE = new Float64Array(DRAW_NODES.z.length);
const PANEL_WHOLE = new Float64Array(DRAW_NODES.z.length);
// 1e-8 of the whole: the probabilities are told to three digits and held to 1e-6 (README); at 1e-10 a norm's sum of
// squares over 131072 features (a rise 0.01 wide in z) took ~800 evaluations per sum, at 1e-8 ~290
const STEP_TOLERANCE = 1e-8;
// The draw integral of a monotone integrand with steps or kinks: f is monotone, so between two nodes of equal value
// it is constant and that stretch adds f times its normal mass exactly; the panels where it changes are integrated by
// adaptive Simpson to STEP_TOLERANCE of the whole (a step anywhere inside a panel is found to that tolerance). The
// draws beyond ±9 take the end values (f lies between them and its limits; their mass is 2.3e-19).
function stepwiseSum(): number {
  const { z } = DRAW_NODES;
  const last = VALUES.length - 1;
  let flat = nodeValue(0) * (NODE_CDF[0] as number) + nodeValue(last) * (NODE_SF[last] as number);
  let varying = 0;
  let top = 0;
  STACK[top++] = 0;
  STACK[top++] = last;
  while (top > 0) {
    const b = STACK[--top] as number;
    const a = STACK[--top] as number;
    const fa = nodeValue(a);
    const fb = nodeValue(b);
    if (fa === fb) flat += fa * massBetween(a, b);
    else if (b - a === 1) VARYING[varying++] = a;
    else {
      const middle = (a + b) >> 1;
      STACK[top++] = a;
      STACK[top++] = middle;
      STACK[top++] = middle;
      STACK[top++] = b;
    }
  }
  // a first Simpson estimate of each changing panel (kept with its middle value for the refinement) sets the
  // tolerance against the whole
  let estimate = flat;
  for (let k = 0; k < varying; k++) {
    const i = VARYING[k] as number;
    const a = z[i] as number;
    const b = z[i + 1] as number;
    const middle = weighted(0.5 * (a + b));
    const whole = ((b - a) / 6) * (normalPdf(a) * (VALUES[i] as number) + 4 * middle + normalPdf(b) * (VALUES[i + 1] as number));
    PANEL_MIDDLE[k] = middle;
    PANEL_WHOLE[k] = whole;
    estimate += whole;
  }
  const tolerance = (STEP_TOLERANCE * Math.max(Math.abs(estimate), 1e-300)) / Math.max(1, varying);
  let sum = flat;
  for (let k = 0; k < varying; k++) {
    const i = VARYING[k] as number;
    const a = z[i] as number;
    const b = z[i + 1] as number;
    const fa = normalPdf(a) * (VALUES[i] as number);
    const fb = normalPdf(b) * (VALUES[i + 1] as number);
    sum += adaptSimpson(a, fa, 0.5 * (a + b), PANEL_MIDDLE[k] as number, b, fb, PANEL_WHOLE[k] as number, tolerance, 50);
  }
  return sum;
}

// the draw of the current sum, and which nodes' values VALUES holds (KNOWN[i] === drawStamp)
let drawFactors: Float64Array = VALUES;
let drawStamp = 0;
const KNOWN = new Float64Array(VALUES.length);
// a new draw: the node values held in VALUES are stale from here on
function beginDraw(rms: number, log2Spread: number): void {
  STATE[D_RMS] = rms;
  STATE[D_SPREAD] = log2Spread;
  drawFactors = nodeFactors(log2Spread);
  drawStamp++;
}
function nodeValue(i: number): number {
  if (KNOWN[i] === drawStamp) return VALUES[i] as number;
  const value = integrand((STATE[D_RMS] as number) * factorAt(drawFactors, i));
  VALUES[i] = value;
  KNOWN[i] = drawStamp;
  return value;
}

// the step-1/2 trapezoid sum of the last coarseSum, accepted or not, and 1 when its two coarse rules agreed (a smooth
// integrand, even where the end nodes' weight kept the sum from being accepted)
const COARSE_HALF = new Float64Array(1);
const COARSE_AGREED = new Uint8Array(1);
// The coarse sum (see HALF_STRIDE) when the two coarse rules agree, else NaN; the node values at both ends are known.
function coarseSum(): number {
  const values = VALUES;
  const last = values.length - 1;
  const low = values[0] as number;
  const high = values[last] as number;
  let half = HALF_WEIGHTS[0]! * low + HALF_WEIGHTS[last]! * high;
  let threeQuarter = THREE_QUARTER_WEIGHTS[0]! * low + THREE_QUARTER_WEIGHTS[last]! * high;
  for (let i = HALF_STRIDE; i < last; i += HALF_STRIDE) half += HALF_WEIGHTS[i]! * nodeValue(i);
  for (let i = THREE_QUARTER_STRIDE; i < last; i += THREE_QUARTER_STRIDE) threeQuarter += THREE_QUARTER_WEIGHTS[i]! * nodeValue(i);
  COARSE_HALF[0] = half;
  const agreed = Math.abs(half - threeQuarter) <= COARSE_AGREEMENT * Math.abs(half);
  COARSE_AGREED[0] = agreed ? 1 : 0;
  const ends = HALF_WEIGHTS[0]! * Math.abs(low) + HALF_WEIGHTS[last]! * Math.abs(high);
  if (agreed && ends <= COARSE_END_SHARE * Math.abs(half)) return Math.min(1, Math.max(0, half));
  return NaN;
}

// The nodes of neither coarse rule, in order, with the nearest coarse nodes (of either rule) below and above each.
const FINE_NODES = new Int32Array(DRAW_NODES.z.length);
const FINE_PREVIOUS = new Int32Array(DRAW_NODES.z.length);
const FINE_NEXT = new Int32Array(DRAW_NODES.z.length);
let fineCount = 0;
for (let i = 1, last = DRAW_NODES.z.length - 1; i < last; i++) {
  if (i % HALF_STRIDE === 0 || i % THREE_QUARTER_STRIDE === 0) continue;
  FINE_NODES[fineCount] = i;
  FINE_PREVIOUS[fineCount] = Math.max(i - (i % HALF_STRIDE), i - (i % THREE_QUARTER_STRIDE));
  FINE_NEXT[fineCount++] = Math.min(i - (i % HALF_STRIDE) + HALF_STRIDE, i - (i % THREE_QUARTER_STRIDE) + THREE_QUARTER_STRIDE, last);
}
const FINE_COUNT = fineCount;

// The rule's own sums, from the nodes' values (each node evaluated at most once per sum).
function ruleSum(trim: boolean): number {
  const { w } = DRAW_NODES;
  const values = VALUES;
  const last = values.length - 1;
  const low = values[0] as number;
  const high = values[last] as number;
  const coarse = coarseSum();
  if (!Number.isNaN(coarse)) return coarse;
  const half = COARSE_HALF[0] as number;
  // A monotone f ≥ 0 is smallest at one end: the nodes beyond a coarse node c there carry at most f_c times their
  // weight, so where that is below TAIL_TOLERANCE of a lower bound of the sum (and of its complement) the nodes
  // there take the midpoint of their coarse neighbours instead of an evaluation (the rule's sum to within that bound).
  let lowCut = 0;
  let highCut = last;
  if (trim) {
    const rising = high > low;
    let floor = Infinity;
    let bound = 0;
    for (let i = 0; i <= last; i += HALF_STRIDE) {
      const value = values[i] as number;
      if (!(value >= 0)) floor = 0;
      const below = value * (rising ? (SUFFIX[i] as number) : (PREFIX[i + 1] as number));
      if (below > bound) bound = below;
    }
    const budget = TAIL_TOLERANCE * Math.min(floor, bound, 1 - half);
    if (budget > 0) {
      if (rising) {
        for (let c = HALF_STRIDE; c < last && (values[c] as number) * (PREFIX[c] as number) <= budget; c += HALF_STRIDE) lowCut = c;
      } else {
        for (let c = last - HALF_STRIDE; c > 0 && (values[c] as number) * (SUFFIX[c + 1] as number) <= budget; c -= HALF_STRIDE) highCut = c;
      }
    }
  }
  // f is monotone, so between two evaluated nodes of equal value (a share already 0 or 1, a probability that
  // underflows) every node has that value: the sum is the Simpson sum, with the flat stretches not re-evaluated
  for (let k = 0; k < FINE_COUNT; k++) {
    const i = FINE_NODES[k] as number;
    const before = values[FINE_PREVIOUS[k] as number] as number;
    const next = FINE_NEXT[k] as number;
    if (before === values[next]) values[i] = before;
    else if (i < lowCut || i > highCut) values[i] = 0.5 * (before + (values[next] as number));
    else nodeValue(i);
  }
  let sum = (w[0] as number) * low + (w[last] as number) * high;
  for (let i = 1; i < last; i++) sum += (w[i] as number) * (values[i] as number);
  return Math.min(1, Math.max(0, sum));
}

// the nodes beyond a coarse node of ruleSum's trim take its neighbours' midpoint below this share of the sum
const TAIL_TOLERANCE = 1e-10;
// PREFIX[i]: the weight of nodes below i; SUFFIX[i]: of nodes at and above i (both summed from their own end,
// so the small weights of the far nodes keep their relative precision)
const PREFIX = new Float64Array(DRAW_NODES.w.length + 1);
const SUFFIX = new Float64Array(DRAW_NODES.w.length + 1);
for (let i = 0; i < DRAW_NODES.w.length; i++) PREFIX[i + 1] = (PREFIX[i] as number) + (DRAW_NODES.w[i] as number);
for (let i = DRAW_NODES.w.length - 1; i >= 0; i--) SUFFIX[i] = (SUFFIX[i + 1] as number) + (DRAW_NODES.w[i] as number);
// Far below the scale (every draw's t/r at most 1/2) the Gaussian shares are power series in a = t/r, and the draws
// make a log-normal: E[a^m] = (t/rms)^m·e^{(m·spread·ln 2)²/2} (the moments of a log-normal). The series below are
// the ones gaussianBelow and gaussianEnergyBelow sum node by node there, so the closed form is the draw integral
// without the quadrature (it differs from the rule's sum in the last digits: the rule is exact for these to
// rounding, as the mass of the shifted weights beyond ±9 is negligible for the terms that count).
const SMALL_RATIO = 0.5;
// MOMENT_STEPS: the log-normal moments' factors e^{(mσ)²/2} for m = 1, 3, 5, … (or 3, 5, …) by products: the next is
// this one times e^{2σ²(m + 1)} = q^{(m + 1)/2}, q = e^{4σ²}, itself the last ratio times q; two products a term
// instead of an exp. After
// the n terms the series takes (a few at these small ratios, at most 40) each factor is within about n² ulp of its exp
// (test/risk/laws.test.ts holds the sums to 1e-12 of the termwise exps).

/**
 * E over draws of erf(a/√2), a = t/r, log2 r ~ N(log2 rms, spread²), when every draw of the rule has a ≤ 1/2;
 * NaN when some draw does not (the caller then integrates). `ratio` is t/rms.
 */
export function gaussianBelowOverDraws(ratio: number, spread: number): number {
  if (!(ratio > 0) || !(ratio * exp2(spread * DRAW_LIMIT) <= SMALL_RATIO)) return NaN;
  // erf(x) = (2/√π)·Σ (−1)^n x^{2n+1}/(n!(2n+1)) with x = a/√2 (Abramowitz & Stegun 7.1.5)
  const sigma = spread * LN2;
  const x = ratio / SQRT2;
  const x2 = x * x;
  let power = x;
  let coefficient = 1;
  let sum = 0;
  // the moments' factors e^{(mσ)²/2} by products (see MOMENT_STEPS)
  let moment = Math.exp(0.5 * sigma * sigma);
  const q = Math.exp(4 * sigma * sigma);
  let rise = q;
  for (let n = 0; n < 40; n++) {
    const m = 2 * n + 1;
    const term = (coefficient * power * moment) / m;
    sum += term;
    if (Math.abs(term) < 1e-17 * Math.abs(sum)) return Math.min(1, Math.max(0, 1.1283791670955126 * sum));
    coefficient *= -1 / (n + 1);
    power *= x2;
    moment *= rise;
    rise *= q;
  }
  return NaN;
}

/** E over draws of E[Z²; |Z| ≤ a] (the energy share below t), under the same condition as {@link gaussianBelowOverDraws}. */
export function gaussianEnergyBelowOverDraws(ratio: number, spread: number): number {
  if (!(ratio > 0) || !(ratio * exp2(spread * DRAW_LIMIT) <= SMALL_RATIO)) return NaN;
  // 2φ(0)·Σ (−1/2)^k/k!·a^{2k+3}/(2k+3), as in gaussianEnergyBelow
  const sigma = spread * LN2;
  const a2 = ratio * ratio;
  let power = ratio * a2;
  let coefficient = 1;
  let sum = 0;
  // e^{(mσ)²/2} from m = 3 by products (see MOMENT_STEPS)
  let moment = Math.exp(4.5 * sigma * sigma);
  const q = Math.exp(4 * sigma * sigma);
  let rise = q * q;
  for (let k = 0; k < 40; k++) {
    const m = 2 * k + 3;
    const term = (coefficient * power * moment) / m;
    sum += term;
    if (Math.abs(term) < 1e-17 * Math.abs(sum)) return Math.min(1, Math.max(0, 2 * normalPdf(0) * sum));
    coefficient *= -0.5 / (k + 1);
    power *= a2;
    moment *= rise;
    rise *= q;
  }
  return NaN;
}

/**
 * The integrand of {@link overDraws} at its two extreme draws, lowest value first: bounds of the integral for
 * a monotone f (the weights are positive and sum to 1), widened by 1e-12 for the rounding of the sum.
 */
export function overDrawsBounds(rms: number, log2Spread: number, f: (r: number) => number): [number, number] {
  integrandKind = CLOSURE;
  integrandClosure = f;
  return drawBounds(rms, log2Spread, false);
}

// Nodes |z| ≤ 4 of the rule carry all but INNER_OUTSIDE of its weight (about 6e-5: twice the normal tail at 4).
const INNER_LIMIT = 4;
const INNER_OUTSIDE = (() => {
  const { z, w } = DRAW_NODES;
  let outside = 0;
  for (let i = 0; i < z.length; i++) if (Math.abs(z[i] as number) > INNER_LIMIT) outside += w[i] as number;
  return outside;
})();
/** The rule's weight beyond ±4 standard deviations of the draws, for inner bounds computed elsewhere (src/risk/bounds.ts). */
export const INNER_DRAW_OUTSIDE = INNER_OUTSIDE;
// the nodes at z = ∓4 (exact on the grid: −9 + i/8)
const INNER_LOW_NODE = Math.round((DRAW_LIMIT - INNER_LIMIT) / DRAW_STEP);
const INNER_HIGH_NODE = Math.round((DRAW_LIMIT + INNER_LIMIT) / DRAW_STEP);

/**
 * Tighter bounds of a [0, 1]-valued monotone integrand's draw integral than {@link overDrawsBounds}, for a test
 * against a tolerance well above 1e-4: the draws within ±4 standard deviations give the integrand's range there,
 * the rest of the weight (about 6e-5) is bounded by 0 and 1. Intersected with the extreme-draw bounds; widened by
 * 1e-9 for the difference between the rule's coarse and full sums (overDraws accepts the coarse one at 1e-10).
 */
export function overDrawsInnerBounds(rms: number, log2Spread: number, f: (r: number) => number): [number, number] {
  integrandKind = CLOSURE;
  integrandClosure = f;
  return drawBounds(rms, log2Spread, true);
}

/**
 * {@link overDrawsBounds} (or, `inner`, {@link overDrawsInnerBounds}) of a profile's element law at threshold t,
 * without a closure; the integrands as in {@link lawOverDraws}.
 */
export function lawOverDrawsBounds(
  profile: MagnitudeProfile,
  measure: "any-above" | "below" | "energy-below",
  t: number,
  inner: boolean,
): [number, number] {
  const kind = measureKind(measure);
  const decided = setLawIntegrand(profile, kind, t, false);
  if (!Number.isNaN(decided)) return bounds(decided, decided);
  return drawBounds(profile.rms, profile.log2Spread, inner);
}

// [low, high], an array of doubles from its first use: a literal of the integers 0 or 1 (a probability decided for
// every draw) starts as an array of small integers, and the first fraction after it sent the compiled drawBounds back
// to the interpreter (a deopt and a third compile in every worker)
function bounds(low: number, high: number): [number, number] {
  const pair: [number, number] = [0.5, 0.5];
  pair[0] = low;
  pair[1] = high;
  return pair;
}
function drawBounds(rms: number, log2Spread: number, inner: boolean): [number, number] {
  if (!(log2Spread > 0)) {
    const value = integrand(rms);
    return bounds(value, value);
  }
  // 2^(spread·z) at the nodes, as nodeFactors makes them (z = ±9, ±4 exactly)
  const factors = nodeFactors(log2Spread);
  const a = integrand(rms * factorAt(factors, 0));
  const b = integrand(rms * factorAt(factors, DRAW_NODES.z.length - 1));
  if (a === b) return bounds(Math.min(1, Math.max(0, a)), Math.min(1, Math.max(0, a)));
  const outerLow = Math.max(0, Math.min(a, b) * (1 - 1e-12));
  // the any-above sums integrate every draw: the draws beyond ±9 (mass 2Q(9) < 2.3e-19, A&S 26.2.29) may carry up to 1
  const outerHigh = Math.min(1, Math.max(a, b) * (1 + 1e-12) + (integrandKind === ANY_ABOVE ? 2.3e-19 : 0));
  if (!inner || outerLow === outerHigh) return bounds(outerLow, outerHigh);
  const c = integrand(rms * factorAt(factors, INNER_LOW_NODE));
  const d = integrand(rms * factorAt(factors, INNER_HIGH_NODE));
  const inside = 1 - INNER_OUTSIDE;
  const low = Math.max(0, Math.min(c, d) * inside * (1 - 1e-9));
  const high = Math.min(1, (Math.max(c, d) * inside + INNER_OUTSIDE) * (1 + 1e-9));
  return bounds(Math.max(outerLow, low), Math.min(outerHigh, high));
}

// Shared tables of the Gaussian shares. The Gaussian law's below(r, t) and energyBelow(r, t) depend on t/r alone,
// so a draw integral is F(x) = ∫ φ(z)·G(x − s·z) dz over |z| ≤ 9 (normalised there, as the draw rule is), x =
// log2(t/rms), s the spread, G(y) the law at r = 1, t = 2^y. In y = s·z (binades) it is the convolution of G with the
// density φ(y/s)/s, summed here by the trapezoid rule on the grid of 1/16 binade: y_j = j/16, so for the spreads a/16
// (rows) the ends ±9s are grid points, and for x_k = k/16 every x_k − y_j is one too: F and its complement C = 1 − F
// of every row at every x_k are sums of G and 1 − G values on one grid, each computed once per process (src/numeric's
// erf and erfc, accurate to about 1e-15 relative, the complement deep into its tail) for all rows, thresholds, formats
// and loss scales. The trapezoid rule converges geometrically in 1/step for an integrand analytic in a strip
// (Trefethen & Weideman 2014, SIAM Review 56(3), §5; from memory): G is analytic within |Im y|·ln 2 < π/4, where
// erf(2^y/√2)'s argument squared keeps a positive real part, so its error is about e^{−2π·1.1·16} ≈ 1e-48, and the
// density's at step 1/16 ≤ s/2 about 2e^{−2π²·4} ≈ 1e-34 (the same theorem): the nodes are spaced in binades, not in
// z, so unlike the draw rule (nodes s/8 binades apart, a ripple growing as e^{−c/s²}: 9e-5 of the energy share at
// s = 4, measured) the rows carry no ripple at any spread. A share at (s, x) is the Lagrange polynomial through the
// TABLE_POINTS nearest x_k on each of the TABLE_POINTS nearest rows, then through those in the spread (Abramowitz &
// Stegun 25.2.15 for the error term), in log F, so small shares keep their relative accuracy, and past ROWS_UPPER_SHARE
// in log C, so shares near 1 keep the digits of their complement. Where a point is 0 (or its complement), outside the
// spreads TABLE_MIN_SPREAD … TABLE_MAX_SPREAD (0.25 … 8.5) and far outside the draws, the direct rule decides.
// test/risk/share-tables.test.ts holds the rows to a fine quadrature of the integral and to the direct rule where that
// rule's ripple is below 1e-7.
const TABLE_MIN_SPREAD = 0.25;
const TABLE_MAX_SPREAD = 8.5;
const ROWS_UPPER_SHARE = 0.9;
const LOG_UPPER_SHARE = Math.log(ROWS_UPPER_SHARE);
// below this spread the complement's log bends too fast in the spread (about as −c/s²) for the rows' polynomial
const COMPLEMENT_MIN_SPREAD = 0.5;
const TABLE_POINTS = 6;
const SPREAD_POINTS = 8;
const ROW_STEP = 1 / 16;
// grid points per binade of G and of the rows' x_k (the rows are a/16, the same grid)
const PER_BINADE = 16;
interface Window {
  base: number;
  values: Float64Array;
}
// make points [from, to] of a window addressable, keeping the values already there (NaN: not yet computed)
function coverWindow(window: Window, from: number, to: number): void {
  const { base, values } = window;
  if (values.length > 0 && from >= base && to < base + values.length) return;
  const margin = 256;
  const low = values.length > 0 ? Math.min(from - margin, base) : from - margin;
  const high = values.length > 0 ? Math.max(to + margin, base + values.length - 1) : to + margin;
  const grown = new Float64Array(high - low + 1).fill(NaN);
  if (values.length > 0) grown.set(values, base - low);
  window.base = low;
  window.values = grown;
}
function emptyWindow(): Window {
  return { base: 0, values: new Float64Array(0) };
}
// G and 1 − G on the grid of 1/16 binade, per measure (BELOW, ENERGY_BELOW)
const GRID: Window[] = [emptyWindow(), emptyWindow()];
const GRID_COMPLEMENT: Window[] = [emptyWindow(), emptyWindow()];
// fill G and 1 − G at grid points [from, to] of the measure's grids
function coverGrid(measure: number, from: number, to: number): void {
  const grid = GRID[measure] as Window;
  const complement = GRID_COMPLEMENT[measure] as Window;
  if (grid.values.length > 0 && from >= grid.base && to < grid.base + grid.values.length) return;
  coverWindow(grid, from, to);
  coverWindow(complement, grid.base, grid.base + grid.values.length - 1);
  const g = grid.values;
  const c = complement.values;
  for (let i = 0; i < g.length; i++) {
    if (g[i] === g[i]) continue;
    const a = 2 ** ((grid.base + i) / PER_BINADE);
    let below: number;
    let above: number;
    if (measure === 0) {
      // P(|Z| ≤ a) = erf(a/√2), its complement erfc(a/√2) (Abramowitz & Stegun 26.2.29)
      below = preciseErf(a / SQRT2);
      above = preciseErfc(a / SQRT2);
    } else if (a < 1) {
      // the energy share's series, as gaussianEnergyBelow sums it (no cancellation below a = 1)
      below = gaussianEnergyBelow(1, a);
      above = 1 - below;
    } else {
      // its complement erfc(a/√2) + 2aφ(a) (integration by parts, as in gaussianEnergyBelow)
      above = preciseErfc(a / SQRT2) + 2 * a * normalPdf(a);
      below = 1 - above;
    }
    g[i] = below;
    c[i] = above;
  }
}
// the trapezoid weights of row a (spread a/16) at y_j = j/16, j = 0 … 9a (symmetric), normalised over |z| ≤ 9
const ROW_WEIGHTS_OF: (Float64Array | undefined)[] = [];
function rowWeights(a: number): Float64Array {
  let weights = ROW_WEIGHTS_OF[a];
  if (weights === undefined) {
    const last = 9 * a;
    weights = new Float64Array(last + 1);
    let total = 0;
    for (let j = 0; j <= last; j++) {
      const z = j / a;
      const w = (j === last ? 0.5 : 1) * Math.exp(-0.5 * z * z);
      weights[j] = w;
      total += j === 0 ? w : 2 * w;
    }
    for (let j = 0; j <= last; j++) weights[j] = (weights[j] as number) / total;
    ROW_WEIGHTS_OF[a] = weights;
  }
  return weights;
}
// log F and log C of the rows at x_k, per measure and row a (slot 2a + measure); NaN: not yet computed, −∞ where the
// value is 0
const ROW_LOGS: (Window | undefined)[] = [];
const ROW_COMPLEMENT_LOGS: (Window | undefined)[] = [];
// the windows of row a's logs (slot), covering x_from … x_to
function rowWindow(rows: (Window | undefined)[], slot: number, from: number, to: number): Window {
  let row = rows[slot];
  if (row === undefined) {
    row = emptyWindow();
    rows[slot] = row;
  }
  if (!(from >= row.base && to < row.base + row.values.length)) coverWindow(row, from, to);
  return row;
}
// F and C of row a at x_k into their log windows
function rowPoint(measure: number, a: number, k: number): void {
  const slot = 2 * a + measure;
  const logs = rowWindow(ROW_LOGS, slot, k, k);
  const complementLogs = rowWindow(ROW_COMPLEMENT_LOGS, slot, k, k);
  const weights = rowWeights(a);
  const last = 9 * a;
  coverGrid(measure, k - last, k + last);
  const grid = GRID[measure] as Window;
  const g = grid.values;
  const c = (GRID_COMPLEMENT[measure] as Window).values;
  // x_k − y_j is grid point k − j
  const centre = k - grid.base;
  let below = (weights[0] as number) * (g[centre] as number);
  let above = (weights[0] as number) * (c[centre] as number);
  for (let j = 1; j <= last; j++) {
    const w = weights[j] as number;
    below += w * ((g[centre - j] as number) + (g[centre + j] as number));
    above += w * ((c[centre - j] as number) + (c[centre + j] as number));
  }
  logs.values[k - logs.base] = Math.log(below);
  complementLogs.values[k - complementLogs.base] = Math.log(above);
}
// Lagrange weights at s over the points 0 … n − 1: Π_{m≠k}(s − m)/(k − m), the numerator as the product of the
// factors below k and above k (running products from either end), the denominators' inverses taken once
function lagrangeScale(n: number): Float64Array {
  const scale = new Float64Array(n);
  for (let k = 0; k < n; k++) {
    let denominator = 1;
    for (let m = 0; m < n; m++) if (m !== k) denominator *= k - m;
    scale[k] = 1 / denominator;
  }
  return scale;
}
const X_WEIGHTS = new Float64Array(TABLE_POINTS);
const S_WEIGHTS = new Float64Array(SPREAD_POINTS);
const X_SCALE = lagrangeScale(TABLE_POINTS);
const S_SCALE = lagrangeScale(SPREAD_POINTS);
function lagrangeWeights(into: Float64Array, scale: Float64Array, s: number): void {
  const n = into.length;
  let below = 1;
  for (let k = 0; k < n; k++) {
    into[k] = below * (scale[k] as number);
    below *= s - k;
  }
  let above = 1;
  for (let k = n - 1; k >= 0; k--) {
    into[k] = (into[k] as number) * above;
    above *= s - k;
  }
}
// the point S_WEIGHTS were last taken at (NaN: never)
const S_WEIGHTS_AT = new Float64Array(1).fill(NaN);
// the interpolated log of the rows firstRow … (ROW_LOGS or ROW_COMPLEMENT_LOGS) over x_first …; NaN where a point is 0.
// A row's six points are read into locals and summed in the order of the weights, as the loop over them would (the
// same value); a row with a point not yet computed takes that loop (patchRowLog), which fills it. The value is left in
// PATCH_LOG: returned, it would be a heap number (~9,000 a 1,000-layer check)
function patchLog(rows: (Window | undefined)[], measure: number, firstRow: number, first: number): void {
  const complement = rows === ROW_COMPLEMENT_LOGS;
  let result = 0;
  for (let r = 0; r < SPREAD_POINTS; r++) {
    const a = firstRow + r;
    const row = rowWindow(rows, 2 * a + measure, first, first + TABLE_POINTS - 1);
    const values = row.values;
    const at = first - row.base;
    const l0 = values[at] as number;
    const l1 = values[at + 1] as number;
    const l2 = values[at + 2] as number;
    const l3 = values[at + 3] as number;
    const l4 = values[at + 4] as number;
    const l5 = values[at + 5] as number;
    // NaN where a point is not yet computed; −∞ where one is 0 (no log is +∞: a share is at most 1)
    const all = l0 + l1 + l2 + l3 + l4 + l5;
    let sum = 0;
    if (all !== all) {
      patchRowLog(rows, measure, a, first);
      sum = ROW_SUM[0] as number;
      if (sum !== sum) {
        PATCH_LOG[0] = NaN;
        return;
      }
    } else {
      if (all === -Infinity) {
        PATCH_LOG[0] = NaN;
        return;
      }
      sum += (X_WEIGHTS[0] as number) * l0;
      sum += (X_WEIGHTS[1] as number) * l1;
      sum += (X_WEIGHTS[2] as number) * l2;
      sum += (X_WEIGHTS[3] as number) * l3;
      sum += (X_WEIGHTS[4] as number) * l4;
      sum += (X_WEIGHTS[5] as number) * l5;
    }
    result += (S_WEIGHTS[r] as number) * (complement ? a * a * sum : sum);
  }
  PATCH_LOG[0] = result;
}
const PATCH_LOG = new Float64Array(1);
// row a's sum of patchLog into ROW_SUM, filling the points not yet computed (NaN where a point is 0). Not returned: a
// call's result is a tagged value, and merged with the fast path's doubles it made the compiler keep every row's sum
// tagged, a heap number per addition (~1.7 kB a call, measured Dec 2026)
const ROW_SUM = new Float64Array(1);
function patchRowLog(rows: (Window | undefined)[], measure: number, a: number, first: number): void {
  ROW_SUM[0] = rowLogSum(rows, measure, a, first);
}
function rowLogSum(rows: (Window | undefined)[], measure: number, a: number, first: number): number {
  let sum = 0;
  for (let k = 0; k < TABLE_POINTS; k++) {
    const row = rows[2 * a + measure] as Window;
    let log = row.values[first + k - row.base] as number;
    if (log !== log) {
      rowPoint(measure, a, first + k);
      // rowPoint may have grown this window
      log = (rows[2 * a + measure] as Window).values[first + k - (rows[2 * a + measure] as Window).base] as number;
    }
    if (log === -Infinity) return NaN;
    sum += (X_WEIGHTS[k] as number) * log;
  }
  return sum;
}
// the Gaussian share (kind BELOW or ENERGY_BELOW) over draws at x = log2(t/rms), from the rows; NaN where the
// direct rule decides
function gaussianTableValue(kind: number, spread: number, x: number): number {
  if (!(spread >= TABLE_MIN_SPREAD && spread <= TABLE_MAX_SPREAD) || !Number.isFinite(x)) return NaN;
  // far above the spread every share is 1 (the rule finds 1 at its two end nodes); far below it the small ratios'
  // closed form applies: rows there would only grow the grids
  if (x > DRAW_LIMIT * spread + 4 || x < -DRAW_LIMIT * spread - 40) return NaN;
  const measure = kind === BELOW ? 0 : 1;
  const v = spread / ROW_STEP;
  const firstRow = Math.floor(v) - (SPREAD_POINTS >> 1) + 1;
  const u = x / ROW_STEP;
  const first = Math.floor(u) - (TABLE_POINTS >> 1) + 1;
  lagrangeWeights(X_WEIGHTS, X_SCALE, u - first);
  // the calls for one profile share its spread
  const s = v - firstRow;
  if (s !== S_WEIGHTS_AT[0]) {
    lagrangeWeights(S_WEIGHTS, S_SCALE, s);
    S_WEIGHTS_AT[0] = s;
  }
  patchLog(ROW_LOGS, measure, firstRow, first);
  const log = PATCH_LOG[0] as number;
  if (!(log <= LOG_UPPER_SHARE)) return log === log && spread >= COMPLEMENT_MIN_SPREAD ? Math.min(1, Math.max(0, complementShare(measure, spread, firstRow, first))) : NaN;
  return Math.min(1, Math.max(0, Math.exp(log)));
}
// 1 − C of the patch, C interpolated in log; NaN where a point's complement is 0
function complementShare(measure: number, spread: number, firstRow: number, first: number): number {
  const v = spread / ROW_STEP;
  patchLog(ROW_COMPLEMENT_LOGS, measure, firstRow, first);
  const log = (PATCH_LOG[0] as number) / (v * v);
  return -Math.expm1(log);
}

// Where a monotone function f(v) crosses p: "beyond" is the side past the crossing as v grows (f ≤ p for a
// decreasing f, f ≥ p for an increasing one). Brackets by doubling steps from v = 0, then bisects to `tolerance`.
function crossing(f: (v: number) => number, p: number, decreasing: boolean, tolerance: number): number {
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
  for (let i = 0; i < 80 && hi - lo > tolerance; i++) {
    const mid = 0.5 * (lo + hi);
    if (beyond(mid)) hi = mid;
    else lo = mid;
  }
  return 0.5 * (lo + hi);
}

// The lattice of mixtureCrossing: g at v = m·step for integer m, memoised in one reused window (NaN: not yet
// evaluated). g is a closure (mixtureCrossing) or the law integrand at r = 1, t = 2^v (lawMixtureCrossing).
let lattice = new Float64Array(2048);
// the lattice holds an earlier search's values until its first sum here clears it: a search whose mixtures are all read
// off the rows (the Gaussian share below) never touches it, and 2048 points cost more to clear than the search
let latticeStale = true;
let latticeBase = 0;
// Lattice points are numbered from the search's start: point m stands at v = (origin + m)·step, the origin held in
// LATTICE_ORIGIN. The numbers stay small integers when the start is far out in points (a spread near 0 puts them close
// together), which keeps the compiled loops on small-integer arithmetic; origin + m is an integer below 2^53, so v is
// the same as with the points numbered from v = 0. A Float64Array, not a module variable: one holding a small integer
// in one search and a boxed double in the next sends the compiled readers back to the interpreter.
const LATTICE_ORIGIN = new Float64Array(1);
let latticeClosure: ((v: number) => number) | null = null;
function latticeValue(v: number): number {
  if (latticeClosure !== null) return latticeClosure(v);
  STATE[I_T] = exp2(v);
  return integrand(1);
}
// make lattice points [from, to] addressable, keeping the values already there
function latticeCover(from: number, to: number): void {
  if (from >= latticeBase && to < latticeBase + lattice.length) return;
  const low = Math.min(from, latticeBase);
  const high = Math.max(to, latticeBase + lattice.length - 1);
  const grown = new Float64Array(Math.max(2 * lattice.length, high - low + 1 + 256)).fill(NaN);
  const shift = latticeBase - low + (from < latticeBase ? 128 : 0);
  grown.set(lattice, shift);
  latticeBase -= shift;
  lattice = grown;
}
// For an element law g is monotone and reaches its limits exactly (an erfc that underflows to 0, an anyOf that
// rounds to 1, a share capped at 1), and the lattice points are far enough apart that rounding cannot undo that
// order: past the first point that holds a limit, every point holds it. The points a sum needs are evaluated outward
// from its centre, each side until it reaches its limit (the values are the ones an evaluation would give, so the sums
// are unchanged), which leaves most of a wide window unevaluated. NaN limits: no such shortcut (closures).
let latticeHighLimit = NaN;
let latticeLowLimit = NaN;
// g at lattice point m, evaluated once
function latticeAt(m: number): number {
  const at = m - latticeBase;
  let value = lattice[at] as number;
  if (value !== value) {
    value = latticeValue(((LATTICE_ORIGIN[0] as number) + m) * (STATE[L_STEP] as number));
    lattice[at] = value;
  }
  return value;
}
// The lowest point of [from, to] that holds the limit `high` true (the high limit) or false (the low limit, read from
// the other end: the highest point holding it), by steps doubling away from `centre` and then bisection: a sum whose
// centre lies far past the step of g (the level of a small probability over a wide spread) meets the edge of its
// limit stretch after a few evaluations instead of one per point. Bounds past the window: to + 1, from − 1.
function latticeEdge(from: number, to: number, centre: number, high: boolean): number {
  const limit = high ? latticeHighLimit : latticeLowLimit;
  // inside: the points on the limit's side of the edge; outside: a point known not to hold it (or past the window)
  let inside: number;
  let outside: number;
  const direction = high ? 1 : -1;
  const end = high ? to + 1 : from - 1;
  if (centre < from || centre > to) return end;
  if (latticeAt(centre) === limit) {
    // the edge is at or beyond the centre towards the other side
    inside = centre;
    let jump = 1;
    outside = centre - direction;
    while (outside >= from && outside <= to && latticeAt(outside) === limit) {
      inside = outside;
      jump *= 2;
      outside = inside - direction * jump;
    }
    if (outside < from) outside = from - 1;
    if (outside > to) outside = to + 1;
  } else {
    outside = centre;
    let jump = 1;
    inside = centre + direction;
    while (inside >= from && inside <= to && latticeAt(inside) !== limit) {
      outside = inside;
      jump *= 2;
      inside = outside + direction * jump;
    }
    if (inside > to || inside < from) inside = end;
  }
  while (Math.abs(inside - outside) > 1) {
    const middle = Math.floor((inside + outside) / 2);
    if (latticeAt(middle) === limit) inside = middle;
    else outside = middle;
  }
  return inside;
}
// Returns the first point at and above the centre that holds the high limit (to + 1 when none does).
function latticeFill(from: number, to: number, centre: number): number {
  const top = latticeEdge(from, to, centre, true);
  const bottom = latticeEdge(from, Math.min(to, top - 1), Math.min(centre, top - 1), false);
  const values = lattice;
  for (let m = from; m <= to; m++) {
    const at = m - latticeBase;
    if ((values[at] as number) === (values[at] as number)) continue;
    values[at] = m <= bottom ? latticeLowLimit : m >= top ? latticeHighLimit : latticeValue(((LATTICE_ORIGIN[0] as number) + m) * (STATE[L_STEP] as number));
  }
  return Math.max(top, centre);
}
// the mixtures already summed in the current search (its bracket ends are summed twice)
const MIXTURE_MEMO = 64;
const MIXTURE_AT = new Float64Array(MIXTURE_MEMO);
const MIXTURE_VALUE = new Float64Array(MIXTURE_MEMO);
let mixtureCount = 0;
// Σ_i w_i·g(lattice point j + half − i): node i sits at z = (i − half)·DRAW_STEP, so v_j − spread·z_i is that point
function latticeMixture(j: number): number {
  for (let k = 0; k < mixtureCount; k++) if (MIXTURE_AT[k] === j) return MIXTURE_VALUE[k] as number;
  if (latticeTable) {
    const value = gaussianTableValue(BELOW, (STATE[L_SPREAD] as number), ((LATTICE_ORIGIN[0] as number) + j) * (STATE[L_STEP] as number));
    if (!Number.isNaN(value)) return memoMixture(j, value);
  }
  const w = DRAW_NODES.w;
  const count = w.length;
  const half = (count - 1) / 2;
  if (latticeStale) {
    lattice.fill(NaN);
    latticeStale = false;
  }
  latticeCover(j + half - (count - 1), j + half);
  // the sum runs from the highest point down; where the high limit is 0, the terms above its first point add
  // exact zeros to a sum of 0, and are skipped
  let skip = 0;
  if (latticeHighLimit === latticeHighLimit) {
    const first = latticeFill(j + half - (count - 1), j + half, j);
    if (latticeHighLimit === 0) skip = Math.max(0, j + half - first + 1);
  }
  const values = lattice;
  const offset = j + half - latticeBase;
  let sum = 0;
  for (let i = skip; i < count; i++) {
    let value = values[offset - i] as number;
    if (value !== value) {
      value = latticeValue(((LATTICE_ORIGIN[0] as number) + (j + half - i)) * (STATE[L_STEP] as number));
      values[offset - i] = value;
    }
    sum += (w[i] as number) * value;
  }
  return memoMixture(j, sum);
}
function memoMixture(j: number, sum: number): number {
  if (mixtureCount < MIXTURE_MEMO) {
    MIXTURE_AT[mixtureCount] = j;
    MIXTURE_VALUE[mixtureCount++] = sum;
  }
  return sum;
}
// The Gaussian share below, where its rows cover the spread, is read off them (gaussianTableValue) instead of
// summed on the search's own lattice: the draw integral at the search's lattice points to about 2e-7 relative (the
// lattice's own sums carry the rule's ripple), so the level is the integral's crossing on the lattice
// (test/risk/share-tables.test.ts; test/risk/laws.test.ts bounds it against the lattice's own sums where their ripple
// is small).
let latticeTable = false;

/**
 * The level v (in binades above the median scale) where the draw mixture of a scale-family probability crosses
 * p: E_z[g(v − spread·z)] = p, z ~ N(0, 1). `g(v)` is the probability at the median scale for the threshold
 * 2^v·rms; every element law but "bounded" depends on t/r only, which makes this a convolution. It is
 * evaluated on the lattice of the draw rule (step spread/8), so each g value is computed once and shared by
 * every step of the search; the crossing is interpolated between lattice points in log probability.
 * `decreasing`: g falls as v grows (exceedance probabilities); otherwise it rises (shares below a level).
 */
export function mixtureCrossing(g: (v: number) => number, spread: number, p: number, decreasing: boolean): number {
  if (!(spread > 0)) return crossing(g, p, decreasing, 1e-9);
  latticeClosure = g;
  latticeHighLimit = NaN;
  latticeLowLimit = NaN;
  const start = crossing(g, p, decreasing, (spread * DRAW_STEP) / 4);
  const level = latticeCrossing(spread, p, decreasing, start, Math.round(1 / DRAW_STEP));
  latticeClosure = null;
  return level;
}

/**
 * {@link mixtureCrossing} of a profile's element law without its bound, at r = 1 and t = 2^v:
 * g(v) = anyOf(above(1, 2^v), n) (`measure` "any-above", decreasing) or below(1, 2^v) ("below", increasing), the
 * law of {@link elementLaw} for the profile without `bound` (shape "bounded" read as "gaussian"). The Gaussian
 * "below" mixture is read off the shared rows of the draw integral where they cover the spread, and from spread 0.5 to
 * 8 its level off a table of the rows' exact crossings (lowTableValue); `viaRows` false sums it on the search's own
 * lattice (the reference the rows are held to in the tests). The "any-above" level is
 * solved on {@link lawOverDraws}' any-above sums themselves (anyAboveLevel), so the probability there is p; for the
 * Gaussian laws with 64 elements or more at spreads 0.5 to 8 it is read off a table of those levels (within 1e-6
 * binade of the search, see levelTableValue), which `viaRows` false leaves aside.
 */
export function lawMixtureCrossing(profile: MagnitudeProfile, measure: "any-above" | "below", p: number, viaRows = true): number {
  // a spread far below any level's resolution is none: the lattice's steps (spread/8 apart) need ever more of them to
  // reach the crossing (0.2 s at a spread of 1e-21; 1e-23 did not return); under 1e-16 binade the levels move by less
  // than 1e-15 binade (the draws' quantiles lie within ±6 spreads)
  if (profile.log2Spread > 0 && profile.log2Spread < NEGLIGIBLE_SPREAD) return lawMixtureCrossing({ ...profile, log2Spread: 0 }, measure, p, viaRows);
  const kind = measure === "any-above" ? ANY_ABOVE : BELOW;
  const decreasing = kind === ANY_ABOVE;
  // the bound's verdict is ignored: the levels are solved without it
  setLawIntegrand(profile, kind, 1, false);
  latticeClosure = null;
  const spread = profile.log2Spread;
  if (!(spread > 0)) return crossing(latticeValue, p, decreasing, 1e-9);
  if (decreasing && p > 0 && p < anyOf((STATE[I_SHARE] as number), (STATE[I_COUNT] as number))) {
    if (viaRows && integrandLaw === GAUSSIAN && (STATE[I_COUNT] as number) >= GRID_COUNT && spread >= LEVEL_MIN_SPREAD && spread <= TABLE_MAX_SPREAD) {
      const level = levelTableValue(spread, p);
      if (level === level) return level;
    }
    return anyAboveLevel(spread, p);
  }
  if (!decreasing && viaRows && integrandLaw === GAUSSIAN && spread >= LOW_MIN_SPREAD && spread <= LOW_MAX_SPREAD && p > 0 && p < 1) {
    const level = lowTableValue(spread, p);
    if (level === level) return level;
  }
  // the share below a level does not depend on the element count: tensors of one spread and law share it
  const slot = decreasing || !viaRows ? -1 : belowSlot(spread, p);
  const elementSpread = elementParameter();
  if (slot >= 0) {
    const at = slot * 4;
    if (BELOW_KEYS[at] === integrandLaw && BELOW_KEYS[at + 1] === elementSpread && BELOW_KEYS[at + 2] === spread && BELOW_KEYS[at + 3] === p) {
      return BELOW_LEVELS[slot] as number;
    }
  }
  // Where the search starts (the any-above levels of p in (0, limit) are solved on their own sums above; what reaches
  // here of them, p at or past 0 or the limit, takes the plain bracket). The bracket latticeCrossing finds is the same
  // from any start; only the number of sums changes.
  const tolerance = (spread * DRAW_STEP) / 4;
  let start = NaN;
  let jump = Math.round(1 / DRAW_STEP);
  if (!decreasing && integrandLaw === GAUSSIAN && spread >= 0.25 && p > 0 && p < 0.05) {
    // A small share below a level sits where the Gaussian share is still linear, P(|Z| ≤ a) ≈ √(2/π)·a (Abramowitz &
    // Stegun 7.1.5, first term), a = 2^(v − spread·z) over the draws, whose mean is 2^v·e^{(spread·ln 2)²/2} (the
    // moments of a log-normal): a start within a tenth of a lattice point in the spreads and levels checked
    start = Math.log2(p / Math.sqrt(2 / Math.PI)) - (spread * spread * LN2) / 2;
    jump = 1;
  }
  if (!Number.isFinite(start)) {
    start = crossing(latticeValue, p, decreasing, tolerance);
    jump = Math.round(1 / DRAW_STEP);
  }
  // exceedance probabilities fall from 1 to 0, shares below a level rise from 0 to 1
  latticeHighLimit = decreasing ? 0 : 1;
  latticeLowLimit = decreasing ? 1 : 0;
  latticeTable = viaRows && !decreasing && integrandLaw === GAUSSIAN && spread >= TABLE_MIN_SPREAD && spread <= TABLE_MAX_SPREAD;
  STATE[L_SPREAD] = spread;
  const level = latticeCrossing(spread, p, decreasing, start, jump);
  latticeTable = false;
  latticeHighLimit = NaN;
  latticeLowLimit = NaN;
  if (slot >= 0) {
    const at = slot * 4;
    BELOW_KEYS[at] = integrandLaw;
    BELOW_KEYS[at + 1] = elementSpread;
    BELOW_KEYS[at + 2] = spread;
    BELOW_KEYS[at + 3] = p;
    BELOW_LEVELS[slot] = level;
  }
  return level;
}

/**
 * profileStatistics' two factors for a profile {@link gaussianLevelsTabled} admits, quantiles strictly between 0 and 1:
 * out[0] = 2^level of {@link lawMixtureCrossing}(profile, "any-above", maxQuantile), out[1] = 2^level of its "below" at
 * lowQuantile; the same levels by the same steps, bit for bit, in one pass (the law set once, no number boxed per
 * return).
 */
export function gaussianLevelFactors(profile: MagnitudeProfile, maxQuantile: number, lowQuantile: number, out: Float64Array): void {
  setLawIntegrand(profile, ANY_ABOVE, 1, false);
  latticeClosure = null;
  const spread = profile.log2Spread;
  let level = levelTableValue(spread, maxQuantile);
  if (!(level === level)) level = anyAboveLevel(spread, maxQuantile);
  out[0] = exp2(level);
  integrandKind = BELOW;
  let low = lowTableValue(spread, lowQuantile);
  if (!(low === low)) low = lawMixtureCrossing(profile, "below", lowQuantile);
  out[1] = exp2(low);
}

// The levels of lawMixtureCrossing's "below" per (law, element spread, spread, p), direct-mapped on the spread's
// and p's bits (a collision replaces the older level); the element spread is the log-normal law's (0 for the others).
const BELOW_SLOTS = 2048;
const BELOW_KEYS = new Float64Array(4 * BELOW_SLOTS).fill(NaN);
const BELOW_LEVELS = new Float64Array(BELOW_SLOTS);
function belowSlot(spread: number, p: number): number {
  BITS[0] = spread;
  let hash = Math.imul((BITS_WORDS[0] as number) ^ Math.imul(BITS_WORDS[1] as number, 0x9e3779b1), 0x85ebca6b);
  BITS[0] = p;
  hash = Math.imul(hash ^ (BITS_WORDS[0] as number) ^ Math.imul(BITS_WORDS[1] as number, 0x27d4eb2f), 0x165667b1);
  return (hash >>> 21) & (BELOW_SLOTS - 1);
}

// The lattice search of mixtureCrossing from a starting level. The computed mixture is monotone in j (rounding is
// monotone, the weights positive), so the bracket found is the same from any start: the start only saves steps.
// `firstJump`: the lattice points of the first step away from the start (doubling after it).
function latticeCrossing(spread: number, p: number, decreasing: boolean, direct: number, firstJump: number): number {
  const step = spread * DRAW_STEP;
  STATE[L_STEP] = step;
  // a search with a far crossing (a spread near 0 puts the lattice points close together) grows the lattice; the
  // next search starts from the usual size again rather than clearing the grown one each time
  if (lattice.length > 2048) lattice = new Float64Array(2048);
  latticeStale = true;
  mixtureCount = 0;
  // the search starts at point 0; + 0 turns a −0 from Math.round into +0
  const origin = Math.round(direct / step) + 0;
  LATTICE_ORIGIN[0] = origin;
  const start = 0;
  latticeBase = start - (lattice.length >> 1);
  const beyond = (j: number): boolean => (decreasing ? latticeMixture(j) <= p : latticeMixture(j) >= p);
  // the points of ±2200 binades, counted from the start
  const limit = Math.ceil(2200 / step);
  const lowest = -limit - origin;
  const highest = limit - origin;
  let lo: number;
  let hi: number;
  if (beyond(start)) {
    hi = start;
    let jump = firstJump;
    lo = start - jump;
    while (beyond(lo) && lo > lowest) {
      hi = lo;
      jump *= 2;
      lo -= jump;
    }
  } else {
    lo = start;
    let jump = firstJump;
    hi = start + jump;
    while (!beyond(hi) && hi < highest) {
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
  const a = latticeMixture(lo);
  const b = latticeMixture(hi);
  let fraction = 0.5;
  if (a > 0 && b > 0 && a !== b) fraction = (Math.log(p) - Math.log(a)) / (Math.log(b) - Math.log(a));
  else if (a !== b) fraction = (p - a) / (b - a);
  return (origin + lo + Math.min(1, Math.max(0, fraction))) * step;
}

// Any-above draw sums: I(x) = E_z[g(x − s·z)], z ~ N(0, 1), g(v) = anyOf(share·above(1, 2^v), n), x = log2(t/rms),
// s the spread (every element law but the constant one depends on t/r only). For many elements g is a step in v of
// width σ_v far narrower than the draw rule's nodes (spread/8 apart in v), where that rule does not converge (4.7%
// off). Where the step is narrower than the draws (σ_v < s), the sum subtracts the smooth step A·Φ((z − z_c)/σ)
// fitted to g's (A = g far below the scale, z_c where g = A/2, σ = σ_v/s from g's slope there), whose draw sum is
// closed form, E_z[Φ((z − c)/σ)] = Φ(−c/√(1 + σ²)) (the difference of two normals), and integrates the remainder by
// the trapezoid rule in ξ with z = z_c + c·σ·sinh ξ (c = MAP_WIDTH): fine nodes at the step, coarse ones far from it.
// The remainder at a node, g(v½ − c·σ_v·sinh ξ) − A·Φ(c·sinh ξ), depends on the law and the element count only (not
// on the threshold or the spread), so it is shared by every threshold and spread (see rowSlot). The trapezoid rule
// converges geometrically for analytic integrands (Trefethen & Weideman 2014, SIAM Review 56(3), §5; from memory):
// the step in ξ is halved from 1/2 until two sums agree to ANY_TOLERANCE, or, for GEOMETRIC_COUNT elements and more,
// until the change is below ANY_GEOMETRIC and at most the 3/2 power of the one before (then converging geometrically,
// the last sum is good to about the square of its change). A step as wide as the draws or wider is smooth on their
// scale, and the draw rule sums it (within 1e-7 of a converged reference there); the uniform law's kink is integrated
// from the kink on, the constant law in closed form. test/risk/any-above.test.ts holds every law to the definition's
// integral (1e-6 relative, or 1e-12 absolute). No shortcut by the union bound n·E_z[q], q = share·above (Bonferroni:
// nq − C(n, 2)q² ≤ g ≤ nq, common practice): the draws beyond z = 9, where g has reached its step, carry most of a
// small I, and there the bound is far off (n = 8192, s = 1.38, x = 16.8: I = 3.5e-27, the bound
// over |z| ≤ 9 5.8e-119, over every z 1.4e-26); the bound was within 1e-7 of I for 181 of the 10104 sums in (0, 0.9]
// of the benchmark spec's check.
const ANY_TOLERANCE = 1e-7;
const ANY_GEOMETRIC = 1e-4;
// (a few elements make a step whose far side falls double-exponentially, and a step nearly as wide as the draws
// leaves the draws' own bump to the nodes far from the step: there the changes mislead. Measured on the test's sweep:
// 1 and 3 elements, and steps of σ_v = 0.94·s, needed the plain tolerance)
const GEOMETRIC_COUNT = 16;
const GEOMETRIC_WIDTH = 0.5;
// node j of the tables stands at ξ = j/16; steps 1/2 … 1/16
const ANY_UNIT = 16;
const ANY_FIRST_STRIDE = 8;
const ANY_REACH = 12;
const ANY_TABLE = ANY_REACH * ANY_UNIT + 1;
// the map's scale in units of the fitted step's width: a little wider than the step converges in fewer nodes (measured
// over the benchmark spec's sums: 1.5 against 1)
const MAP_WIDTH = 1.5;
const SINH = new Float64Array(ANY_TABLE);
const COSH = new Float64Array(ANY_TABLE);
// Φ(c·sinh ξ_j) and Φ(−c·sinh ξ_j)
const STEP_UP = new Float64Array(ANY_TABLE);
const STEP_DOWN = new Float64Array(ANY_TABLE);
for (let j = 0; j < ANY_TABLE; j++) {
  const xi = j / ANY_UNIT;
  SINH[j] = Math.sinh(xi);
  COSH[j] = Math.cosh(xi);
  STEP_UP[j] = normalCdf(MAP_WIDTH * (SINH[j] as number));
  STEP_DOWN[j] = normalSf(MAP_WIDTH * (SINH[j] as number));
}
// the step rule takes steps narrower than this in units of the spread (σ_v/s); wider ones take the draw rule
const STEP_WIDTH_LIMIT = 1;
// A quantile of the standard normal good to 4.5e-4 (Abramowitz & Stegun 26.2.23): only the centre of a rule
function roughUpperQuantile(q: number): number {
  if (q > 0.5) return -roughUpperQuantile(1 - q);
  const t = Math.sqrt(-2 * Math.log(q));
  return t - (2.515517 + t * (0.802853 + t * 0.010328)) / (1 + t * (1.432788 + t * (0.189269 + t * 0.001308)));
}
// the current any-above integrand at the median scale: g(v) = anyOf(share·above(1, 2^v), n)
function anyAtCount(v: number, n: number): number {
  return anyOf((STATE[I_SHARE] as number) * lawAbove(1, 2 ** v), n);
}

// The fitted step of g: its level v½ (g = A/2) and width σ_v = A·φ(0)/|g'(v½)|, A = anyOf(share, n) (above → 1 far
// below the scale); width 0 for a law without one (constant).
// FIT[0] A, FIT[1] v½, FIT[2] σ_v, FIT[3] the step rule's last derivative in x (a typed array, not module variables:
// a double stored in one is boxed at every store, garbage on the hot path)
const FIT = new Float64Array(4);
// the mixture's v½ by bisection on [−64, 16] to 1e-12 binade
const FIT_BISECTION = { maxSteps: 64, absTol: 1e-12, relTol: 0 };
function fitStepOf(n: number): void {
  const share = (STATE[I_SHARE] as number);
  const limit = anyOf(share, n);
  FIT[0] = limit;
  // above(1, 2^v½) = E with 1 − (1 − share·E)^n = A/2
  const half = -Math.expm1(Math.log1p(-limit / 2) / n) / share;
  let slope = 0;
  FIT[1] = 0;
  if (integrandLaw === GAUSSIAN) {
    // erfc(a/√2) = 2Q(a) (Abramowitz & Stegun 26.2.29); dE/dv = −2φ(a)·a·ln 2
    const a = roughUpperQuantile(half / 2);
    FIT[1] = Math.log2(a);
    slope = 2 * normalPdf(a) * a * LN2;
  } else if (integrandLaw === LOG_NORMAL) {
    const s = (STATE[I_SPREAD] as number);
    const y = roughUpperQuantile(half);
    FIT[1] = s * y - s * s * LN2;
    slope = normalPdf(y) / s;
  } else if (integrandLaw === UNIFORM) {
    const a = SQRT3 * (1 - half);
    FIT[1] = Math.log2(a);
    slope = (a * LN2) / SQRT3;
  } else if (integrandLaw === MIXTURE) {
    // the mixture's tail Σ wᵢ·erfc(a/(cᵢ√2)) falls as a grows: a by bisection on log2 a, and the slope the sum of the
    // components' Gaussian slopes, 2φ(a/cᵢ)·(a/cᵢ)·ln 2 each
    const m = integrandMixture as ScaleMixture;
    // started where the widest component's Gaussian tail alone would put it (the others only lower the tail there)
    const guess = Math.log2((m.scales[0] as number) * Math.max(roughUpperQuantile(half / 2), 1e-3));
    const v = bisectDecreasing((x) => mixtureAbove(m, 1, exp2(x)), half, -64, 16, FIT_BISECTION, guess, 1 / 4);
    const a = exp2(v);
    FIT[1] = v;
    for (let i = 0; i < m.weights.length; i++) {
      const y = a / (m.scales[i] as number);
      slope += (m.weights[i] as number) * 2 * normalPdf(y) * y * LN2;
    }
  }
  const width = (limit * normalPdf(0)) / (n * ((1 - limit / 2) / (1 - share * half)) * share * slope);
  FIT[2] = width > 0 && Number.isFinite(width) && Number.isFinite(FIT[1] as number) ? width : 0;
}

// The remainders g(v½ − c·σ_v·sinh ξ_j) − A·Φ(c·sinh ξ_j) (c = MAP_WIDTH) depend on the law and the element count
// only. For n ≥ GRID_COUNT they are read off rows at counts e^{k/8} by the Lagrange polynomial through the four nearest
// in ln n (Abramowitz & Stegun 25.2.15 for the error term; the remainder at a node is smooth in ln n, and the sums stay
// within 1e-6 of the converged reference, test/risk/any-above.test.ts): every count a check meets shares a handful of
// rows. Fewer elements take a row of their own count. Rows live in an open-addressing table on (law, share, element
// spread, count or −k), cleared when three quarters full, each holding the nodes |ξ| ≤ 4 (NaN: not yet computed; a
// grid row is computed whole when first picked; the few sums that reach further compute their outer nodes afresh) and
// its count's fitted step. A table of a
// mathematical function: its values never depend on what the process computed before.
const REMAINDER_SLOTS = 1024;
const REMAINDER_LIMIT = (REMAINDER_SLOTS >> 2) * 3;
const REMAINDER_HALF = 4 * ANY_UNIT;
const REMAINDER_KEYS = new Float64Array(REMAINDER_SLOTS * 4).fill(NaN);
// per slot: the row's count, v½, σ_v and A
const REMAINDER_FITS = new Float64Array(REMAINDER_SLOTS * 4);
const REMAINDER_ROWS: Float64Array[] = [];
// per slot: 1 once every node |ξ| ≤ 4 of the row is computed (fillRow)
const REMAINDER_FULL = new Uint8Array(REMAINDER_SLOTS);
// per slot: the row's shifts of the first four moments of the step's law (see rowMoments); NaN: not yet taken
const REMAINDER_MOMENTS = new Float64Array(REMAINDER_SLOTS * 4).fill(NaN);
const REMAINDER_KEY = new Float64Array(4);
const REMAINDER_KEY_WORDS = new Int32Array(REMAINDER_KEY.buffer);
let remainderCount = 0;
const GRID_COUNT = 64;
const GRID_PER_LN = 8;
// the rows of the current sum (one, or four with Lagrange weights)
const ROW_SLOTS = new Int32Array(4);
const ROW_WEIGHTS = new Float64Array(4);
let rowCount = 1;
let row0: Float64Array = STEP_UP;
let row1: Float64Array = STEP_UP;
let row2: Float64Array = STEP_UP;
let row3: Float64Array = STEP_UP;
// the slot of the row keyed by `countKey` (the count, or −k for grid row k), made with count n if new
function rowSlot(countKey: number, n: number): number {
  REMAINDER_KEY[0] = integrandLaw;
  REMAINDER_KEY[1] = (STATE[I_SHARE] as number);
  REMAINDER_KEY[2] = countKey;
  REMAINDER_KEY[3] = elementParameter();
  let slot = hashSlot(REMAINDER_KEY_WORDS, REMAINDER_SLOTS);
  for (;;) {
    const at = slot * 4;
    const first = REMAINDER_KEYS[at] as number;
    if (first !== first) break;
    if (first === REMAINDER_KEY[0] && REMAINDER_KEYS[at + 1] === REMAINDER_KEY[1] && REMAINDER_KEYS[at + 2] === REMAINDER_KEY[2] && REMAINDER_KEYS[at + 3] === REMAINDER_KEY[3]) {
      return slot;
    }
    slot = (slot + 1) & (REMAINDER_SLOTS - 1);
  }
  if (remainderCount >= REMAINDER_LIMIT) {
    REMAINDER_KEYS.fill(NaN);
    remainderCount = 0;
    remainderClears++;
    return -1;
  }
  REMAINDER_KEYS.set(REMAINDER_KEY, slot * 4);
  remainderCount++;
  let row = REMAINDER_ROWS[slot];
  if (row === undefined) {
    row = new Float64Array(2 * REMAINDER_HALF + 1);
    REMAINDER_ROWS[slot] = row;
  }
  row.fill(NaN);
  REMAINDER_MOMENTS.fill(NaN, slot * 4, slot * 4 + 4);
  REMAINDER_FULL[slot] = 0;
  // the row's own fitted step, keeping the current one
  const half = FIT[1] as number;
  const width = FIT[2] as number;
  const limit = FIT[0] as number;
  fitStepOf(n);
  REMAINDER_FITS[slot * 4] = n;
  REMAINDER_FITS[slot * 4 + 1] = FIT[1] as number;
  REMAINDER_FITS[slot * 4 + 2] = FIT[2] as number;
  REMAINDER_FITS[slot * 4 + 3] = FIT[0] as number;
  FIT[1] = half;
  FIT[2] = width;
  FIT[0] = limit;
  return slot;
}
// pick the rows of the current law and count (fitStep set)
function remainderRow(): void {
  const n = (STATE[I_COUNT] as number);
  const elementSpread = elementParameter();
  const state = remainderCount + remainderClears * REMAINDER_SLOTS;
  if (COUNT_KEY[0] === integrandLaw && COUNT_KEY[1] === (STATE[I_SHARE] as number) && COUNT_KEY[2] === n && COUNT_KEY[3] === elementSpread && countRows === state) return;
  // the rows this count picked before, while no row has been made or cleared since (anyRule found its slot just now)
  const slot = currentCountSlot();
  if (COUNTS_STATE[slot] === state && (COUNTS_ROWS[4 * slot] as number) >= 0) {
    COUNT_KEY[0] = integrandLaw;
    COUNT_KEY[1] = STATE[I_SHARE] as number;
    COUNT_KEY[2] = n;
    COUNT_KEY[3] = elementSpread;
    rowCount = n >= GRID_COUNT ? 4 : 1;
    for (let k = 0; k < 4; k++) {
      ROW_SLOTS[k] = COUNTS_ROWS[4 * slot + k] as number;
      ROW_WEIGHTS[k] = COUNTS_WEIGHTS[4 * slot + k] as number;
    }
    row0 = REMAINDER_ROWS[ROW_SLOTS[0] as number] as Float64Array;
    row1 = rowCount > 1 ? (REMAINDER_ROWS[ROW_SLOTS[1] as number] as Float64Array) : row0;
    row2 = rowCount > 1 ? (REMAINDER_ROWS[ROW_SLOTS[2] as number] as Float64Array) : row0;
    row3 = rowCount > 1 ? (REMAINDER_ROWS[ROW_SLOTS[3] as number] as Float64Array) : row0;
    countRows = state;
    // the grid rows held now are not the ones GRID_KEY names
    GRID_KEY[3] = NaN;
    return;
  }
  pickRows(n, elementSpread);
  COUNTS_STATE[slot] = countRows;
  for (let k = 0; k < 4; k++) {
    COUNTS_ROWS[4 * slot + k] = k < rowCount ? (ROW_SLOTS[k] as number) : (ROW_SLOTS[0] as number);
    COUNTS_WEIGHTS[4 * slot + k] = k < rowCount ? (ROW_WEIGHTS[k] as number) : 0;
  }
}
// Per element count a check meets (with the law, share and element spread): its fitted step and the remainder rows it
// picked with their weights, and the remainder table's state then (the rows are valid while no row has been made or
// cleared since). Direct-mapped on the key's bits: a collision replaces the older count. The same fit and the same rows
// as computed afresh, so the same sums bit for bit.
const COUNT_SLOTS = 256;
const COUNTS_KEY = new Float64Array(4 * COUNT_SLOTS).fill(NaN);
const COUNTS_FIT = new Float64Array(3 * COUNT_SLOTS).fill(NaN);
const COUNTS_ROWS = new Int32Array(4 * COUNT_SLOTS).fill(-1);
const COUNTS_WEIGHTS = new Float64Array(4 * COUNT_SLOTS);
const COUNTS_STATE = new Float64Array(COUNT_SLOTS).fill(NaN);
const COUNTS_PROBE = new Float64Array(4);
const COUNTS_PROBE_WORDS = new Int32Array(COUNTS_PROBE.buffer);
let lastCountSlot = 0;
// the cache slot of the current law and count, emptied for it if another count held it
function countSlot(): number {
  COUNTS_PROBE[0] = integrandLaw;
  COUNTS_PROBE[1] = STATE[I_SHARE] as number;
  COUNTS_PROBE[2] = STATE[I_COUNT] as number;
  COUNTS_PROBE[3] = elementParameter();
  const slot = hashSlot(COUNTS_PROBE_WORDS, COUNT_SLOTS);
  const at = 4 * slot;
  if (
    COUNTS_KEY[at] !== COUNTS_PROBE[0] ||
    COUNTS_KEY[at + 1] !== COUNTS_PROBE[1] ||
    COUNTS_KEY[at + 2] !== COUNTS_PROBE[2] ||
    COUNTS_KEY[at + 3] !== COUNTS_PROBE[3]
  ) {
    COUNTS_KEY.set(COUNTS_PROBE, at);
    COUNTS_FIT[3 * slot] = NaN;
    COUNTS_ROWS[at] = -1;
    COUNTS_STATE[slot] = NaN;
  }
  lastCountSlot = slot;
  return slot;
}
// countSlot's slot, unless the last one found was another count's
function currentCountSlot(): number {
  const at = 4 * lastCountSlot;
  if (
    COUNTS_KEY[at] === integrandLaw &&
    COUNTS_KEY[at + 1] === STATE[I_SHARE] &&
    COUNTS_KEY[at + 2] === STATE[I_COUNT] &&
    COUNTS_KEY[at + 3] === (elementParameter())
  ) {
    return lastCountSlot;
  }
  return countSlot();
}
// The four grid rows picked from each first row (with the law, share and element spread), and the remainder table's state
// then: the rows are valid while no row has been made or cleared since. Direct-mapped on the first row.
const GRID_CACHE_SLOTS = 64;
const GRID_CACHE_KEY = new Float64Array(4 * GRID_CACHE_SLOTS).fill(NaN);
const GRID_CACHE_ROWS = new Int32Array(4 * GRID_CACHE_SLOTS);
const GRID_CACHE_STATE = new Float64Array(GRID_CACHE_SLOTS).fill(NaN);
// the cache slot of `first` for the current law, emptied for it if another key held it
function gridCacheSlot(first: number, elementSpread: number): number {
  const slot = (first + 7 * integrandLaw + ((STATE[I_SHARE] as number) === 1 ? 31 : 0)) & (GRID_CACHE_SLOTS - 1);
  const at = 4 * slot;
  if (
    GRID_CACHE_KEY[at] !== first ||
    GRID_CACHE_KEY[at + 1] !== integrandLaw ||
    GRID_CACHE_KEY[at + 2] !== STATE[I_SHARE] ||
    GRID_CACHE_KEY[at + 3] !== elementSpread
  ) {
    GRID_CACHE_KEY[at] = first;
    GRID_CACHE_KEY[at + 1] = integrandLaw;
    GRID_CACHE_KEY[at + 2] = STATE[I_SHARE] as number;
    GRID_CACHE_KEY[at + 3] = elementSpread;
    GRID_CACHE_STATE[slot] = NaN;
  }
  return slot;
}
// pick the rows of the current law and count afresh
function pickRows(n: number, elementSpread: number): void {
  COUNT_KEY[0] = integrandLaw;
  COUNT_KEY[1] = (STATE[I_SHARE] as number);
  COUNT_KEY[2] = n;
  COUNT_KEY[3] = elementSpread;
  if (n >= GRID_COUNT) {
    const position = Math.log(n) * GRID_PER_LN;
    const first = Math.floor(position) - 1;
    const t = position - first;
    // Lagrange weights through points 0 … 3 at t
    ROW_WEIGHTS[0] = (-(t - 1) * (t - 2) * (t - 3)) / 6;
    ROW_WEIGHTS[1] = (t * (t - 2) * (t - 3)) / 2;
    ROW_WEIGHTS[2] = (-t * (t - 1) * (t - 3)) / 2;
    ROW_WEIGHTS[3] = (t * (t - 1) * (t - 2)) / 6;
    // neighbouring counts share their four rows (while the table keeps them)
    const state = remainderCount + remainderClears * REMAINDER_SLOTS;
    const same =
      rowCount === 4 &&
      GRID_KEY[0] === integrandLaw &&
      GRID_KEY[1] === (STATE[I_SHARE] as number) &&
      GRID_KEY[2] === elementSpread &&
      GRID_KEY[3] === first &&
      gridRows === state;
    // the four rows from `first` as picked before (the counts of a check's tensors differ, their first grid rows less)
    const cached = same ? -1 : gridCacheSlot(first, elementSpread);
    const known = cached >= 0 && GRID_CACHE_STATE[cached] === state;
    if (known) for (let k = 0; k < 4; k++) ROW_SLOTS[k] = GRID_CACHE_ROWS[4 * cached + k] as number;
    for (let k = same || known ? 4 : 0; k < 4; k++) {
      let slot = rowSlot(-(first + k), Math.exp((first + k) / GRID_PER_LN));
      // the table was full and cleared: the rows found so far are gone, start again
      if (slot < 0) {
        k = -1;
        continue;
      }
      ROW_SLOTS[k] = slot;
      fillRow(slot);
    }
    rowCount = 4;
    if (cached >= 0 && !known) {
      for (let k = 0; k < 4; k++) GRID_CACHE_ROWS[4 * cached + k] = ROW_SLOTS[k] as number;
      GRID_CACHE_STATE[cached] = remainderCount + remainderClears * REMAINDER_SLOTS;
    }
    GRID_KEY[0] = integrandLaw;
    GRID_KEY[1] = (STATE[I_SHARE] as number);
    GRID_KEY[2] = elementSpread;
    GRID_KEY[3] = first;
    gridRows = remainderCount + remainderClears * REMAINDER_SLOTS;
  } else {
    let slot = rowSlot(n, n);
    if (slot < 0) slot = rowSlot(n, n);
    ROW_SLOTS[0] = slot;
    ROW_WEIGHTS[0] = 1;
    rowCount = 1;
  }
  row0 = REMAINDER_ROWS[ROW_SLOTS[0] as number] as Float64Array;
  row1 = rowCount > 1 ? (REMAINDER_ROWS[ROW_SLOTS[1] as number] as Float64Array) : row0;
  row2 = rowCount > 1 ? (REMAINDER_ROWS[ROW_SLOTS[2] as number] as Float64Array) : row0;
  row3 = rowCount > 1 ? (REMAINDER_ROWS[ROW_SLOTS[3] as number] as Float64Array) : row0;
  countRows = remainderCount + remainderClears * REMAINDER_SLOTS;
}
// the law and count whose rows ROW_SLOTS holds, and the table's state when they were picked (a row made or the table
// cleared since may have taken a slot of its rows)
const COUNT_KEY = new Float64Array(4).fill(NaN);
// the law and first grid row of ROW_SLOTS when they are grid rows, and the table's state then
const GRID_KEY = new Float64Array(4).fill(NaN);
let gridRows = -1;
let countRows = -1;
let remainderClears = 0;
// the remainder of row r (slot `slot`) at node j
function rowValue(row: Float64Array, slot: number, j: number): number {
  const at = j + REMAINDER_HALF;
  const inside = at >= 0 && at <= 2 * REMAINDER_HALF;
  let value = inside ? (row[at] as number) : NaN;
  if (value !== value) {
    const index = j < 0 ? -j : j;
    const u = j < 0 ? -(SINH[index] as number) : (SINH[index] as number);
    const fit = slot * 4;
    value =
      anyAtCount((REMAINDER_FITS[fit + 1] as number) - MAP_WIDTH * (REMAINDER_FITS[fit + 2] as number) * u, REMAINDER_FITS[fit] as number) -
      (REMAINDER_FITS[fit + 3] as number) * (j < 0 ? (STEP_DOWN[index] as number) : (STEP_UP[index] as number));
    if (inside) row[at] = value;
  }
  return value;
}
// compute every node |ξ| ≤ 4 of the row in `slot` not yet computed
function fillRow(slot: number): void {
  if (REMAINDER_FULL[slot] === 1) return;
  const row = REMAINDER_ROWS[slot] as Float64Array;
  for (let j = -REMAINDER_HALF; j <= REMAINDER_HALF; j++) rowValue(row, slot, j);
  REMAINDER_FULL[slot] = 1;
}
// The step g/A is the survival function of a law: P(V > v) = g(v)/A, V the level of the largest of the n elements
// (in binades from the scale), so I(x) = A·P(V + s·Z > x). In units of the fitted step, W = (V − v½)/σ_v survives
// with Φ(−w) + r(w)/A (r the remainder, w = −c·sinh ξ at node ξ), and E[W^k] = ∫ k·w^{k−1}·(P(W > w) − [w < 0]) dw
// (integration by parts): the standard normal's moments 0, 1, 0, 3 plus k/A·∫ w^{k−1}·r dw, summed by the trapezoid
// rule on the row's nodes (dw = c·cosh ξ dξ; r is 0 to rounding past |ξ| = 4, where |w| > 40). Returns the offset
// into REMAINDER_MOMENTS of the row's four shifts.
function rowMoments(slot: number): number {
  const at = slot * 4;
  if (REMAINDER_MOMENTS[at] === REMAINDER_MOMENTS[at]) return at;
  const row = REMAINDER_ROWS[slot] as Float64Array;
  const scale = (MAP_WIDTH / ANY_UNIT) / (REMAINDER_FITS[at + 3] as number);
  let m1 = 0;
  let m2 = 0;
  let m3 = 0;
  let m4 = 0;
  for (let j = -REMAINDER_HALF; j <= REMAINDER_HALF; j++) {
    const index = j < 0 ? -j : j;
    const w = -MAP_WIDTH * (j < 0 ? -(SINH[index] as number) : (SINH[index] as number));
    const term = (index === REMAINDER_HALF ? 0.5 : 1) * scale * (COSH[index] as number) * rowValue(row, slot, j);
    m1 += term;
    m2 += 2 * w * term;
    m3 += 3 * w * w * term;
    m4 += 4 * w * w * w * term;
  }
  REMAINDER_MOMENTS[at] = m1;
  REMAINDER_MOMENTS[at + 1] = m2;
  REMAINDER_MOMENTS[at + 2] = m3;
  REMAINDER_MOMENTS[at + 3] = m4;
  return at;
}
// The central moments of V in binades (mean from v½, variance, third, fourth) into MOMENTS, interpolated between the
// rows as the remainders are (σ_v the current fitted width). remainderRow set for the current count.
const MOMENTS = new Float64Array(4);
function stepMoments(): void {
  let e1 = 0;
  let e2 = 1;
  let e3 = 0;
  let e4 = 3;
  for (let k = 0; k < rowCount; k++) {
    const at = rowMoments(ROW_SLOTS[k] as number);
    const weight = ROW_WEIGHTS[k] as number;
    e1 += weight * (REMAINDER_MOMENTS[at] as number);
    e2 += weight * (REMAINDER_MOMENTS[at + 1] as number);
    e3 += weight * (REMAINDER_MOMENTS[at + 2] as number);
    e4 += weight * (REMAINDER_MOMENTS[at + 3] as number);
  }
  const h = FIT[2] as number;
  const mean = h * e1;
  const r2 = h * h * e2;
  const r3 = h * h * h * e3;
  const r4 = h * h * h * h * e4;
  MOMENTS[0] = mean;
  MOMENTS[1] = r2 - mean * mean;
  MOMENTS[2] = r3 - 3 * mean * r2 + 2 * mean * mean * mean;
  MOMENTS[3] = r4 - 4 * mean * r3 + 6 * mean * mean * r2 - 3 * mean * mean * mean * mean;
}
// The level x where the current step rule's sum at spread s is A·q: the Cornish–Fisher expansion of the quantile of
// V + s·Z from its first four cumulants (Cornish & Fisher 1937; Abramowitz & Stegun 26.2.49, from memory; the normal
// part adds no cumulant past the second). The start of anyAboveLevel's Newton steps: over the benchmark spec's levels
// within 1e-5 of log I for most, where the fitted step's own crossing was about 1e-2 off (the step's skew).
function stepLevel(s: number, q: number): number {
  stepMoments();
  const variance = MOMENTS[1] as number;
  const total = s * s + variance;
  const skew = (MOMENTS[2] as number) / (total * Math.sqrt(total));
  const excess = ((MOMENTS[3] as number) - 3 * variance * variance) / (total * total);
  const z = normalUpperQuantile(q);
  const z2 = z * z;
  const y = z + (skew / 6) * (z2 - 1) + (excess / 24) * z * (z2 - 3) - ((skew * skew) / 36) * z * (2 * z2 - 5);
  return (FIT[1] as number) + (MOMENTS[0] as number) + Math.sqrt(total) * y;
}

/**
 * The central moments [mean, variance, third, fourth] of V, the level in binades above the scale of the largest of a
 * profile's nonzero elements at its median draw (P(V > v) = anyOf(above(1, 2^v), n)/A, A its limit far below the
 * scale), as the any-above level search reads them off the remainder rows; null for a law without a fitted step
 * (the constant law). The bound is ignored, as in {@link lawMixtureCrossing}.
 */
export function stepLawMoments(profile: MagnitudeProfile): [number, number, number, number] | null {
  setLawIntegrand(profile, ANY_ABOVE, 1, false);
  if (integrandLaw === CONSTANT || !((STATE[I_COUNT] as number) > 0)) return null;
  fitStepOf((STATE[I_COUNT] as number));
  if (!((FIT[2] as number) > 0)) return null;
  remainderRow();
  stepMoments();
  return [(FIT[1] as number) + (MOMENTS[0] as number), MOMENTS[1] as number, MOMENTS[2] as number, MOMENTS[3] as number];
}

// The interpolated remainders of the current count at node j. A count meets its grid rows for a few sums only (the
// counts of a check's tensors differ), so the grid rows are filled whole when picked (fillRow: once per row and
// process) and each node is combined as it is read, with no check for a missing value.
function remainderAt(j: number): number {
  if (rowCount === 1) return rowValue(row0, ROW_SLOTS[0] as number, j);
  const at = j + REMAINDER_HALF;
  if (at >= 0 && at <= 2 * REMAINDER_HALF) {
    return (
      (ROW_WEIGHTS[0] as number) * (row0[at] as number) +
      (ROW_WEIGHTS[1] as number) * (row1[at] as number) +
      (ROW_WEIGHTS[2] as number) * (row2[at] as number) +
      (ROW_WEIGHTS[3] as number) * (row3[at] as number)
    );
  }
  return (
    (ROW_WEIGHTS[0] as number) * rowValue(row0, ROW_SLOTS[0] as number, j) +
    (ROW_WEIGHTS[1] as number) * rowValue(row1, ROW_SLOTS[1] as number, j) +
    (ROW_WEIGHTS[2] as number) * rowValue(row2, ROW_SLOTS[2] as number, j) +
    (ROW_WEIGHTS[3] as number) * rowValue(row3, ROW_SLOTS[3] as number, j)
  );
}

// terms below this share of the sum end the walk outward and are not refined
const SUM_DIGITS = 1e-13;
// the first level's terms, by node number k (ξ = k/2) from −TERMS_HALF
const TERMS_HALF = Math.ceil(ANY_TABLE / ANY_FIRST_STRIDE) + 1;
const TERMS = new Float64Array(2 * TERMS_HALF + 1);
// the step rule's sum and its derivative in x, of the last stepSum
// Σ_j cosh ξ_j·σ·φ(z_j)·r_j·Δξ + the closed part, z_j = z_c + σ·sinh ξ_j (and with `slope`, the same sum's derivative
// in x: dz_j/dx = 1/s, dφ(z)/dz = −z·φ(z)); fitStep and remainderRow set for the current law.
function stepSum(x: number, s: number, slope: boolean): number {
  const limit = FIT[0] as number;
  const half = FIT[1] as number;
  const width = FIT[2] as number;
  const centre = (x - half) / s;
  const sigma = (MAP_WIDTH * width) / s;
  const spreadWidth = Math.sqrt(s * s + width * width);
  const closed = limit * normalSf((x - half) / spreadWidth);
  let stride = ANY_FIRST_STRIDE;
  let sum = 0;
  let derivative = 0;
  let high = 0;
  let low = 0;
  // outward from the step's centre, each way until two terms in a row are below SUM_DIGITS of the sum past |sinh ξ| = 3
  for (let direction = 1; direction >= -1; direction -= 2) {
    let small = 0;
    for (let k = direction > 0 ? 0 : 1; ; k++) {
      const index = k * stride;
      if (index >= ANY_TABLE) {
        if (direction > 0) high = k - 1;
        else low = -(k - 1);
        break;
      }
      const u = direction > 0 ? (SINH[index] as number) : -(SINH[index] as number);
      const z = centre + sigma * u;
      // far past the step both g and the fitted step are their limits exactly: no weight to take
      const remainder = remainderAt(direction * index);
      const term = remainder === 0 ? 0 : (COSH[index] as number) * normalPdf(z) * remainder;
      TERMS[direction * k + TERMS_HALF] = term;
      sum += term;
      if (slope) derivative -= z * term;
      if (Math.abs(term) * sigma * 0.5 <= SUM_DIGITS * Math.abs(closed + 0.5 * sigma * sum)) {
        if (++small >= 2 && (SINH[index] as number) > 3) {
          if (direction > 0) high = k;
          else low = -k;
          break;
        }
      } else small = 0;
    }
  }
  let step = (stride / ANY_UNIT) * sigma;
  let total = step * sum;
  // the refinements add nodes only between the first level's nodes that carry SUM_DIGITS of the sum
  const floor = (SUM_DIGITS * Math.abs(closed + total)) / step;
  while (low < 0 && !(Math.abs(TERMS[low + TERMS_HALF] as number) > floor)) low++;
  while (high > 0 && !(Math.abs(TERMS[high + TERMS_HALF] as number) > floor)) high--;
  low = Math.max(low - 1, -(ANY_TABLE - 1) / stride);
  high = Math.min(high + 1, (ANY_TABLE - 1) / stride);
  let totalDerivative = step * derivative;
  let lastChange = 1;
  const geometric = (STATE[I_COUNT] as number) >= GEOMETRIC_COUNT && width < GEOMETRIC_WIDTH * s;
  while (stride > 1) {
    let middles = 0;
    let middleDerivative = 0;
    for (let k = low; k < high; k++) {
      const j = k * stride + (stride >> 1);
      const index = j < 0 ? -j : j;
      const z = centre + sigma * (j < 0 ? -(SINH[index] as number) : (SINH[index] as number));
      const remainder = remainderAt(j);
      const term = remainder === 0 ? 0 : (COSH[index] as number) * normalPdf(z) * remainder;
      middles += term;
      if (slope) middleDerivative -= z * term;
    }
    const refined = 0.5 * total + 0.5 * step * middles;
    totalDerivative = 0.5 * totalDerivative + 0.5 * step * middleDerivative;
    const change = Math.abs(refined - total) / Math.abs(closed + refined);
    total = refined;
    stride >>= 1;
    step *= 0.5;
    low *= 2;
    high *= 2;
    // converging geometrically (each change about the square of the one before, in relative terms), the last sum is
    // good to about the square of its change
    if (change <= ANY_TOLERANCE || (geometric && change <= ANY_GEOMETRIC && change <= lastChange * Math.sqrt(lastChange))) break;
    lastChange = change;
  }
  if (slope) FIT[3] = totalDerivative / s - (limit * normalPdf((x - half) / spreadWidth)) / spreadWidth;
  return closed + total;
}

// The uniform law: g = 0 where a = 2^v ≥ √3, i.e. for z below z_k = (x − log2 √3)/s; above it g is smooth, so the
// sum runs over w = z − z_k > 0 with w = τ·exp(ξ − e^{−ξ}) (double-exponential decay at the kink, the exp-sinh rule
// of Takahasi & Mori 1974, from memory), τ the scale on which g rises or φ falls, halving the step as above.
function uniformAnyAbove(x: number, s: number, limit: number): number {
  const kink = (x - Math.log2(SQRT3)) / s;
  const rise = (STATE[I_COUNT] as number) * (STATE[I_SHARE] as number) * s * LN2;
  const tau = Math.min(1, 1 / Math.max(1, kink), rise > 0 ? 1 / rise : 1);
  // the walk starts where w reaches the draws' centre when the kink lies below it
  const origin = kink < 0 ? Math.log(1 - kink / tau) : 0;
  let stride = 0.5;
  let sum = uniformTerm(origin, x, s, kink, tau);
  let high = 0;
  let low = 0;
  for (let direction = 1; direction >= -1; direction -= 2) {
    let small = 0;
    for (let k = 1; k < 400; k++) {
      const t = uniformTerm(origin + direction * k * stride, x, s, kink, tau);
      sum += t;
      if (k === 399 || (Math.abs(t) <= 1e-17 * Math.abs(sum) && ++small >= 2 && (direction < 0 || (k > 4 && kink + tau * Math.exp(origin + k * stride) > 0)))) {
        if (direction > 0) high = k;
        else low = -k;
        break;
      }
      if (Math.abs(t) > 1e-17 * Math.abs(sum)) small = 0;
    }
  }
  let total = stride * sum;
  for (let level = 1; level < 6; level++) {
    let middles = 0;
    for (let k = low; k < high; k++) middles += uniformTerm(origin + (k + 0.5) * stride, x, s, kink, tau);
    const refined = 0.5 * total + 0.5 * stride * middles;
    const change = Math.abs(refined - total);
    total = refined;
    stride *= 0.5;
    low *= 2;
    high *= 2;
    if (change <= ANY_TOLERANCE * Math.abs(total)) break;
  }
  return Math.min(limit, Math.max(0, total));
}
function uniformTerm(xi: number, x: number, s: number, kink: number, tau: number): number {
  const decay = Math.exp(-xi);
  const w = tau * Math.exp(xi - decay);
  const z = kink + w;
  return w * (1 + decay) * normalPdf(z) * anyAtCount(x - s * z, (STATE[I_COUNT] as number));
}

// Which rule sums the current any-above integrand at spread s: STEP_RULE (fitStep and remainderRow then set),
// DRAW_RULE (drawSum), or the closed form of the constant law (CLOSED_RULE).
const STEP_RULE = 0;
const DRAW_RULE = 1;
const CLOSED_RULE = 2;
const UNIFORM_RULE = 3;
function anyRule(s: number): number {
  if (integrandLaw === CONSTANT) {
    // no step to fit: the limit is every element's own, set here for each caller (a stale fit's limit was read before)
    FIT[0] = anyOf((STATE[I_SHARE] as number), (STATE[I_COUNT] as number));
    FIT[1] = 0;
    FIT[2] = 0;
    return CLOSED_RULE;
  }
  const slot = countSlot();
  if (COUNTS_FIT[3 * slot] === COUNTS_FIT[3 * slot]) {
    FIT[0] = COUNTS_FIT[3 * slot] as number;
    FIT[1] = COUNTS_FIT[3 * slot + 1] as number;
    FIT[2] = COUNTS_FIT[3 * slot + 2] as number;
  } else {
    fitStepOf(STATE[I_COUNT] as number);
    COUNTS_FIT[3 * slot] = FIT[0] as number;
    COUNTS_FIT[3 * slot + 1] = FIT[1] as number;
    COUNTS_FIT[3 * slot + 2] = FIT[2] as number;
  }
  if (integrandLaw === UNIFORM) return UNIFORM_RULE;
  const width = FIT[2] as number;
  if (!(width > 0) || !(width < STEP_WIDTH_LIMIT * s)) return DRAW_RULE;
  remainderRow();
  return STEP_RULE;
}

// I(x) of the current any-above integrand at spread s > 0 (x = log2(t/rms), finite), by its rule.
function anyAboveSum(x: number, s: number, rule: number): number {
  const limit = FIT[0] as number;
  if (!(limit > 0)) return 0;
  switch (rule) {
    case CLOSED_RULE:
      // every element equals the drawn scale: the event is z ≥ x/s
      return limit * normalSf(x / s);
    case UNIFORM_RULE:
      // the kink far below the draws carries no weight, and g is smooth where they are
      return (x - Math.log2(SQRT3)) / s > -9 ? uniformAnyAbove(x, s, limit) : drawAt(x, s);
    case STEP_RULE:
      return Math.min(limit, Math.max(0, stepSum(x, s, false)));
    default:
      return drawAt(x, s);
  }
}
// the draw rule's sum at rms 1, t = 2^x
function drawAt(x: number, s: number): number {
  STATE[I_T] = exp2(x);
  return drawSum(1, s);
}

// a gap in log I from which anyAboveLevel's last Newton step needs no confirming sum
const NEWTON_FINISH = 1e-5;
// The level x where the any-above sum at spread s equals p (0 < p < A), on the sum itself so that the two agree:
// Newton steps on log I from the fitted step's own crossing (the step rule gives I's derivative with its sum; the
// other rules take secant steps, the first with the fitted step's slope), safeguarded by the bracket the signs give
// (I falls as x grows), until the sum at the level is p to 1e-9 relative (or a last Newton step from within
// NEWTON_FINISH lands there).
function anyAboveLevel(s: number, p: number): number {
  const rule = anyRule(s);
  const limit = FIT[0] as number;
  const width = Math.sqrt(s * s + (FIT[2] as number) * (FIT[2] as number));
  let x = rule === STEP_RULE ? stepLevel(s, p / limit) : NaN;
  if (!Number.isFinite(x)) x = (FIT[1] as number) + width * roughUpperQuantile(p / limit);
  const target = Math.log(p);
  let low = -Infinity;
  let high = Infinity;
  let previousX = NaN;
  let previousGap = NaN;
  for (let iteration = 0; iteration < 100; iteration++) {
    const value = rule === STEP_RULE ? Math.min(limit, stepSum(x, s, true)) : anyAboveSum(x, s, rule);
    const gap = value > 0 ? Math.log(value) - target : -Infinity;
    if (Math.abs(gap) <= 1e-9) return x;
    if (gap > 0) low = x;
    else high = x;
    let slope: number;
    if (rule === STEP_RULE && value > 0) {
      slope = (FIT[3] as number) / value;
      // with the exact slope, Newton's step from a gap this small lands within about gap²/2 of log p (the curvature of
      // log I is about its slope squared here): no sum is needed to confirm it
      if (Math.abs(gap) <= NEWTON_FINISH && slope < 0) return x - gap / slope;
    } else if (Number.isFinite(previousGap) && Number.isFinite(gap) && previousGap !== gap) slope = (gap - previousGap) / (x - previousX);
    else {
      // the fitted step's slope of log I: −φ(y)/(Q(y)·width) at y = (x − v½)/width
      const y = (x - (FIT[1] as number)) / width;
      const tail = normalSf(y);
      slope = tail > 0 ? -normalPdf(y) / (tail * width) : -y / width;
    }
    let next = Number.isFinite(gap) && slope < 0 ? x - gap / slope : NaN;
    if (!(next > low && next < high)) {
      if (Number.isFinite(low) && Number.isFinite(high)) next = 0.5 * (low + high);
      else next = Number.isFinite(low) ? low + width : high - width;
    }
    if (Math.abs(next - x) <= 4e-16 * Math.max(1, Math.abs(x))) return next;
    previousX = x;
    previousGap = gap;
    x = next;
  }
  return x;
}

// Tables of the Gaussian any-above levels. The level where the any-above sum is p depends on the law's positive share,
// p, the element count n and the spread s alone, smoothly in ln n and s (the largest element's level moves as about
// √(2 ln n), the draws widen it with s). For each (share, p) a check meets, points at counts e^{k/8} (the remainder rows'
// own grid) and spreads a/16 hold anyAboveLevel's level, filled lazily once per process, and a level at (n, s) is the
// Lagrange polynomial through the 6 nearest counts in ln n on each of the 8 nearest spreads, then through those in the
// spread (Abramowitz & Stegun 25.2.15). A table of a mathematical function of (share, p): its values never depend on
// what the process computed before. test/risk/share-tables.test.ts holds it to anyAboveLevel itself.
const LEVEL_MIN_SPREAD = 0.5;
const LEVEL_TABLES = new Map<number, (Window | undefined)[]>();
const N_WEIGHTS = new Float64Array(TABLE_POINTS);
/**
 * Whether {@link lawMixtureCrossing} reads both Gaussian levels of a profile (the any-above level and the level below)
 * off their tables: a Gaussian law (or half-Gaussian, or bounded: the bound is applied after), at least GRID_COUNT
 * nonzero elements, a spread within both tables. Then the levels cost a few table reads, less than a memo of them.
 */
export function gaussianLevelsTabled(profile: MagnitudeProfile): boolean {
  const shape = profile.shape;
  const spread = profile.log2Spread;
  return (
    (shape === "gaussian" || shape === "half-gaussian" || shape === "bounded") &&
    nonzeroElements(profile) >= GRID_COUNT &&
    spread >= LEVEL_MIN_SPREAD &&
    spread >= LOW_MIN_SPREAD &&
    spread <= TABLE_MAX_SPREAD &&
    spread <= LOW_MAX_SPREAD
  );
}

// the last table's key and rows (the calls of one check ask for one or two levels p), and the count whose weights in
// ln n N_WEIGHTS hold, with its first count point (the counts of a check's tensors mostly differ: its start and end
// profiles, and its formats, share one)
const LAST_LEVEL_KEY = new Float64Array(1).fill(NaN);
let lastLevelRows: (Window | undefined)[] = [];
const N_WEIGHTS_OF = new Float64Array(2).fill(NaN);
function levelTableValue(spread: number, p: number): number {
  const share = STATE[I_SHARE] as number;
  const count = STATE[I_COUNT] as number;
  const key = share === 1 ? p : -p;
  let rows = lastLevelRows;
  if (key !== LAST_LEVEL_KEY[0]) {
    let found = LEVEL_TABLES.get(key);
    if (found === undefined) {
      found = [];
      LEVEL_TABLES.set(key, found);
    }
    rows = found;
    lastLevelRows = found;
    LAST_LEVEL_KEY[0] = key;
  }
  const v = spread / ROW_STEP;
  const firstRow = Math.floor(v) - (SPREAD_POINTS >> 1) + 1;
  if (count !== N_WEIGHTS_OF[0]) {
    const u = Math.log(count) * GRID_PER_LN;
    // every caller has count ≥ GRID_COUNT (lawMixtureCrossing tests it, gaussianLevelFactors takes only the profiles
    // gaussianLevelsTabled admits): u ≥ ln 64·8 ≈ 33.3, so the first count point is 31 or above
    const first = Math.floor(u) - (TABLE_POINTS >> 1) + 1;
    lagrangeWeights(N_WEIGHTS, X_SCALE, u - first);
    N_WEIGHTS_OF[0] = count;
    N_WEIGHTS_OF[1] = first;
  }
  const first = N_WEIGHTS_OF[1] as number;
  const s = v - firstRow;
  if (s !== S_WEIGHTS_AT[0]) {
    lagrangeWeights(S_WEIGHTS, S_SCALE, s);
    S_WEIGHTS_AT[0] = s;
  }
  let result = 0;
  for (let r = 0; r < SPREAD_POINTS; r++) {
    const a = firstRow + r;
    const row = rowWindow(rows, a, first, first + TABLE_POINTS - 1);
    const values = row.values;
    const at = first - row.base;
    const l0 = values[at] as number;
    const l1 = values[at + 1] as number;
    const l2 = values[at + 2] as number;
    const l3 = values[at + 3] as number;
    const l4 = values[at + 4] as number;
    const l5 = values[at + 5] as number;
    let sum = 0;
    // a row's six levels summed in the weights' order, as the loop of levelRowSum does (the same value); a row with a
    // level not yet computed (NaN) takes that loop, which fills it
    const all = l0 + l1 + l2 + l3 + l4 + l5;
    if (all !== all) sum = levelRowSum(row, a, first, count, p);
    else {
      sum += (N_WEIGHTS[0] as number) * l0;
      sum += (N_WEIGHTS[1] as number) * l1;
      sum += (N_WEIGHTS[2] as number) * l2;
      sum += (N_WEIGHTS[3] as number) * l3;
      sum += (N_WEIGHTS[4] as number) * l4;
      sum += (N_WEIGHTS[5] as number) * l5;
    }
    result += (S_WEIGHTS[r] as number) * sum;
  }
  return result;
}
// row a's sum of levelTableValue at the count's points from `first`, filling the levels not yet computed
function levelRowSum(row: Window, a: number, first: number, count: number, p: number): number {
  const at = first - row.base;
  let sum = 0;
  for (let k = 0; k < TABLE_POINTS; k++) {
    let level = row.values[at + k] as number;
    if (level !== level) {
      STATE[I_COUNT] = Math.exp((first + k) / GRID_PER_LN);
      row.values[at + k] = anyAboveLevel(a * ROW_STEP, p);
      STATE[I_COUNT] = count;
      // read back from the table: a level taken from the call's return value made the compiler keep every level of
      // the loop as a heap number (~900 bytes of garbage a look-up, 3.5 MB a fresh 1,000-layer check)
      level = row.values[at + k] as number;
    }
    sum += (N_WEIGHTS[k] as number) * level;
  }
  return sum;
}

// Tables of the Gaussian "below" levels (the predicted low magnitude): the level where the share below is p depends on
// p and the spread alone, and the share read off the rows is smooth in both, so its crossing is too (the lattice search
// crosses the log-linear interpolant between lattice points spread/8 apart instead: up to 3e-4 binade off the crossing
// at spread 8, 1e-5 at 2, measured). For each p a check meets, points at the spreads a/16 hold the crossing of the
// rows' share, found by bisection to 1e-12 binade, filled lazily once per process, and a level at s is the Lagrange
// polynomial through the 8 nearest (Abramowitz & Stegun 25.2.15). A table of a mathematical function of p.
// test/risk/share-tables.test.ts holds the levels to the crossing of a fine quadrature of the integral.
const LOW_MIN_SPREAD = 0.5;
// (its 8 rows of crossings then lie within the shares' rows)
const LOW_MAX_SPREAD = TABLE_MAX_SPREAD - 0.5;
const LOW_TABLES = new Map<number, Window>();
const LOW_WEIGHTS = new Float64Array(SPREAD_POINTS);
// the weights LOW_WEIGHTS were last taken at (NaN: never), and the last p's window (one or two p a check)
const LOW_WEIGHTS_AT = new Float64Array(1).fill(NaN);
const LAST_LOW_P = new Float64Array(1).fill(NaN);
let lastLowRow: Window = emptyWindow();
function lowTableValue(spread: number, p: number): number {
  let row = lastLowRow;
  if (p !== LAST_LOW_P[0]) {
    let found = LOW_TABLES.get(p);
    if (found === undefined) {
      found = emptyWindow();
      LOW_TABLES.set(p, found);
    }
    row = found;
    lastLowRow = found;
    LAST_LOW_P[0] = p;
  }
  const v = spread / ROW_STEP;
  const firstRow = Math.floor(v) - (SPREAD_POINTS >> 1) + 1;
  if (!(firstRow >= row.base && firstRow + SPREAD_POINTS - 1 < row.base + row.values.length)) coverWindow(row, firstRow, firstRow + SPREAD_POINTS - 1);
  const at = firstRow - row.base;
  for (let r = 0; r < SPREAD_POINTS; r++) {
    if (row.values[at + r] !== row.values[at + r]) row.values[at + r] = rowCrossing((firstRow + r) * ROW_STEP, p);
  }
  // a profile's statistics read its level above at the same spread just before: the same weights
  if (v - firstRow !== LOW_WEIGHTS_AT[0]) {
    lagrangeWeights(LOW_WEIGHTS, S_SCALE, v - firstRow);
    LOW_WEIGHTS_AT[0] = v - firstRow;
  }
  let result = 0;
  for (let r = 0; r < SPREAD_POINTS; r++) result += (LOW_WEIGHTS[r] as number) * (row.values[at + r] as number);
  return result;
}
// the x where the rows' share below at spread s is p (NaN where the rows do not serve the bracket): bracketed by steps
// of a binade from the share's linear start (as lawMixtureCrossing starts), then bisected
function rowCrossing(s: number, p: number): number {
  const share = (x: number): number => gaussianTableValue(BELOW, s, x);
  let lo = Math.log2(p / Math.sqrt(2 / Math.PI)) - (s * s * LN2) / 2;
  let hi = lo;
  let value = share(lo);
  if (!(value === value)) return NaN;
  if (value < p) {
    for (let jump = 1; ; jump *= 2) {
      hi = lo + jump;
      value = share(hi);
      if (!(value === value) || jump > 1024) return NaN;
      if (value >= p) break;
      lo = hi;
    }
  } else {
    for (let jump = 1; ; jump *= 2) {
      lo = hi - jump;
      value = share(lo);
      if (!(value === value) || jump > 1024) return NaN;
      if (value < p) break;
      hi = lo;
    }
  }
  for (let i = 0; i < 100 && hi - lo > 1e-12; i++) {
    const middle = 0.5 * (lo + hi);
    if (share(middle) >= p) hi = middle;
    else lo = middle;
  }
  return 0.5 * (lo + hi);
}
