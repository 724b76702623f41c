/**
 * The standard normal distribution: density, distribution function, tails that stay accurate far out,
 * erf/erfc, and the quantile function. Pure double-precision kernels; they never throw and return NaN
 * for NaN input.
 */

/** 1/√(2π) */
export const INV_SQRT_2PI = 0.3989422804014327;
/** 2/√π */
const TWO_OVER_SQRT_PI = 1.1283791670955126;
/** 1/√π */
const INV_SQRT_PI = 0.5641895835477563;
/** ln(2π)/2 */
const HALF_LOG_2PI = 0.9189385332046728;

/**
 * erf(x) by its everywhere-convergent series for |x| < 2.5 and 1 − erfc otherwise.
 * Relative error about 1e-15.
 */
export function erf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  const ax = Math.abs(x);
  if (ax < 2.5) return erfSeries(x);
  const r = 1 - erfcContinuedFraction(ax);
  return x < 0 ? -r : r;
}

/**
 * erfc(x) = 1 − erf(x), accurate relative to its own size deep in the upper tail (erfc(27) ≈ 5e-319 still
 * has most of its digits). Series for |x| < 2.5 and a continued fraction beyond.
 */
export function erfc(x: number): number {
  if (Number.isNaN(x)) return NaN;
  if (x >= 2.5) return erfcContinuedFraction(x);
  if (x <= -2.5) return 2 - erfcContinuedFraction(-x);
  return 1 - erfSeries(x);
}

// erf(x) = (2/√π)·e^{−x²}·Σ_n 2^n x^{2n+1}/(1·3·…·(2n+1)) (Abramowitz & Stegun 7.1.6): every term is
// positive, so there is no cancellation; it needs about 60 terms at |x| = 2.5.
function erfSeries(x: number): number {
  const x2 = x * x;
  let term = x;
  let sum = x;
  for (let n = 1; n < 200; n++) {
    term *= (2 * x2) / (2 * n + 1);
    sum += term;
    if (term < 1e-17 * Math.abs(sum) && term > -1e-17 * Math.abs(sum)) break;
  }
  return TWO_OVER_SQRT_PI * Math.exp(-x2) * sum;
}

// erfc(x) = (e^{−x²}/√π)·1/(x + (1/2)/(x + 1/(x + (3/2)/(x + 2/(x + …))))) (A&S 7.1.14), evaluated with
// the modified Lentz method; for x ≥ 2.5 it converges to full precision within about 60 terms.
function erfcContinuedFraction(x: number): number {
  if (x > 27.3) return 0; // erfc(27.3) < 2^-1074: below the smallest binary64 subnormal
  const tiny = 1e-300;
  let f = x;
  let c = x;
  let d = 0;
  for (let k = 1; k < 500; k++) {
    const a = k / 2;
    d = x + a * d;
    d = d === 0 ? tiny : 1 / d;
    c = x + a / c;
    if (c === 0) c = tiny;
    const delta = c * d;
    f *= delta;
    if (Math.abs(delta - 1) < 1e-16) break;
  }
  // e^{−x²} is split as e^{−x_h²}·e^{−(x−x_h)(x+x_h)} so that the rounding of x² does not cost digits
  const xh = Math.round(x * 65536) / 65536;
  return (Math.exp(-xh * xh) * Math.exp(-(x - xh) * (x + xh)) * INV_SQRT_PI) / f;
}

/** Standard normal density φ(x) = e^{−x²/2}/√(2π). */
export function normalPdf(x: number): number {
  return INV_SQRT_2PI * Math.exp(-0.5 * x * x);
}

/** ln φ(x), finite for every finite x. */
export function normalLogPdf(x: number): number {
  return -0.5 * x * x - HALF_LOG_2PI;
}

// W. J. Cody, "Rational Chebyshev approximations for the error function", Math. Comp. 23 (1969), in the
// form of Cody's ALGORITHM 715 (ACM TOMS 19, 1993) routine for the normal distribution function:
// relative error below 1e-15 down to the binary64 subnormal range (checked against mpmath in the tests).
const CODY_A = [2.2352520354606839287, 161.02823106855587881, 1067.6894854603709582, 18154.981253343561249, 0.065682337918207449113] as const;
const CODY_B = [47.20258190468824187, 976.09855173777669322, 10260.932208618978205, 45507.789335026729956] as const;
const CODY_C = [
  0.39894151208813466764, 8.8831497943883759412, 93.506656132177855979, 597.27027639480026226, 2494.5375852903726711,
  6848.1904505362823326, 11602.651437647350124, 9842.7148383839780218, 1.0765576773720192317e-8,
] as const;
const CODY_D = [
  22.266688044328115691, 235.38790178262499861, 1519.377599407554805, 6485.558298266760755, 18615.571640885098091,
  34900.952721145977266, 38912.003286093271411, 19685.429676859990727,
] as const;
const CODY_P = [
  0.21589853405795699, 0.1274011611602473639, 0.022235277870649807, 0.001421619193227893466, 2.9112874951168792e-5,
  0.02307344176494017303,
] as const;
const CODY_Q = [1.28426009614491121, 0.468238212480865118, 0.0659881378689285515, 0.00378239633202758244, 7.29751555083966205e-5] as const;
const SQRT32 = 5.656854249492381;

