/**
 * Extremes of many Gaussian draws: the expected largest of n i.i.d. N(0,1) or |N(0,1)| values, quantiles
 * of that maximum, and the chance that at least one of n elements passes a threshold (SCIENCE.md §2.10
 * step 2 and §4). All work in log space so that n up to 1e300 and probabilities down to 1e-300 survive.
 */
import { gaussLegendre } from "./quadrature.js";
import {
  normalLogCdf,
  normalQuantile,
  normalSf,
  normalTwoSidedQuantile,
  normalTwoSidedTail,
  normalUpperQuantile,
} from "./normal.js";

/** Euler–Mascheroni constant γ. */
const EULER_GAMMA = 0.5772156649015329;

// ln F for the maximum of n draws: F = Φ(m)^n, or (1 − P(|Z| > m))^n for absolute values
function logCdfOfMax(n: number, m: number, absolute: boolean): number {
  if (absolute) return m <= 0 ? -Infinity : n * Math.log1p(-normalTwoSidedTail(m));
  return n * normalLogCdf(m);
}

/** Largest n for which the expectations below are integrated; above it the asymptotic form is used. */
const MAX_INTEGRATED_N = 1e250;

// E[M] = L + ∫_L^U (1 − F(m)) dm for a lower limit L with F(L) < e^{−46} ≈ 1e-20 (the omitted
// ∫_{−∞}^L F dm is smaller still) and an upper limit U with 1 − F(U) < 1e-20: the identity
// E[M] = ∫_0^∞ (1 − F) − ∫_{−∞}^0 F. Composite 16-point Gauss–Legendre on 48 equal panels.
function integrateExpectedMax(n: number, absolute: boolean): number {
  const lowTail = -Math.expm1(-46 / n); // per-element P(below L) must make F(L) = e^{-46}
  let lower: number;
  let upper: number;
  if (absolute) {
    lower = lowTail >= 1 ? 0 : normalTwoSidedQuantile(lowTail);
    upper = normalTwoSidedQuantile(1e-20 / n);
  } else {
    lower = normalUpperQuantile(lowTail);
    upper = normalUpperQuantile(1e-20 / n);
  }
  const gl = gaussLegendre(16);
  const panels = 48;
  const h = (upper - lower) / panels;
  let sum = 0;
  for (let p = 0; p < panels; p++) {
    const mid = lower + (p + 0.5) * h;
    for (let i = 0; i < gl.nodes.length; i++) {
      const m = mid + 0.5 * h * (gl.nodes[i] as number);
      sum += (gl.weights[i] as number) * -Math.expm1(logCdfOfMax(n, m, absolute));
    }
  }
  return lower + 0.5 * h * sum;
}

/**
 * E[max of n i.i.d. N(0,1)] for n ≥ 1 (n may be fractional), by numerical integration of
 * E[M] = ∫ (1 − Φ(m)^n) dm − ∫ Φ(m)^n dm; accurate to about 1e-12 for n up to 1e250, then
 * {@link expectedMaxNormalApprox}. Multiply by σ for N(0, σ²). NaN for n < 1.
 */
export function expectedMaxNormal(n: number): number {
  if (!(n >= 1)) return NaN;
  if (n === 1) return 0;
  if (n > MAX_INTEGRATED_N) return expectedMaxNormalApprox(n);
  return integrateExpectedMax(n, false);
}

/**
 * E[max of n i.i.d. |N(0,1)|] for n ≥ 1, by the same integration with F(m) = (1 − P(|Z| > m))^n.
 * n = 1 gives E|Z| = √(2/π). NaN for n < 1.
 */
export function expectedMaxAbsNormal(n: number): number {
  if (!(n >= 1)) return NaN;
  if (n > MAX_INTEGRATED_N) return expectedMaxNormalApprox(2 * n);
  return integrateExpectedMax(n, true);
}

/**
 * Fast asymptotic E[max of n N(0,1)] for n ≥ 2: a − (ln ln n + ln 4π)/(2a) + γ/a with a = √(2 ln n)
 * (SCIENCE.md §4, "refined"; the Gumbel limit's location plus γ times its scale). About 0.03 high at
 * n = 1e3 and 0.008 high at n = 1e9; use {@link expectedMaxNormal} when that matters.
 * For the maximum of n absolute values use 2n (the two tails). NaN for n < 2.
 */
export function expectedMaxNormalApprox(n: number): number {
  if (!(n >= 2)) return NaN;
  const a = Math.sqrt(2 * Math.log(n));
  return a - (Math.log(Math.log(n)) + Math.log(4 * Math.PI)) / (2 * a) + EULER_GAMMA / a;
}

/**
 * The p-quantile of the maximum of n i.i.d. N(0,1): the m with P(max ≤ m) = Φ(m)^n = p, solved as
 * ln Φ(m) = ln(p)/n so that huge n and tiny p keep their digits. p in [0, 1], n ≥ 1; NaN otherwise.
 */
export function maxNormalQuantile(n: number, p: number): number {
  if (!(n >= 1) || !(p >= 0 && p <= 1)) return NaN;
  const logPerElement = Math.log(p) / n;
  if (logPerElement > -Math.LN2) return normalUpperQuantile(-Math.expm1(logPerElement));
  return normalQuantile(Math.exp(logPerElement));
}

/**
 * The p-quantile of the maximum of n i.i.d. |N(0,1)|: the m ≥ 0 with (1 − P(|Z| > m))^n = p.
 * p in [0, 1], n ≥ 1; NaN otherwise.
 */
export function maxAbsNormalQuantile(n: number, p: number): number {
  if (!(n >= 1) || !(p >= 0 && p <= 1)) return NaN;
  return normalTwoSidedQuantile(-Math.expm1(Math.log(p) / n));
}

/**
 * The magnitude m exceeded by at least one of n i.i.d. |N(0,1)| elements with probability p:
 * P(max_i |Z_i| > m) = p. Unlike maxAbsNormalQuantile(n, 1 − p) it keeps tiny p exact
 * (computed as P(|Z| > m) = −expm1(log1p(−p)/n)). Multiply by σ for N(0, σ²). NaN outside p ∈ [0, 1], n ≥ 1.
 */
export function maxAbsNormalExceedanceLevel(n: number, p: number): number {
  if (!(n >= 1) || !(p >= 0 && p <= 1)) return NaN;
  return normalTwoSidedQuantile(-Math.expm1(Math.log1p(-p) / n));
}

/** Whether a threshold test counts both tails (|Z| > t) or only the upper one (Z > t). */
export type TailSides = "two-sided" | "upper";

/**
 * Probability that at least one of n i.i.d. N(0,1) elements exceeds t: 1 − (1 − P)^n with
 * P = P(|Z| > t) (default) or P(Z > t), computed as −expm1(n·log1p(−P)) so that results near 1e-300
 * and n near 1e15 keep full relative accuracy. n ≥ 0 (n = 0 gives 0); NaN for negative n.
 */
export function probAnyExceeds(n: number, t: number, sides: TailSides = "two-sided"): number {
  if (!(n >= 0)) return NaN;
  if (n === 0) return 0;
  const tail = sides === "upper" ? normalSf(t) : normalTwoSidedTail(t);
  if (tail >= 1) return 1;
  return -Math.expm1(n * Math.log1p(-tail));
}
