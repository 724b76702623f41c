/**
 * The law of a gradient behind a smooth activation as a Gaussian scale mixture: δ·φ'(x) with δ ~ N(0, s²) independent
 * of the pre-activation x ~ N(0, q) is, given x, N(0, s²·φ'(x)²), so its magnitude law is a mixture of Gaussian laws
 * over the law of |φ'(x)| (the gradient independence of Schoenholz et al. 2017, as the backward rule takes it). Where
 * φ' crosses zero (GELU near x = −0.75, SiLU near −1.28; their definitions, Hendrycks & Gimpel 2016, Elfwing et al.
 * 2018) or fades in a saturated tail (tanh, sigmoid, softplus: their derivatives vanish as |x| or −x grows), |φ'(x)|
 * has mass near 0 that a Gaussian of the same rms does not have.
 */
import type { ActivationName } from "../spec/types.js";
import { activationFunction } from "./activations.js";
import { erf, erfc, normalCdf } from "./normal.js";

/**
 * The activations whose derivative has a scale mixture here: the smooth ones, whose derivative is not constant. Their
 * flushed share differs from a Gaussian's of the same rms by 1.0–1.5x at q = 0.25 but 2.6–140x at q = 4 (tanh most,
 * then softplus and sigmoid; a seeded Monte Carlo of δ·φ'(x), test/risk/derivative-mixture.test.ts). The magnitude
 * engine makes it for each of them (src/ops/activation/analytic.ts), and for a leaky ReLU, whose derivative takes two
 * values (exactly two components)
 */
export type MixtureActivation = Extract<ActivationName, "gelu" | "silu" | "tanh" | "sigmoid" | "softplus" | "leaky-relu">;

/**
 * A Gaussian scale mixture with the rms 1: component i holds the share `weights[i]` of the elements, Gaussian with the
 * rms `scales[i]`, so Σ wᵢ·cᵢ² = 1. `key` is a number no other mixture made in this process has (ids are never
 * reused), for the risk module's tables; `density` is Σ wᵢ/cᵢ (the density at 0 over a Gaussian's) and `fourth`
 * Σ wᵢ·cᵢ⁴ (E[x⁴] = 3·fourth). The scales fall with i; `restWeight[i]` is Σ_{j ≥ i} wⱼ and `restEnergy[i]` Σ_{j ≥ i} wⱼcⱼ²
 * (the share and the energy of the components from i on, which a threshold far above them holds whole).
 * `prefix[i·PREFIX_POWERS + k]` is Σ_{j < i} wⱼ·(c_{i−1}/cⱼ)^k for k < PREFIX_POWERS (0 at i = 0): a threshold far under
 * the scales of the first i components meets them through a power series in its ratio to c_{i−1}, whose coefficients
 * these sums are (each ratio at most 1, so they neither overflow nor lose the smallest scales).
 */
export interface ScaleMixture {
  readonly key: number;
  readonly weights: Float64Array;
  readonly scales: Float64Array;
  readonly restWeight: Float64Array;
  readonly restEnergy: Float64Array;
  readonly prefix: Float64Array;
  readonly density: number;
  readonly fourth: number;
}

/** The powers k = 0 … PREFIX_POWERS − 1 that {@link ScaleMixture}'s `prefix` holds per component count. */
export const PREFIX_POWERS = 28;

// Bins of |φ'| half a binade wide: a log-uniform spread of scales over a bin of 2^h, told as one Gaussian at the bin's
// geometric centre, shifts P(|x| ≤ t) for t far under the scale by E[1/c]·√(2^h) − 1 = 0.5% (own algebra), and the
// rms normalisation below moves it by ~1% more: the mixture's flushed shares of δ·GELU'(x) and δ·SiLU'(x) lie within
// 4% of a seeded Monte Carlo from 1e-5 to 0.5 (test/numeric/derivative-mixture.test.ts)
const BIN = 0.5;
// the two binades under the largest |φ'| in bins of an eighth: a tail far above the rms is carried by them
const FINE = 1 / 8;
const FINE_REACH = 2;
// bins down to 2^−28 of the largest |φ'|; below it one component: mass there is about 2^−28 of the whole (|φ'| is
// linear near a simple zero), under every share a finding reads (1e-8)
const FLOOR = -28;
// mass of |φ'| below a bin's edge under which the bins stop (the findings' sentences floor shares at 1e-8)
const MASS_FLOOR = 1e-9;
// the grid that splits x into pieces on which φ' is monotone: ±12 standard deviations (mass beyond: 4e-33)
const GRID = 2400;
const REACH = 12;