// Q(|x|) = P(Z > |x|) for |x| > 0.67448975 (Cody's two outer ranges); the factor e^{−x²/2} is split at
// x rounded to 1/16 so that the rounding of x² costs no digits.
function codyOuterTail(y: number): number {
  let r: number;
  if (y <= SQRT32) {
    let xn = CODY_C[8] * y;
    let xd = y;
    for (let i = 0; i < 7; i++) {
      xn = (xn + (CODY_C[i] as number)) * y;
      xd = (xd + (CODY_D[i] as number)) * y;
    }
    r = (xn + CODY_C[7]) / (xd + CODY_D[7]);
  } else {
    const xsq = 1 / (y * y);
    let xn = CODY_P[5] * xsq;
    let xd = xsq;
    for (let i = 0; i < 4; i++) {
      xn = (xn + (CODY_P[i] as number)) * xsq;
      xd = (xd + (CODY_Q[i] as number)) * xsq;
    }
    r = (xsq * (xn + CODY_P[4])) / (xd + CODY_Q[4]);
    r = (INV_SQRT_2PI - r) / y;
  }
  const ys = Math.trunc(y * 16) / 16;
  const del = (y - ys) * (y + ys);
  return Math.exp(-ys * ys * 0.5) * Math.exp(-del * 0.5) * r;
}

// Φ(x) − 1/2 for |x| ≤ 0.67448975 (Cody's inner range)
function codyCentral(x: number): number {
  const xsq = x * x;
  let xn = CODY_A[4] * xsq;
  let xd = xsq;
  for (let i = 0; i < 3; i++) {
    xn = (xn + (CODY_A[i] as number)) * xsq;
    xd = (xd + (CODY_B[i] as number)) * xsq;
  }
  return (x * (xn + CODY_A[3])) / (xd + CODY_B[3]);
}

/** Standard normal distribution function Φ(x) = P(Z ≤ x); relative accuracy holds in the lower tail. */
export function normalCdf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  if (Math.abs(x) <= 0.67448975) return 0.5 + codyCentral(x);
  const tail = codyOuterTail(Math.abs(x));
  return x > 0 ? 1 - tail : tail;
}

/** Upper tail Q(x) = P(Z > x) = 1 − Φ(x), accurate relative to its size for large x (Q(37) ≈ 5.7e-300). */
export function normalSf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  if (Math.abs(x) <= 0.67448975) return 0.5 - codyCentral(x);
  const tail = codyOuterTail(Math.abs(x));
  return x > 0 ? tail : 1 - tail;
}

/** Two-sided tail P(|Z| > t) = erfc(t/√2) for t ≥ 0 (SCIENCE.md §4); 1 for t ≤ 0. */
export function normalTwoSidedTail(t: number): number {
  if (Number.isNaN(t)) return NaN;
  if (t <= 0) return 1;
  // P(|Z| > t) = 2·Q(t) (symmetry), computed directly in the normal's own variable
  return 2 * normalSf(t);
}

/**
 * ln Φ(x), accurate for every x: in the lower tail through ln Q(−x), where Q itself is computed without
 * cancellation, and in the upper half as log1p(−Q(x)).
 */
export function normalLogCdf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  if (x > 0) return Math.log1p(-normalSf(x));
  if (x > -37) return Math.log(normalCdf(x));
  // Mills ratio asymptotic series: Q(t) = φ(t)/t·(1 − 1/t² + 3/t⁴ − 15/t⁶ + …) (A&S 26.2.12); t > 37 needs
  // only a few terms, and it keeps ln Φ finite where Φ itself underflows.
  const t = -x;
  const t2 = t * t;
  let term = 1;
  let sum = 1;
  for (let k = 1; k < 8; k++) {
    term *= -(2 * k - 1) / t2;
    sum += term;
  }
  return normalLogPdf(t) - Math.log(t) + Math.log(sum);
}

