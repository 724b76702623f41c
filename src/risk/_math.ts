/**
 * The few normal-distribution kernels the risk module's inner loops use: a fast erfc (hundreds of evaluations
 * per tensor and format in the draw integrals), erf without cancellation for small arguments, tails and their
 * inverse. Relative accuracy about 1e-7, ample for probabilities reported to two digits.
 */

// the density is the same function here as in src/numeric
export { normalPdf } from "../numeric/normal.js";

// erf(x) = (2/√π)·Σ (−1)^n x^{2n+1}/(n!(2n+1)) (Abramowitz & Stegun 7.1.5); below |x| = 0.5 the terms fall by
// more than a factor 4 each, so 20 terms reach full precision without cancellation.
function seriesErf(x: number): number {
  const x2 = x * x;
  let power = x;
  let sum = x;
  for (let n = 1; n < 25; n++) {
    power *= -x2 / n;
    const term = power / (2 * n + 1);
    sum += term;
    if (Math.abs(term) < 1e-17 * Math.abs(sum)) break;
  }
  return 1.1283791670955126 * sum;
}

/** ln 2 */
export const LN2 = Math.LN2;

/**
 * 2^x as e^{x·ln 2}: within about (|x| + 1)·2^−52 relative of `2 ** x` (the product x·ln 2 is rounded to half an ulp of
 * itself, which moves the result by as much relatively, and Math.exp is good to an ulp), and about five times cheaper in
 * V8 than `2 **` of a non-integer (8 against 42 ns, measured Dec 2026 on Node 20). For the hot paths: the draws' scales
 * 2^(spread·z), the levels' factors; test/risk/fast-laws.test.ts holds it to `2 **`.
 */
export function exp2(x: number): number {
  return Math.exp(x * LN2);
}

/**
 * Probability that at least one of n independent events of probability p happens: 1 − (1 − p)^n,
 * computed as −expm1(n·log1p(−p)) so that it stays accurate when p is tiny and n is large.
 */
export function anyOf(p: number, n: number): number {
  if (!(p > 0) || !(n > 0)) return 0;
  if (p >= 1) return 1;
  return -Math.expm1(n * Math.log1p(-p));
}

/**
 * erfc(x) for x ≥ 0 by a Chebyshev fit with fractional error below 1.2e-7 everywhere (Press et al., Numerical
 * Recipes in C, 2nd ed., §6.2, `erfcc`; coefficients from memory, checked against src/numeric's erfc in
 * test/risk/math.test.ts). About forty times faster than the series and continued fraction, which matters in
 * the draw integrals (hundreds of evaluations per tensor and format); relative accuracy holds deep in the tail.
 */
function chebyshevErfc(x: number): number {
  const t = 1 / (1 + 0.5 * x);
  const polynomial =
    -x * x -
    1.26551223 +
    t * (1.00002368 + t * (0.37409196 + t * (0.09678418 + t * (-0.18628806 + t * (0.27886807 + t * (-1.13520398 + t * (1.48851587 + t * (-0.82215223 + t * 0.17087277))))))));
  return t * Math.exp(polynomial);
}

/**
 * The Taylor coefficients at 0 of chebyshevErfc itself (not of erfc): the fit is t·e^{h} with t = 1/(1 + x/2) and h a
 * polynomial in t less x², each a power series in x; the series of e^{h} follows from (e^{h})' = h'·e^{h}, so
 * e_n = (1/n)·Σ_{k=1…n} k·h_k·e_{n−k} (the rule for the exponential of a power series; Knuth, TAOCP vol. 2 §4.7).
 * The coefficients stay near 0.55 in size (the series converges for |x| < 1), so below x = 1/4 the terms left out after
 * the 28th add under 0.6·4^−28/(3/4) ≈ 1e-17 of a value near 1: the sum is chebyshevErfc to rounding, which lets a
 * scale mixture's tail meet its widest components through one series (src/risk/laws.ts, mixtureAbove).
 */
export const CHEBYSHEV_ERFC_TAYLOR: Float64Array = (() => {
  const terms = 28;
  const product = (a: Float64Array, b: Float64Array): Float64Array => {
    const c = new Float64Array(terms);
    for (let i = 0; i < terms; i++) for (let j = 0; i + j < terms; j++) c[i + j] = (c[i + j] as number) + (a[i] as number) * (b[j] as number);
    return c;
  };
  const t = new Float64Array(terms);
  for (let k = 0; k < terms; k++) t[k] = (-0.5) ** k;
  const fit = [-1.26551223, 1.00002368, 0.37409196, 0.09678418, -0.18628806, 0.27886807, -1.13520398, 1.48851587, -0.82215223, 0.17087277];
  let h: Float64Array = new Float64Array(terms);
  h[0] = fit[9] as number;
  for (let d = 8; d >= 0; d--) {
    h = product(h, t);
    h[0] = (h[0] as number) + (fit[d] as number);
  }
  h[2] = (h[2] as number) - 1;
  const e = new Float64Array(terms);
  e[0] = Math.exp(h[0] as number);
  for (let n = 1; n < terms; n++) {
    let sum = 0;
    for (let k = 1; k <= n; k++) sum += k * (h[k] as number) * (e[n - k] as number);
    e[n] = sum / n;
  }
  return product(t, e);
})();