/**
 * The scale mixture of δ·φ'(x) for x ~ N(0, q) (q > 0), normalised to rms 1: the weights are the exact masses of x where
 * |φ'(x)| falls in each bin (the bins' edges solved on each piece where φ' is monotone by bisection), each bin one
 * Gaussian at its geometric centre; the scales are then scaled together so that Σ wᵢcᵢ² = 1.
 */
export function derivativeMixture(name: MixtureActivation, q: number, slope?: number): ScaleMixture {
  const slot = name === "leaky-relu" ? `${name}:${slope}` : `${name}:${q}`;
  const known = MEMO.get(slot);
  if (known !== undefined) return known;
  const made = name === "leaky-relu" ? leakyMixture(slope ?? 0) : makeMixture(activationFunction(name).df, q);
  if (MEMO.size >= MEMO_LIMIT) MEMO.clear();
  MEMO.set(slot, made);
  return made;
}
/**
 * A leaky ReLU's derivative is 1 on the positive half of a zero-mean x and the slope on the other (its definition), so
 * δ·φ'(x) is exactly two Gaussians of scales 1 and |slope| with half the elements each, whatever q.
 */
function leakyMixture(slope: number): ScaleMixture {
  const a = Math.abs(slope);
  return a > 1 ? fromComponents([0.5, 0.5], [a, 1]) : fromComponents([0.5, 0.5], [1, a]);
}
const MEMO = new Map<string, ScaleMixture>();
const MEMO_LIMIT = 4096;
let nextKey = 1;

/** The scale mixture over |f(√q·z)|, z ~ N(0, 1), of a piecewise monotone f (a derivative here; src/numeric/gated-mixture.ts also a value). */
export function makeMixture(df: (x: number) => number, q: number): ScaleMixture {
  const root = Math.sqrt(q);
  const z = new Float64Array(GRID + 1);
  const d = new Float64Array(GRID + 1);
  let top = 0;
  for (let i = 0; i <= GRID; i++) {
    z[i] = -REACH + (2 * REACH * i) / GRID;
    d[i] = df(root * (z[i] as number));
    top = Math.max(top, Math.abs(d[i] as number));
  }
  // piece ends: the grid points where the differences change sign (an extremum lies within one step of them)
  const cuts = [0];
  for (let i = 1; i < GRID; i++) if (((d[i] as number) - (d[i - 1] as number)) * ((d[i + 1] as number) - (d[i] as number)) < 0) cuts.push(i);
  cuts.push(GRID);
  // z where φ'(√q·z) = level on the monotone piece [u, v], clamped to its ends: the grid step that holds it by bisection on
  // the grid's values, then the Illinois variant of false position inside that step (superlinear for a smooth φ'; Dowell
  // & Jarratt 1971), to 1e-14 in z
  const crossing = (u: number, v: number, level: number): number => {
    const du = d[u] as number;
    const dv = d[v] as number;
    const rising = dv > du;
    if (rising ? level <= du : level >= du) return z[u] as number;
    if (rising ? level >= dv : level <= dv) return z[v] as number;
    let lo = u;
    let hi = v;
    while (hi - lo > 1) {
      const mid = (lo + hi) >> 1;
      if ((d[mid] as number) < level === rising) lo = mid;
      else hi = mid;
    }
    let a = z[lo] as number;
    let b = z[hi] as number;
    let fa = (d[lo] as number) - level;
    let fb = (d[hi] as number) - level;
    for (let k = 0; k < 60 && fb !== 0; k++) {
      const c = fb === fa ? 0.5 * (a + b) : (a * fb - b * fa) / (fb - fa);
      if (Math.abs(c - b) <= 1e-14) return c;
      const fc = df(root * c) - level;
      if (fc * fb < 0) {
        a = b;
        fa = fb;
      } else fa /= 2;
      b = c;
      fb = fc;
    }
    return b;
  };
  // P(|φ'(x)| ≤ level): the masses of the pieces' sub-intervals where −level ≤ φ' ≤ level
  const massBelow = (level: number): number => {
    let total = 0;
    for (let p = 0; p + 1 < cuts.length; p++) {
      const u = cuts[p] as number;
      const v = cuts[p + 1] as number;
      const z1 = crossing(u, v, -level);
      const z2 = crossing(u, v, level);
      const lo = p === 0 && Math.abs(d[0] as number) <= level ? -Infinity : Math.min(z1, z2);
      const hi = p === cuts.length - 2 && Math.abs(d[GRID] as number) <= level ? Infinity : Math.max(z1, z2);
      total += (hi === Infinity ? 1 : normalCdf(hi)) - (lo === -Infinity ? 0 : normalCdf(lo));
    }
    return Math.min(1, Math.max(0, total));
  };
  // the top binades finer: the largest scales carry the tail (a tanh' piled up just under its maximum 1)
  const edges = [top];
  const high = Math.log2(top);
  for (let e = Math.ceil(high / FINE) * FINE - FINE; e > high - FINE_REACH; e -= FINE) edges.push(2 ** e);
  for (let e = Math.ceil((high - FINE_REACH) / BIN) * BIN; e > FLOOR + high; e -= BIN) if (2 ** e < (edges[edges.length - 1] as number)) edges.push(2 ** e);
  const weights: number[] = [];
  const scales: number[] = [];
  let above = 1;
  for (let k = 1; k <= edges.length; k++) {
    const low = k < edges.length ? (edges[k] as number) : 0;
    const below = k < edges.length ? massBelow(low) : 0;
    // the mass left below this bin is under every share a finding reads: it joins the bin, the last one
    const last = below < MASS_FLOOR;
    const w = last ? above : above - below;
    above = below;
    if (w > 0) {
      weights.push(w);
      scales.push(low > 0 ? Math.sqrt(low * (edges[k - 1] as number)) : (edges[k - 1] as number) / 2);
    }
    if (last) break;
  }
  return fromComponents(weights, scales);
}