/** ln Q(x) = ln P(Z > x), accurate for every x. */
export function normalLogSf(x: number): number {
  return normalLogCdf(-x);
}

// Acklam's rational approximation to Φ⁻¹ (P. J. Acklam, "An algorithm for computing the inverse normal
// cumulative distribution function", 2003; relative error below 1.15e-9), refined below by Halley steps.
const ACKLAM_A = [
  -3.969683028665376e1, 2.209460984245205e2, -2.759285104469687e2, 1.38357751867269e2, -3.066479806614716e1,
  2.506628277459239,
] as const;
const ACKLAM_B = [
  -5.447609879822406e1, 1.615858368580409e2, -1.556989798598866e2, 6.680131188771972e1, -1.328068155288572e1,
] as const;
const ACKLAM_C = [
  -7.784894002430293e-3, -3.223964580411365e-1, -2.400758277161838, -2.549732539343734, 4.374664141464968,
  2.938163982698783,
] as const;
const ACKLAM_D = [7.784695709041462e-3, 3.224671290700398e-1, 2.445134137142996, 3.754408661907416] as const;

function acklam(p: number): number {
  const [a0, a1, a2, a3, a4, a5] = ACKLAM_A;
  const [b0, b1, b2, b3, b4] = ACKLAM_B;
  const [c0, c1, c2, c3, c4, c5] = ACKLAM_C;
  const [d0, d1, d2, d3] = ACKLAM_D;
  const pLow = 0.02425;
  if (p < pLow) {
    const q = Math.sqrt(-2 * Math.log(p));
    return (((((c0 * q + c1) * q + c2) * q + c3) * q + c4) * q + c5) / ((((d0 * q + d1) * q + d2) * q + d3) * q + 1);
  }
  if (p <= 1 - pLow) {
    const q = p - 0.5;
    const r = q * q;
    return (
      ((((((a0 * r + a1) * r + a2) * r + a3) * r + a4) * r + a5) * q) /
      (((((b0 * r + b1) * r + b2) * r + b3) * r + b4) * r + 1)
    );
  }
  const q = Math.sqrt(-2 * Math.log1p(-p));
  return -(((((c0 * q + c1) * q + c2) * q + c3) * q + c4) * q + c5) / ((((d0 * q + d1) * q + d2) * q + d3) * q + 1);
}

/**
 * Quantile function Φ⁻¹(p): the x with P(Z ≤ x) = p. Returns −∞ at 0, +∞ at 1, NaN outside [0, 1].
 * Relative accuracy about 1e-15 away from p = 1/2 (use {@link normalUpperQuantile} for p near 1).
 */
export function normalQuantile(p: number): number {
  if (!(p >= 0 && p <= 1)) return NaN;
  if (p === 0) return -Infinity;
  if (p === 1) return Infinity;
  if (p > 0.5) return -lowerQuantile(1 - p);
  return lowerQuantile(p);
}

/** The x with P(Z > x) = q, accurate for tiny q (normalUpperQuantile(1e-300) ≈ 37.0471). */
export function normalUpperQuantile(q: number): number {
  if (!(q >= 0 && q <= 1)) return NaN;
  if (q === 0) return Infinity;
  if (q === 1) return -Infinity;
  return -lowerQuantile(q);
}

/** The t ≥ 0 with P(|Z| > t) = p, for p in [0, 1]. */
export function normalTwoSidedQuantile(p: number): number {
  if (!(p >= 0 && p <= 1)) return NaN;
  return normalUpperQuantile(p / 2);
}

// Φ⁻¹(p) for 0 < p ≤ 1/2 (result ≤ 0): Acklam's start, then Halley steps on Φ(x) − p. The residual is
// computed from the lower tail, which has full relative accuracy, so the refinement is exact to rounding.
function lowerQuantile(p: number): number {
  if (p === 0.5) return 0;
  let x = acklam(p);
  for (let i = 0; i < 3; i++) {
    const cdf = normalCdf(x);
    if (cdf === 0) break;
    // Halley for Φ(x) = p: u = (Φ(x) − p)/φ(x), x ← x − u/(1 + x·u/2) (Acklam 2003, refinement step)
    const u = (cdf - p) / normalPdf(x);
    if (!Number.isFinite(u)) break;
    const step = u / (1 + 0.5 * x * u);
    x -= step;
    if (Math.abs(step) <= 1e-16 * Math.abs(x)) break;
  }
  return x;
}