/** erfc(x) with fractional error below 1.2e-7 (see chebyshevErfc). */
export function erfc(x: number): number {
  if (Number.isNaN(x)) return NaN;
  return x >= 0 ? chebyshevErfc(x) : 2 - chebyshevErfc(-x);
}

/**
 * erf(x) without cancellation for small |x|: the everywhere-positive series of src/numeric below 0.5 (few terms
 * there), 1 − erfc above.
 */
export function erf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  const ax = Math.abs(x);
  if (ax < 0.5) return seriesErf(x);
  const r = 1 - chebyshevErfc(ax);
  return x < 0 ? -r : r;
}

/** Upper tail Q(x) = P(Z > x) = erfc(x/√2)/2 (A&S 26.2.29), fractional error below 1.2e-7. */
export function normalSf(x: number): number {
  return 0.5 * erfc(x / Math.SQRT2);
}

/** Φ(x) = P(Z ≤ x) = erfc(−x/√2)/2, fractional error below 1.2e-7 in the lower tail. */
export function normalCdf(x: number): number {
  return 0.5 * erfc(-x / Math.SQRT2);
}

// the last two levels asked of normalUpperQuantile and their quantiles
const QUANTILE_ASKED = new Float64Array(2).fill(NaN);
const QUANTILE_FOUND = new Float64Array(2);

/**
 * The z with P(Z > z) = q (0 < q < 1), by bisection on the fast tail: accurate to about 1e-7 relative in q.
 * ±∞ at q = 0 and q = 1.
 */
export function normalUpperQuantile(q: number): number {
  if (!(q >= 0 && q <= 1)) return NaN;
  if (q === 0) return Infinity;
  if (q === 1) return -Infinity;
  // the callers ask for the same few levels (the quantile levels of the statistics) over and over
  if (q === QUANTILE_ASKED[0]) return QUANTILE_FOUND[0] as number;
  if (q === QUANTILE_ASKED[1]) return QUANTILE_FOUND[1] as number;
  const z = bisectQuantile(q);
  QUANTILE_ASKED[1] = QUANTILE_ASKED[0] as number;
  QUANTILE_FOUND[1] = QUANTILE_FOUND[0] as number;
  QUANTILE_ASKED[0] = q;
  QUANTILE_FOUND[0] = z;
  return z;
}
function bisectQuantile(q: number): number {
  let lo = -40;
  let hi = 40;
  for (let i = 0; i < 80 && hi - lo > 1e-12; i++) {
    const mid = 0.5 * (lo + hi);
    if (normalSf(mid) > q) lo = mid;
    else hi = mid;
  }
  return 0.5 * (lo + hi);
}

// a key's 32-bit words hashed: FNV-1a over the words, then mixed
export function hashWords(words: Int32Array): number {
  let hash = 0x811c9dc5;
  for (let i = 0; i < words.length; i++) hash = Math.imul(hash ^ (words[i] as number), 0x01000193);
  hash = Math.imul(hash ^ (hash >>> 15), 0x2c1b3c6d);
  return hash ^ (hash >>> 12);
}
// the slot of a key's words in a table of `slots` (a power of two)
export function hashSlot(words: Int32Array, slots: number): number {
  return hashWords(words) & (slots - 1);
}

/**
 * A number at least Math.exp(x) as computed, and within 0.21% of it, for 0 ≤ x < 64 without an exponential: Math.exp(x)
 * elsewhere. With j = ⌊16x⌋ and r = x − j/16 (exact: 0 ≤ r < 1/16), e^x = e^{j/16}·e^r, the first from a table made
 * once and e^r ≤ 1 + r + r² (its series' tail past r is r²·Σ r^{k−2}/k! ≤ (e − 2)·r² for r ≤ 1; Taylor, from memory),
 * the table's entries and the product each widened by 2^−40, far more than their roundings (a few units of 2^−53) and
 * Math.exp's own (within one).
 */
export function expAbove(x: number): number {
  if (!(x >= 0 && x < EXP_TABLE_END)) return Math.exp(x);
  const j = Math.floor(x * 16);
  const r = x - j / 16;
  return (EXP_TABLE[j] as number) * (1 + r * (1 + r)) * EXP_WIDEN;
}
const EXP_TABLE_END = 64;
const EXP_WIDEN = 1 + 2 ** -40;
// e^{j/16}, widened, for j = 0..16·EXP_TABLE_END − 1
const EXP_TABLE = new Float64Array(16 * EXP_TABLE_END).map((_, j) => Math.exp(j / 16) * EXP_WIDEN);