// the mixture of components with these weights and falling scales, normalised to total weight 1 and rms 1
export function fromComponents(weights: readonly number[], scales: readonly number[]): ScaleMixture {
  let total = 0;
  let second = 0;
  for (let i = 0; i < weights.length; i++) {
    total += weights[i] as number;
    second += (weights[i] as number) * (scales[i] as number) ** 2;
  }
  const norm = 1 / Math.sqrt(second / total);
  const w = new Float64Array(weights.length);
  const c = new Float64Array(weights.length);
  let density = 0;
  let fourth = 0;
  for (let i = 0; i < weights.length; i++) {
    w[i] = (weights[i] as number) / total;
    c[i] = (scales[i] as number) * norm;
    density += (w[i] as number) / (c[i] as number);
    fourth += (w[i] as number) * (c[i] as number) ** 4;
  }
  const restWeight = new Float64Array(w.length + 1);
  const restEnergy = new Float64Array(w.length + 1);
  for (let i = w.length - 1; i >= 0; i--) {
    restWeight[i] = (restWeight[i + 1] as number) + (w[i] as number);
    restEnergy[i] = (restEnergy[i + 1] as number) + (w[i] as number) * (c[i] as number) ** 2;
  }
  // from i to i + 1 components the reference scale moves from c_{i−1} to cᵢ: each sum's terms shrink by (cᵢ/c_{i−1})^k
  const prefix = new Float64Array((w.length + 1) * PREFIX_POWERS);
  for (let i = 0; i < w.length; i++) {
    const ratio = i === 0 ? 0 : (c[i] as number) / (c[i - 1] as number);
    let power = 1;
    for (let k = 0; k < PREFIX_POWERS; k++) {
      prefix[(i + 1) * PREFIX_POWERS + k] = power * (prefix[i * PREFIX_POWERS + k] as number) + (w[i] as number);
      power *= ratio;
    }
  }
  return { key: nextKey++, weights: w, scales: c, restWeight, restEnergy, prefix, density, fourth };
}

/** P(|x| ≤ a) for one element of a scale mixture of rms 1: Σ wᵢ·erf(a/(cᵢ√2)) (each component a Gaussian). */
export function mixtureShareBelow(m: ScaleMixture, a: number): number {
  if (!(a > 0)) return 0;
  let sum = 0;
  for (let i = 0; i < m.weights.length; i++) sum += (m.weights[i] as number) * erf(a / ((m.scales[i] as number) * Math.SQRT2));
  return Math.min(1, sum);
}

