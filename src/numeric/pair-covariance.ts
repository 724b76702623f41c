/**
 * Covariances of a function of two correlated Gaussians (SCIENCE.md §2.6's finite-width spread, for a unit that sums
 * many terms: src/ops/unit-pairs.ts). Internal: not part of the package's exports.
 */
import { halfLineGaussianRule } from "./quadrature.js";

/** Terms of {@link pairCovariance}'s series kept; the rest of the series is put on c^(PAIR_ORDER + 1). */
const PAIR_ORDER = 12;

/**
 * g(c) = Cov(f(u), f(v))/E[f(u)]² for u, v ~ N(0, q) of correlation c, as the coefficients b_k of g(c) = Σ_{k≥1} b_k·c^k:
 * Mehler's formula (Mehler 1866) gives E[f(u)f(v)] = Σ_k a_k²·c^k/k! with a_k = E[f(√q·z)·He_k(z)], the probabilists'
 * Hermite polynomials. The last coefficient holds the remainder of the series, so that g(1) = Var f/E[f]² exactly.
 * f may have a kink at 0 (the split rule of gaussianExpectationSplit). Empty where E[f] is 0.
 */
export function pairCovariance(f: (x: number) => number, q: number): number[] {
  const { nodes, weights } = halfLineGaussianRule(q);
  const s = Math.sqrt(q);
  const a = new Array<number>(PAIR_ORDER + 1).fill(0);
  let second = 0;
  const he = new Array<number>(PAIR_ORDER + 1).fill(0);
  for (let i = 0; i < nodes.length; i++) {
    const z = nodes[i] as number;
    const w = weights[i] as number;
    const plus = f(s * z);
    const minus = f(-s * z);
    second += w * (plus * plus + minus * minus);
    he[0] = 1;
    he[1] = z;
    for (let k = 1; k < PAIR_ORDER; k++) he[k + 1] = z * (he[k] as number) - k * (he[k - 1] as number);
    // He_k(−z) = (−1)^k·He_k(z)
    for (let k = 0; k <= PAIR_ORDER; k++) a[k] = (a[k] as number) + w * (he[k] as number) * (k % 2 === 0 ? plus + minus : plus - minus);
  }
  const mean = a[0] as number;
  if (!(mean * mean > 0)) return [];
  const b: number[] = [];
  let factorial = 1;
  let sum = 0;
  for (let k = 1; k <= PAIR_ORDER; k++) {
    factorial *= k;
    const term = ((a[k] as number) * (a[k] as number)) / factorial / (mean * mean);
    b.push(term);
    sum += term;
  }
  b.push(Math.max(second / (mean * mean) - 1 - sum, 0));
  return b;
}

/** g(c) = Σ_k b_k·c^k of {@link pairCovariance}'s coefficients. */
export function pairCovarianceAt(b: readonly number[], c: number): number {
  let g = 0;
  for (let k = b.length; k >= 1; k--) g = (g + (b[k - 1] as number)) * c;
  return g;
}
