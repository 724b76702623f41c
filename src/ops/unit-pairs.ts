/**
 * The finite-width spread of a map whose units each sum many terms (a convolution's channel: the same weights at every
 * pixel of every sample), from the pairs of those terms (UnitPairs in ./types.ts).
 */
import { activationFunction } from "../numeric/activations.js";
import { pairCovariance, pairCovarianceAt } from "../numeric/pair-covariance.js";
import type { ActivationName } from "../spec/types.js";
import type { PairClass, UnitPairs } from "./types.js";

/**
 * The pairs of T = batch × positions terms, one sample's pairs (1/batch − 1/T of the T² ordered pairs) and two samples'
 * (1 − 1/batch), each class with its cosines' mean and standard deviation.
 */
export function unitPairs(batch: number, positions: number, same: Omit<PairClass, "share">, other: Omit<PairClass, "share">): UnitPairs {
  const b = Math.max(batch, 1);
  const single = 1 / (b * Math.max(positions, 1));
  return { single, same: { share: 1 / b - single, ...same }, other: { share: 1 - 1 / b, ...other } };
}

/** E[g(c)] over a class's cosines, at mean ± standard deviation (exact for g quadratic in c; cosines kept in [−1, 1]). */
export function classAverage(pairs: PairClass, g: (c: number) => number): number {
  const up = Math.min(pairs.mean + pairs.deviation, 1);
  const down = Math.max(pairs.mean - pairs.deviation, -1);
  return 0.5 * (g(up) + g(down));
}

/**
 * Var/E² of one unit's sum over its terms: (1/T)·g(1) + Σ over the pairs of t ≠ t' of g(c_tt') (own algebra: the
 * variance of a sum, Cov(f(u_t), f(u_t')) = E[f]²·g(c_tt') for the terms' jointly Gaussian u = w·p, UnitPairs).
 */
export function unitKappaOf(unit: UnitPairs, g: (c: number) => number, diagonal: number): number {
  return unit.single * diagonal + unit.same.share * classAverage(unit.same, g) + unit.other.share * classAverage(unit.other, g);
}

/** g(c) = Cov(u², v²)/E[u²]² = 2c² for a linear map's squares (Isserlis' theorem). */
export const linearPairs = (c: number): number => 2 * c * c;

/** a unit's Var/E² for a linear map's squares: 2·D with D = 1/T + (1 − 1/T)·E[c²] of the dense layer's batch spread */
export function linearUnitKappa(unit: UnitPairs): number {
  return Math.min(unitKappaOf(unit, linearPairs, 2), 2);
}

const seriesCache = new Map<string, number[]>();

/**
 * g(c) of φ(u)² (`derivative` false) or φ'(u)² (true) for u of variance q, as pairCovariance's series (Mehler 1866),
 * memoised: a convolutional network has a few activation layers
 */
export function activationPairs(name: ActivationName, slope: number, q: number, derivative: boolean): (c: number) => number {
  const key = `${name}|${slope}|${q}|${derivative ? 1 : 0}`;
  let b = seriesCache.get(key);
  if (b === undefined) {
    const { f, df } = activationFunction(name, slope);
    b = pairCovariance(derivative ? (x) => df(x) * df(x) : (x) => f(x) * f(x), q);
    if (seriesCache.size > 256) seriesCache.clear();
    seriesCache.set(key, b);
  }
  const series = b;
  return (c) => pairCovarianceAt(series, c);
}

/**
 * The κ a pointwise activation puts in place of the map's before it (Signal.fresh): one term's `diagonal` (κ_f of
 * SCIENCE.md §2.6) where the map's units saw one term each, else its unit's sum of φ(u_t)² over the map's pairs
 */
export function forwardUnitKappa(name: ActivationName, slope: number, q: number, unit: UnitPairs | undefined, diagonal: number): number {
  if (unit === undefined) return diagonal;
  return unitKappaOf(unit, activationPairs(name, slope, q, false), diagonal);
}

/**
 * The same backward: the unit's sum of φ'(u_t)²·δ_t², the gate φ' taken independent of δ (gradient independence), so a
 * pair's (1 + g_A)(1 + g_B) − 1 with g_A of φ'² at the pre-activation's pair (its correlations, at two positions of one
 * sample and at two samples) and g_B = 2c² of the transposed map's δ; a gate nearly constant (the arg-max of a max-pool
 * window) adds no pairs of its own
 */
export function backwardUnitKappa(
  name: ActivationName,
  slope: number,
  pre: { q: number; zeroFraction: number; same: number; other: number; unit: UnitPairs | undefined },
  unit: UnitPairs | undefined,
  diagonal: number,
  constantGate: boolean,
): number {
  if (unit === undefined) return diagonal;
  const keep = 1 - pre.zeroFraction;
  const gate = constantGate || !(keep > 0 && pre.q > 0) ? undefined : activationPairs(name, slope, pre.q / keep, true);
  const pair = (gradient: PairClass, mean: number, deviation: number): number => {
    const b = classAverage(gradient, linearPairs);
    const a = gate === undefined ? 0 : classAverage({ share: 0, mean, deviation }, gate);
    return a + b + a * b;
  };
  const same = pair(unit.same, pre.same, pre.unit?.same.deviation ?? 0);
  const other = pair(unit.other, pre.other, pre.unit?.other.deviation ?? 0);
  return unit.single * diagonal + unit.same.share * same + unit.other.share * other;
}

/**
 * An average pool's backward copies each output pixel's gradient to the k pixels of its window: the unit's terms become
 * k·P_out pixels of each sample, a pixel's k − 1 window mates at cosine 1 and the rest of its sample's pixels at the
 * pairs one sample had (their mixture's mean and deviation); two samples' pairs keep theirs. A unit that summed one
 * term per sample (a dense map's, `unit` absent) had two samples' E[c²] = (κ/2 − 1/B)/(1 − 1/B) (the dense layer's
 * batch spread, κ = 2·D) (own algebra)
 */
export function copiedUnit(unit: UnitPairs | undefined, kappa: number, batch: number, k: number, pixelsIn: number): UnitPairs {
  const b = Math.max(batch, 1);
  const old =
    unit ??
    unitPairs(b, 1, { mean: 0, deviation: 0 }, { mean: Math.sqrt(b > 1 ? Math.min(Math.max((kappa / 2 - 1 / b) / (1 - 1 / b), 0), 1) : 0), deviation: 0 });
  if (!(pixelsIn > 1)) return old;
  const mates = Math.min(k, pixelsIn) - 1;
  const rest = pixelsIn - 1 - mates;
  const mean = (mates + rest * old.same.mean) / (pixelsIn - 1);
  const second = (mates + rest * (old.same.mean * old.same.mean + old.same.deviation * old.same.deviation)) / (pixelsIn - 1);
  return unitPairs(b, pixelsIn, { mean, deviation: Math.sqrt(Math.max(second - mean * mean, 0)) }, { mean: old.other.mean, deviation: old.other.deviation });
}