/**
 * How many leading components of a scale mixture have t/(r·cᵢ·√2) under `limit` (computed so, as the plain sums compute
 * their erf's argument): the scales fall, so the ratio rises along the components, and a binary search finds the end.
 */
export function prefixCount(m: ScaleMixture, r: number, t: number, limit: number): number {
  const c = m.scales;
  // a threshold in the tail is past the widest component already: no search
  if (!(t / (r * (c[0] as number) * Math.SQRT2) < limit)) return 0;
  let lo = 1;
  let hi = c.length;
  while (lo < hi) {
    const mid = (lo + hi) >> 1;
    if (t / (r * (c[mid] as number) * Math.SQRT2) < limit) lo = mid + 1;
    else hi = mid;
  }
  return lo;
}

// erf(y) = (2/√π)·Σ (−1)^k·y^{2k+1}/(k!·(2k+1)) (Abramowitz & Stegun 7.1.5). Below y = 1/2 the terms fall by more than
// a factor 4 each, and the first one left out after ERF_TERMS is under y^24/(12!·25) < 6e-18 of the first: the sum is
// erf to rounding.
const ERF_TERMS = 12;
const ERF_SERIES = (() => {
  const coefficients = new Float64Array(ERF_TERMS);
  let factor = 2 / Math.sqrt(Math.PI);
  for (let k = 0; k < ERF_TERMS; k++) {
    coefficients[k] = factor / (2 * k + 1);
    factor *= -1 / (k + 1);
  }
  return coefficients;
})();

/**
 * Σ_{j < p} wⱼ·erf(y·c_{p−1}/cⱼ) for 0 ≤ y < 1/2 (y the argument at the p-th component, whose scale is the smallest of
 * them): the erf series of each component summed term by term, Σ_k aₖ·y^{2k+1}·Σ_j wⱼ(c_{p−1}/cⱼ)^{2k+1}, from the
 * mixture's prefix sums. Each (c_{p−1}/cⱼ)^{2k+1} ≤ c_{p−1}/cⱼ, so the bound on the terms left out holds for the sum.
 */
export function prefixErf(m: ScaleMixture, p: number, y: number): number {
  const sums = m.prefix;
  const at = p * PREFIX_POWERS;
  const y2 = y * y;
  let sum = (ERF_SERIES[ERF_TERMS - 1] as number) * (sums[at + 2 * ERF_TERMS - 1] as number);
  for (let k = ERF_TERMS - 2; k >= 0; k--) sum = sum * y2 + (ERF_SERIES[k] as number) * (sums[at + 2 * k + 1] as number);
  return sum * y;
}

/**
 * P(|x| > a) for one element of a scale mixture of rms 1: Σ wᵢ·erfc(a/(cᵢ√2)). The widest components, whose argument is
 * under 1/2, give their share less their erf series (prefixErf; no cancellation: erfc > 0.47 there); the rest one by
 * one. The scales fall along the components, so their tails fall too: the sum stops once the weight left times the
 * last tail is under 1e-16 of it, or past a/cᵢ = 40, where a component's tail is under the smallest double.
 */
export function mixtureShareAbove(m: ScaleMixture, a: number): number {
  if (!(a > 0)) return 1;
  const w = m.weights;
  const c = m.scales;
  const p = prefixCount(m, 1, a, 0.5);
  let sum = p > 0 ? (m.prefix[p * PREFIX_POWERS] as number) - prefixErf(m, p, a / ((c[p - 1] as number) * Math.SQRT2)) : 0;
  for (let i = p; i < w.length && a < 40 * (c[i] as number); i++) {
    const tail = erfc(a / ((c[i] as number) * Math.SQRT2));
    sum += (w[i] as number) * tail;
    if ((m.restWeight[i + 1] as number) * tail <= 1e-16 * sum) break;
  }
  return sum;
}

/** The a with P(|x| ≤ a) = p (0 < p < 1) for a scale mixture of rms 1, by bisection on log2 a. */
export function mixtureQuantile(m: ScaleMixture, p: number): number {
  let lo = -80;
  let hi = 8;
  for (let k = 0; k < 80; k++) {
    const mid = 0.5 * (lo + hi);
    if (mixtureShareBelow(m, 2 ** mid) < p) lo = mid;
    else hi = mid;
  }
  return 2 ** (0.5 * (lo + hi));
}
