/**
 * Moments of the softmax of Gaussian logits, exactly (to quadrature accuracy): for C independent logits
 * z_j ~ N(0, s²) and p_1 = e^(z_1)/Σ_k e^(z_k), the mean E[p_1] (= 1/C, a check), the second moment E[p_1²] and the
 * expected log-sum-exp E[ln Σ_k e^(z_k)] (the cross-entropy loss at initialisation, since E[z_y] = 0).
 *
 * Method: negative moments through the Laplace transform (Cressie, Davis, Folks & Policello 1981, "The
 * moment-generating function and negative integer moments", The American Statistician 35(3)):
 * 1/x^n = (1/Γ(n))·∫_0^∞ t^(n−1)·e^(−t·x) dt, and ln x = ∫_0^∞ (e^(−t) − e^(−t·x))/t dt (Frullani's integral).
 * With x = e^(z_1) + S and S = Σ_(k≥2) e^(z_k) independent of z_1, the expectation of e^(n·z_1)/x^n factors into the
 * transform of one log-normal term: E[p_1^n] = (1/Γ(n))·∫ t^(n−1)·L_n(t)·L_0(t)^(C−1) dt with
 * L_m(t) = E[e^(m·s·Z)·exp(−t·e^(s·Z))], Z ~ N(0, 1), and E[ln Σ e^z] = ∫ (e^(−t) − L_0(t)^C)/t dt. The class count
 * enters only as a power, so the cost does not grow with C.
 *
 * Quadrature: both integrals are taken by the trapezoid rule on the whole line (u = ln t, and Z), which converges
 * geometrically for integrands analytic in a strip (Trefethen & Weideman 2014, "The exponentially convergent
 * trapezoidal rule", SIAM Review 56(3), §5). exp(−t·e^(s(x+iy))) stays bounded for |y| < π/(2s), so a step of
 * 0.3/s in Z keeps the discretisation error near e^(−π²/0.3) ≈ 1e-14, and a step of at most 0.75 resolves the
 * Gaussian weight itself to e^(−2π²/0.75²) ≈ 6e-16 (the same paper, the Gaussian example); u has a strip of
 * half-width π/2 and takes a step of 0.25.
 *
 * Where the sums start (derived): every integrand is at most K·t for small t (t·L_1 ≤ t·E[e^(sZ)] = t·e^(s²/2);
 * t²·L_2 ≤ t·e^(s²/2)/e since y·e^(−y) ≤ 1/e; the log-sum-exp term ≤ C·t·e^(s²/2)), so the nodes of u below L add at
 * most K·e^L·h/(1 − e^(−h)). Against the smallest possible result (E[p] = 1/C, E[p²] ≥ 1/C² and
 * E[p_n p_m] ≥ 1/C² by Jensen, E[ln Σ e^z] ≥ ln C by Jensen) this fixes L for a relative cut-off below 10⁻¹³
 * (10⁻¹² for the pair moment); the nodes stay on the grid anchored at −40 − ln C − s², so that the cut only drops
 * terms.
 */
import { expectedMaxNormal } from "./extremes.js";
import { normalCdf, normalLogCdf, normalPdf } from "./normal.js";

/** Moments of the softmax of C independent N(0, s²) logits. */
export interface SoftmaxMoments {
  /** E[p_j] for one class: 1/C (returned as computed, a check of the quadrature) */
  mean: number;
  /** E[p_j²] for one class */
  second: number;
  /** E[ln Σ_k e^(z_k)], the expected cross-entropy at initialisation (labels independent of the logits) */
  logSumExp: number;
}

const Z_RANGE = 9; // φ(9) ≈ 1e-18
/**
 * Above this logit variance (s = 20; the double sum takes about a second here and grows as s⁴)
 * gaussianSoftmaxPairMoment carries its quadrature on by the peaked limit's leading order (pairPeakedLimit).
 */
const PAIR_QUADRATURE_VARIANCE = 400;
/** Above this correlation the one-hot pair limit is carried to 1/C by its leading order in √(1 − c) (pairPeakedLimit). */
const PAIR_LIMIT_CORRELATION = 0.999;
/** Below this logit variance the lattice would need U_STEP/(U_STEP·s) points per step; the expansion is exact to 1e-8. */
const SMALL_VARIANCE = 1e-4;
const U_STEP = 0.25;
/** Largest trapezoid step in a standard normal variable: e^(−2π²/0.75²) ≈ 6e-16 (module comment). */
const GAUSS_STEP = 0.75;
/** Relative bound on what the moments' sums leave out below their first node of ln t (module comment). */
const MOMENT_CUT = 1e-13;
/** The same for the pair moment, whose ln t step already errs by about 3e-9. */
const PAIR_CUT = 1e-12;
/** −∞ as a constant: a literal `-Infinity` is a negation that optimised code first meets on a rare branch (a deopt). */
const NEG_INF = -Infinity;
// memo of gaussianSoftmaxMoments by class count, then variance (numbers as keys: building a string key cost more than
// the lookup); `cached` counts its entries
const cache = new Map<number, Map<number, SoftmaxMoments>>();
let cached = 0;

/**
 * Exact moments of the softmax of `classes` independent N(0, variance) logits (method in the module comment).
 * Returns NaN fields for a negative or non-finite variance or fewer than one class; a variance of 0 gives the
 * uniform softmax exactly. Past `quadratureUpTo` (default 2000; the quadrature's cost grows as s²) the quadrature at
 * s² = 2000 is carried on by the peaked limit's leading order; the tests pass Infinity to compare the two. Results are
 * memoised.
 * @example gaussianSoftmaxMoments(0.5, 2).second // E[sigmoid(Z)²] = 0.2933790359 (SCIENCE.md §2.9, q = 1)
 */
export function gaussianSoftmaxMoments(variance: number, classes: number, quadratureUpTo = ROW_QUADRATURE_VARIANCE): SoftmaxMoments {
  if (!(variance >= 0) || !Number.isFinite(variance) || !(classes >= 1) || !Number.isFinite(classes)) {
    return { mean: NaN, second: NaN, logSumExp: NaN };
  }
  const C = classes;
  if (variance === 0 || C === 1) return { mean: 1 / C, second: 1 / (C * C), logSumExp: Math.log(C) };
  if (variance < SMALL_VARIANCE) {
    // p ≈ (1 + z − z̄)/C to first order (derived): E[p²] = (1 + s²(1 − 1/C))/C², E[ln Σ e^z] = ln C + s²(1 − 1/C)/2,
    // relative error O(s⁴)
    const spread = variance * (1 - 1 / C);
    return { mean: 1 / C, second: (1 + spread) / (C * C), logSumExp: Math.log(C) + spread / 2 };
  }
  if (variance > quadratureUpTo) {
    // the quadrature at s₀² carried on by the peaked limit's leading order (derived as for peakedRows): 1 − C·E[p²] and
    // E[ln Σ e^z] − s·E[max] = E[ln(1 + Σ_(k≠max) e^(z_k − z_max))] come from near-ties of the largest two, ∝ 1/s
    const anchor = gaussianSoftmaxMoments(ROW_QUADRATURE_VARIANCE, C);
    const r = Math.sqrt(ROW_QUADRATURE_VARIANCE / variance);
    const top = expectedMaxNormal(C);
    const s0 = Math.sqrt(ROW_QUADRATURE_VARIANCE);
    return {
      mean: 1 / C,
      second: (1 - (1 - C * anchor.second) * r) / C,
      logSumExp: Math.sqrt(variance) * top + (anchor.logSumExp - s0 * top) * r,
    };
  }
  let byVariance = cache.get(C);
  const hit = byVariance?.get(variance);
  if (hit !== undefined) return hit;
  const result = softmaxMoments(variance, C);
  if (cached > 4096) {
    cache.clear();
    cached = 0;
    byVariance = undefined;
  }
  if (byVariance === undefined) {
    byVariance = new Map();
    cache.set(C, byVariance);
  }
  byVariance.set(variance, result);
  cached++;
  return result;
}

// The loops of the quadratures live in small functions of their own, each ending in a plain return: a loop
// optimised while it runs (on-stack replacement, often in the first call here) has no type feedback yet for code
// after it, so an object built there threw the optimised code away again, and a large function waits for more of
// V8's profiler ticks before it is optimised at all than a small one.

/** gaussianSoftmaxMoments past its special cases and its memo. */
function softmaxMoments(variance: number, C: number): SoftmaxMoments {
  const s = Math.sqrt(variance);
  // u = ln t on steps of U_STEP, Z on a grid with s·h = U_STEP/k: every u + s·x_i falls on one lattice, so the
  // transcendental parts are evaluated once per lattice point v_j = base + j·spacing (y = e^v: 1 − e^(−y), y·e^(−y),
  // y²·e^(−y)); the weights sum to exactly 1, so that L_0 ≤ 1 and its power stays finite
  const h = U_STEP / (1 - Math.exp(-U_STEP)); // Σ_(m ≥ 0) h·e^(−m·h), the tail sum per e^L
  const logC = Math.log(C);
  // the cut for E[p] (K = e^(s²/2), result 1/C), E[p²] (K = e^(s²/2)/e, result ≥ 1/C²) and the log-sum-exp
  // (K = C·e^(s²/2), result ≥ ln C)
  const cut = Math.min(
    Math.log(MOMENT_CUT / h) - logC,
    Math.log((MOMENT_CUT * Math.E) / h) - 2 * logC,
    Math.log((MOMENT_CUT * logC) / h) - logC,
  ) - gridTop(variance, s);
  const { k, spacing, n, weights: weight, low, steps, latticeLength, base } = logLattice(U_STEP, Math.min(0.3, GAUSS_STEP * s), s, variance, C, cut);
  const a0 = new Float64Array(latticeLength);
  const a1 = new Float64Array(latticeLength);
  const a2 = new Float64Array(latticeLength);
  latticeTransforms(a0, [a1, a2], base, spacing);
  const sums = new Float64Array(3);
  momentSums(steps, low, k, n, weight, a0, a1, a2, C, sums);
  return { mean: (sums[0] as number) * U_STEP, second: (sums[1] as number) * U_STEP, logSumExp: (sums[2] as number) * U_STEP };
}

/**
 * ln K, K the factor of the cuts that bounds E[e^(sZ)] on the Gaussian grid, whose nodes end at Z_RANGE + h (h the
 * grid's step in Z): e^(s²/2), or e^(s·(Z_RANGE + h)) when that is smaller (s above about 19), so that the grid of
 * ln t starts near −10s rather than −s²/2
 */
function gridTop(variance: number, s: number): number {
  return Math.min(variance / 2, s * Z_RANGE + Math.min(0.3, GAUSS_STEP * s));
}

/** y = e^(base + j·spacing) on the lattice: 1 − e^(−y) into a0, and y^m·e^(−y) into powers[m − 1] (m = 1, 2, …). */
function latticeTransforms(a0: Float64Array, powers: readonly Float64Array[], base: number, spacing: number): void {
  const latticeLength = a0.length;
  for (let j = 0; j < latticeLength; j++) {
    const y = Math.exp(base + j * spacing);
    const e = Math.exp(-y);
    a0[j] = -Math.expm1(-y);
    if (e > 0) {
      let power = y;
      for (let m = 0; m < powers.length; m++) {
        powers[m]![j] = power * e;
        power *= y;
      }
    }
  }
}

/** Σ_i w[i]·a[offset + i] for i < n, in order. */
function dot(w: Float64Array, a: Float64Array, offset: number, n: number): number {
  let sum = 0;
  for (let i = 0; i < n; i++) sum += (w[i] as number) * (a[offset + i] as number);
  return sum;
}

/**
 * The trapezoid sums over u = ln t of gaussianSoftmaxMoments, before the factor U_STEP: E[p], E[p²] and E[ln Σ e^z]
 * into sums[0 … 2], which hold the running sums (no code that optimised code has not yet seen after the loop).
 */
function momentSums(
  steps: number,
  low: number,
  k: number,
  n: number,
  weight: Float64Array,
  a0: Float64Array,
  a1: Float64Array,
  a2: Float64Array,
  C: number,
  sums: Float64Array,
): void {
  sums[0] = 0;
  sums[1] = 0;
  sums[2] = 0;
  for (let m = 0; m < steps; m++) {
    const t = Math.exp(low + m * U_STEP);
    const offset = m * k;
    // 1 − L_0(t), summed directly so that small t keeps its relative accuracy
    const oneMinusL0 = dot(weight, a0, offset, n);
    const logL0 = oneMinusL0 < 1 ? Math.log1p(-oneMinusL0) : NEG_INF;
    const others = Math.exp((C - 1) * logL0); // L_0(t)^(C−1): the transform of S
    sums[0] += dot(weight, a1, offset, n) * others; // t·L_1(t)·L_0^(C−1) dt/t·(t/t)
    sums[1] += dot(weight, a2, offset, n) * others; // t²·L_2(t)·L_0^(C−1)·t du
    // (e^(−t) − L_0^C)/t · t du = (1 − L_0^C) − (1 − e^(−t))
    sums[2] += -Math.expm1(C * logL0) + Math.expm1(-t);
  }
}

// memo of gaussianSoftmaxPairMoment by class count, variance, then correlation; `pairCached` counts its entries
const pairCache = new Map<number, Map<number, Map<number, number>>>();
let pairCached = 0;
/** Step in ln t and ln u for the pair moment: e^(−π²/0.5) ≈ 3e-9 relative, a quarter of the work of 0.25. */
const PAIR_STEP = 0.5;

/**
 * E[p_n·p_m] for one class of two softmaxes whose logits are N(0, s²) with correlation c between the two (the same
 * class of two samples of a batch) and independent across the C classes: 1/C² at c = 0, E[p²] at c = 1.
 *
 * Method: as gaussianSoftmaxMoments, with 1/(x·y) = ∫∫ e^(−t·x − u·y) dt du (Cressie et al. 1981), so that
 * E[p_n p_m] = ∫∫ M(t, u)·B(t, u)^(C−1) d(ln t) d(ln u) with B = E[exp(−t·e^(z_n) − u·e^(z_m))] and
 * M = E[t·e^(z_n)·u·e^(z_m)·exp(−t·e^(z_n) − u·e^(z_m))] for one class. Writing z = s(√c·a + √(1 − c)·ε) with the
 * common a and independent ε, both are one-dimensional integrals over a of products of the one-class transforms of
 * the ε part, taken by the trapezoid rule on one lattice (Trefethen & Weideman 2014), with a step of 0.5 in ln t and
 * ln u (discretisation error near e^(−π²/0.5) ≈ 3e-9). Below c·s² = 10⁻³ the
 * first-order Hermite expansion 1/C² + c·s²·(1/C − E[p²])²·C/(C − 1) (derived: Σ_k E[∂p_1/∂x_k]²) is used;
 * past `quadratureUpTo` (default 400) the quadrature there is carried on by the peaked limit's leading order
 * (pairPeakedLimit; the approach ∝ 1/s at c = 1, ∝ 1/(s²σ) for s·σ ≫ 1, σ² = 1 − c).
 * Returns NaN for a negative variance, a correlation outside [−1, 1] or fewer than one class.
 * @example gaussianSoftmaxPairMoment(1, 1, 10) === gaussianSoftmaxMoments(1, 10).second
 */
export function gaussianSoftmaxPairMoment(variance: number, correlation: number, classes: number, quadratureUpTo = PAIR_QUADRATURE_VARIANCE): number {
  if (!(variance >= 0) || !Number.isFinite(variance) || !(correlation >= -1 && correlation <= 1) || !(classes >= 1) || !Number.isFinite(classes)) return NaN;
  const C = classes;
  const c = Math.max(correlation, 0); // a negative correlation between samples is not modelled: taken as 0
  if (C === 1) return 1;
  if (c === 0 || variance === 0) return 1 / (C * C);
  if (c === 1) return gaussianSoftmaxMoments(variance, C).second;
  const commonVariance = c * variance;
  if (variance > quadratureUpTo) {
    // the quadrature at s₀ = 20 carried on by the peaked limit's leading order (derived): both rows are one-hot except
    // near-ties (within O(1)) of their largest two logits, of probability ∝ 1/s; where the samples' own parts differ
    // by s·σ ≫ 1 a tie in one alone cancels (σ(Δ) − [Δ > 0] is odd) and only joint ties, ∝ 1/(s²σ), remain. The
    // factor 1/(s·√(1 + s²σ²)) has both ends (derived); between them it is an interpolation, not derived
    const limit = pairPeakedLimit(c, C);
    const decay = (sq: number): number => 1 / Math.sqrt(sq * (1 + (1 - c) * sq));
    return limit + (gaussianSoftmaxPairMoment(PAIR_QUADRATURE_VARIANCE, c, C) - limit) * (decay(variance) / decay(PAIR_QUADRATURE_VARIANCE));
  }
  if (commonVariance < 1e-3) {
    const m2 = gaussianSoftmaxMoments(variance, C).second;
    return 1 / (C * C) + (commonVariance * (1 / C - m2) ** 2 * C) / (C - 1);
  }
  let byVariance = pairCache.get(C);
  let byCorrelation = byVariance?.get(variance);
  const hit = byCorrelation?.get(c);
  if (hit !== undefined) return hit;
  const result = pairMoment(variance, c, C, commonVariance);
  if (pairCached > 4096) {
    pairCache.clear();
    pairCached = 0;
    byVariance = undefined;
    byCorrelation = undefined;
  }
  if (byVariance === undefined) {
    byVariance = new Map();
    pairCache.set(C, byVariance);
  }
  if (byCorrelation === undefined) {
    byCorrelation = new Map();
    byVariance.set(variance, byCorrelation);
  }
  byCorrelation.set(c, result);
  pairCached++;
  return result;
}

// memo of pairPeakedLimit by class count, then correlation
const pairLimitCache = new Map<number, Map<number, number>>();

/**
 * The s → ∞ limit of gaussianSoftmaxPairMoment: P(class 1 is the largest logit in both samples) =
 * E[Φ₂(x, y; c)^(C−1)] over class 1's standardised logits (x, y), correlation c (the other classes independent).
 * With x = αu + βw, y = αu − βw (α² = (1 + c)/2, β² = (1 − c)/2; u, w independent N(0, 1)) and
 * Φ₂(x, y; c) = E_b[Φ((x − √c·b)/σ)·Φ((y − √c·b)/σ)], σ = √(1 − c) (the common-factor form), all three are trapezoid
 * sums (Trefethen & Weideman 2014) whose steps are multiples of one spacing d of the argument of Φ, so Φ is tabled
 * once on that lattice. Above c = 0.999 the b step would shrink as σ: there 1/C − limit ∝ σ (derived: the two
 * argmaxes differ only when the largest two logits lie within O(σ)) carries the value at 0.999 on to 1/C at c = 1.
 */
function pairPeakedLimit(c: number, C: number): number {
  if (c > PAIR_LIMIT_CORRELATION) {
    const edge = pairPeakedLimit(PAIR_LIMIT_CORRELATION, C);
    return 1 / C - (1 / C - edge) * Math.sqrt((1 - c) / (1 - PAIR_LIMIT_CORRELATION));
  }
  let byCorrelation = pairLimitCache.get(C);
  const hit = byCorrelation?.get(c);
  if (hit !== undefined) return hit;
  const sigma = Math.sqrt(1 - c);
  const root = Math.sqrt(c);
  const alpha = Math.sqrt((1 + c) / 2);
  // the largest of C normals has a spread near 1/√(2 ln C), which Φ^(C−1) follows in u and w: 0.3 of it per step
  const outer = Math.min(0.25, 0.3 / Math.sqrt(2 * Math.log(C)));
  const inner = Math.min(0.3, (GAUSS_STEP * root) / sigma); // b step in units of the argument: 0.3 as Z in the moments
  const d = Math.min(inner, (outer * alpha) / sigma, outer / Math.SQRT2);
  const kb = Math.floor(inner / d);
  const ku = Math.floor((outer * alpha) / sigma / d);
  const kw = Math.floor(outer / Math.SQRT2 / d);
  const hb = (kb * d * sigma) / root;
  const hu = (ku * d * sigma) / alpha;
  const hw = kw * d * Math.SQRT2;
  const nb = 2 * Math.ceil(Z_RANGE / hb) + 1;
  const nu = 2 * Math.ceil(Z_RANGE / hu) + 1;
  const nw = 2 * Math.ceil(Z_RANGE / hw) + 1;
  const cb = (nb - 1) / 2;
  const cu = (nu - 1) / 2;
  const cw = (nw - 1) / 2;
  const middle = ku * cu + kb * cb + kw * cw; // the argument d·m of Φ at table index m + middle
  const phi = new Float64Array(2 * middle + 1);
  for (let m = 0; m < phi.length; m++) phi[m] = normalCdf((m - middle) * d);
  const result = peakedPairSum(normalisedGaussianWeights(nu, hu), normalisedGaussianWeights(nw, hw), normalisedGaussianWeights(nb, hb), ku, kw, kb, middle, phi, C);
  if (byCorrelation === undefined) {
    byCorrelation = new Map();
    pairLimitCache.set(C, byCorrelation);
  }
  byCorrelation.set(c, result);
  return result;
}

/** The triple sum of pairPeakedLimit (w ≥ 0 only: Φ₂ is symmetric in x and y, so w and −w give the same term). */
function peakedPairSum(wu: Float64Array, ww: Float64Array, wb: Float64Array, ku: number, kw: number, kb: number, middle: number, phi: Float64Array, C: number): number {
  const cu = (wu.length - 1) / 2;
  const cw = (ww.length - 1) / 2;
  const cb = (wb.length - 1) / 2;
  let sum = 0;
  for (let i = 0; i < wu.length; i++) {
    for (let j = cw; j < ww.length; j++) {
      const weight = (wu[i] as number) * (ww[j] as number) * (j === cw ? 1 : 2);
      if (weight < 1e-300) continue;
      const mx = middle + ku * (i - cu) + kw * (j - cw) + kb * cb;
      const my = middle + ku * (i - cu) - kw * (j - cw) + kb * cb;
      let joint = 0;
      for (let l = 0; l < wb.length; l++) joint += (wb[l] as number) * (phi[mx - kb * l] as number) * (phi[my - kb * l] as number);
      if (joint > 0) sum += weight * Math.exp((C - 1) * Math.log(joint));
    }
  }
  return sum;
}

/** gaussianSoftmaxPairMoment past its special cases and its memo (commonVariance = c·variance). */
function pairMoment(variance: number, c: number, C: number, commonVariance: number): number {
  const sa = Math.sqrt(commonVariance);
  const se = Math.sqrt((1 - c) * variance);
  // ln t and ln u on steps of PAIR_STEP, the common part a on a grid with sa·h_a = PAIR_STEP/k (one lattice)
  // nodes of ln t below the cut add at most 2·(1 + h/e)·(h/(1 − e^(−h)))·e^(s²/2)·e^L in all (module comment: the
  // sum over ln u of u·e^z·exp(−u·e^z) is at most 1 + h/e, B ≤ 1), against E[p_n p_m] ≥ 1/C²
  const tail = 2 * (1 + PAIR_STEP / Math.E) * (PAIR_STEP / (1 - Math.exp(-PAIR_STEP)));
  const cut = Math.log(PAIR_CUT / tail) - 2 * Math.log(C) - variance / 2;
  // the a lattice at most 0.25 apart in ln t (strip error e^(−π²/0.25)), at most GAUSS_STEP apart in a
  const { k, spacing, n: na, weights: wa, steps, latticeLength, base } = logLattice(PAIR_STEP, Math.min(0.25, GAUSS_STEP * sa), sa, variance, C, cut);
  // one-class transforms of the ε part on the lattice τ = e^(base + j·spacing): 1 − E[exp(−τ e^(se·ε))] and
  // E[τ e^(se·ε)·exp(−τ e^(se·ε))]
  const he = se > 0 ? Math.min(GAUSS_STEP, 0.3 / se) : 1;
  const ne = se > 0 ? 2 * Math.ceil(Z_RANGE / he) + 1 : 1;
  const we = se > 0 ? normalisedGaussianWeights(ne, he) : Float64Array.of(1);
  const growth = new Float64Array(ne);
  for (let e = 0; e < ne; e++) growth[e] = Math.exp(se * (e - (ne - 1) / 2) * he);
  const offMinus = new Float64Array(latticeLength);
  const m1 = new Float64Array(latticeLength);
  pairTransforms(offMinus, m1, base, spacing, growth, we);
  return pairSum(steps, k, na, wa, offMinus, m1, C) * PAIR_STEP * PAIR_STEP;
}

/**
 * The one-class transforms of the ε part of gaussianSoftmaxPairMoment on the lattice, into offMinus and m1.
 * e^(se·ε_e) does not depend on the lattice point, so it is tabled once in `growth` (the same expression, so the same
 * values); past y = 39, e^(−y) is below half an ulp of 1 and expm1(−y) is exactly −1 (fdlibm returns −1 below
 * −56·ln 2), so it is not called.
 */
function pairTransforms(offMinus: Float64Array, m1: Float64Array, base: number, spacing: number, growth: Float64Array, we: Float64Array): void {
  const latticeLength = offMinus.length;
  for (let j = 0; j < latticeLength; j++) {
    const tau = Math.exp(base + j * spacing);
    offMinus[j] = offTransform(tau, growth, we);
    m1[j] = decayTransform(tau, growth, we);
  }
}

/** 1 − E[exp(−τ·e^(se·ε))] on the ε grid: Σ_e −w_e·expm1(−y_e), y_e = τ·growth[e]. */
function offTransform(tau: number, growth: Float64Array, we: Float64Array): number {
  let a0 = 0;
  for (let e = 0; e < growth.length; e++) {
    const y = tau * (growth[e] as number);
    a0 -= (we[e] as number) * (y > 39 ? -1 : Math.expm1(-y));
  }
  return a0;
}

/** E[τ·e^(se·ε)·exp(−τ·e^(se·ε))] on the ε grid: Σ_e w_e·y_e·e^(−y_e), the terms whose exponential underflows left out. */
function decayTransform(tau: number, growth: Float64Array, we: Float64Array): number {
  let a1 = 0;
  for (let e = 0; e < growth.length; e++) {
    const y = tau * (growth[e] as number);
    const decay = Math.exp(-y);
    if (decay > 0) a1 += (we[e] as number) * y * decay;
  }
  return a1;
}

/**
 * The double trapezoid sum over ln t and ln u of gaussianSoftmaxPairMoment (symmetric: the upper triangle twice).
 * A row stops where B^(C−1) underflows to exactly 0 for every later ln u: node by node 1 − B ≥ max(1 − L_0(t),
 * 1 − L_0(u)), and 1 − L_0 rises with u, so once (C − 1)·ln(1 − max(...)), with a margin of 10⁻¹² for rounding, is
 * below −800 (e^(−745) is the smallest subnormal double, IEEE 754-2019 binary64) every later term is 0 and the sum
 * is unchanged bit for bit.
 */
function pairSum(steps: number, k: number, na: number, wa: Float64Array, offMinus: Float64Array, m1: Float64Array, C: number): number {
  const single = new Float64Array(steps); // 1 − L_0 at each node of ln t
  for (let i = 0; i < steps; i++) single[i] = dot(wa, offMinus, i * k, na);
  let sum = 0;
  // one running sum over the rows, in the order of the double loop
  for (let i = 0; i < steps; i++) sum = pairRow(sum, i, steps, k, na, wa, offMinus, m1, C, single);
  return sum;
}

/** `sum` plus row i (ln t node i, ln u nodes j ≥ i) of pairSum's double sum. */
function pairRow(
  sum: number,
  i: number,
  steps: number,
  k: number,
  na: number,
  wa: Float64Array,
  offMinus: Float64Array,
  m1: Float64Array,
  C: number,
  single: Float64Array,
): number {
  for (let j = i; j < steps; j++) {
    if ((C - 1) * Math.log1p(-Math.max(single[i] as number, single[j] as number) * (1 - 1e-12)) < -800) break;
    const m = pairProduct(wa, m1, i * k, j * k, na);
    if (m === 0) continue;
    const oneMinusB = pairUnion(wa, offMinus, i * k, j * k, na);
    const logB = oneMinusB < 1 ? Math.log1p(-oneMinusB) : NEG_INF;
    const term = m * Math.exp((C - 1) * logB);
    sum += i === j ? term : 2 * term;
  }
  return sum;
}

/** M(t, u) of pairSum: Σ_r w_r·m1[io + r]·m1[jo + r]. */
function pairProduct(wa: Float64Array, m1: Float64Array, io: number, jo: number, na: number): number {
  let m = 0;
  for (let r = 0; r < na; r++) m += (wa[r] as number) * (m1[io + r] as number) * (m1[jo + r] as number);
  return m;
}

/** 1 − B(t, u) of pairSum: Σ_r w_r·(x + y − x·y), x and y the one-class 1 − L_0 at the two nodes. */
function pairUnion(wa: Float64Array, offMinus: Float64Array, io: number, jo: number, na: number): number {
  let oneMinusB = 0;
  for (let r = 0; r < na; r++) {
    const x = offMinus[io + r] as number;
    const y = offMinus[jo + r] as number;
    oneMinusB += (wa[r] as number) * (x + y - x * y);
  }
  return oneMinusB;
}

/**
 * The shared grids of both quadratures: ln t from `low` in `steps` steps of `step`, and a Gaussian variable x (of
 * scale `scale` in the exponent) on n points of step h with scale·h = step/k ≤ `target`, so that ln t + scale·x lies
 * on one lattice of `latticeLength` points base + j·spacing. The grid of ln t is anchored at −40 − ln C − s² (below
 * which every integrand is under e^(−37)) and starts at its last node at or below `cut` (module comment); above
 * −40 − ln C − s² + steps·step ≈ 10s + 5 the transforms ≈ Φ(−ln t/s) have vanished.
 */
function logLattice(step: number, target: number, scale: number, variance: number, C: number, cut: number) {
  const k = Math.ceil(step / target);
  const spacing = step / k;
  const h = spacing / scale;
  const n = 2 * Math.ceil(Z_RANGE / h) + 1;
  const anchor = -40 - Math.log(C) - variance;
  const skipped = cut > anchor ? Math.floor((cut - anchor) / step) : 0;
  const low = anchor + skipped * step;
  const steps = Math.ceil((10 * Math.sqrt(variance) + 45 + Math.log(C) + variance) / step) - skipped;
  return { k, spacing, n, weights: normalisedGaussianWeights(n, h), low, steps, latticeLength: steps * k + n, base: low - ((n - 1) / 2) * spacing };
}

/** Trapezoid weights of N(0, 1) on n points of step h centred on 0, normalised to sum to 1. */
function normalisedGaussianWeights(n: number, h: number): Float64Array {
  const w = new Float64Array(n);
  let total = 0;
  for (let i = 0; i < n; i++) {
    const x = (i - (n - 1) / 2) * h;
    w[i] = Math.exp(-0.5 * x * x);
    total += w[i] as number;
  }
  for (let i = 0; i < n; i++) w[i] = (w[i] as number) / total;
  return w;
}

/**
 * What the rows of an attention matrix hold on average, for rows of n keys whose logits z_j are independent N(0, s²):
 * the moments a softmax row's forward average and Jacobian need beyond E[p²].
 */
export interface SoftmaxRowMoments {
  /** E[Σ_j p_j²] (n·E[p²] of gaussianSoftmaxMoments) */
  sumSquares: number;
  /**
   * E[Σ_j p_j²·(1 − 2p_j + Σ_l p_l²)] = E[S + S² − 2·Σ_j p_j³], S = Σ_j p_j²: the share of key-wise independent
   * gradients g_j of unit variance that the softmax Jacobian keeps, E[Σ_j (p_j·(g_j − Σ_l p_l g_l))²] (own algebra)
   */
  centred: number;
  /**
   * dE[S]/d(s²) = E[S + 3S² − 4·Σ_j p_j³]: half of E[Δ_z S], the Laplacian of S = Σ_j p_j² over the logits (the heat
   * equation, d/dt E[f(z + √t·w)] = ½·E[Δf]; own algebra), how fast the rows concentrate as the logits spread
   */
  slope: number;
  /** E[(Σ_j p_j z_j)²]/s²: the second moment of the softmax-weighted logit, in units of the logits' variance */
  tilt: number;
  /** E[Σ_j p_j z_j]/s², which Stein's lemma fixes at 1 − E[S] (Stein 1981, Lemma 1): a check of the quadrature */
  tiltMean: number;
}

/**
 * Above this logit variance (s ≈ 45) the quadrature of gaussianSoftmaxRows would take over 3,000 nodes of ln t
 * (its grid spans about 20s); peakedRows carries its values on from here.
 */
const ROW_QUADRATURE_VARIANCE = 2000;

/**
 * Rows past ROW_QUADRATURE_VARIANCE: the quadrature at s₀² = ROW_QUADRATURE_VARIANCE carried on by the leading order
 * of the peaked limit (derived). A row is then one-hot except when its two largest logits lie within O(1) of each
 * other, which has probability f_D(0)·O(1) with f_D(0) = f_G(0)/s, G the gap of the two largest of n standard
 * normals: so 1 − E[S], the Jacobian's share and E[Σ p z]/s² (= 1 − E[S], Stein's lemma) fall as 1/s. There
 * Σ p_j x_j (x = z/s) differs from x_max by p₂·d/s, d = O(1), so E[(Σ p z)²]/s² − E[x_max²] falls as 1/s².
 * Continuous at s₀, and the one-hot limit (S = 1, no Jacobian, tilt E[x_max²]) only at s = ∞.
 */
function peakedRows(variance: number, minKeys: number, maxKeys: number): SoftmaxRowMoments[] {
  const anchor = softmaxRows(ROW_QUADRATURE_VARIANCE, minKeys, maxKeys);
  const r = Math.sqrt(ROW_QUADRATURE_VARIANCE / variance);
  const limit = maxSquares(minKeys, maxKeys);
  return anchor.map((row, i) => {
    const top = limit[i] as number;
    return {
      sumSquares: 1 - (1 - row.sumSquares) * r,
      centred: row.centred * r,
      // d/ds² of the line above, r = s₀/s
      slope: ((1 - row.sumSquares) * r) / (2 * variance),
      tilt: top + (row.tilt - top) * r * r,
      tiltMean: row.tiltMean * r,
    };
  });
}

/**
 * E[x_max²] of n = minKeys … maxKeys independent N(0, 1): ∫ x²·d(Φ(x)^n), by the trapezoid rule on [−9, 9] in
 * steps of 1/64 (φ(9) ≈ 1e-18; Trefethen & Weideman 2014 for a smooth integrand decaying at both ends).
 */
function maxSquares(minKeys: number, maxKeys: number): Float64Array {
  const count = maxKeys - minKeys + 1;
  const out = new Float64Array(count);
  const step = 1 / 64;
  for (let j = 0; j <= 2 * 64 * Z_RANGE; j++) {
    const x = -Z_RANGE + j * step;
    const cdf = normalCdf(x);
    const density = normalPdf(x) * x * x * step;
    // Φ^(n−1) by products over n; once it underflows it stays 0 for every longer row
    let power = Math.exp((minKeys - 1) * normalLogCdf(x));
    for (let i = 0; i < count && power > 0; i++) {
      out[i] = (out[i] as number) + (minKeys + i) * density * power;
      power *= cdf;
    }
  }
  return out;
}

/**
 * gaussianSoftmaxRows for every row length n = 1 … maxKeys at logit variance s² (index n − 1), to quadrature accuracy.
 *
 * Method as gaussianSoftmaxMoments (Laplace transform, Cressie et al. 1981; trapezoid rule, Trefethen & Weideman 2014):
 * with y = t·e^z and A_m(t) = E[y^m·e^(−y)] = t^m·L_m(t), E[p_1^m] = (1/Γ(m))·∫ A_m·L_0^(n−1) d(ln t),
 * E[p_1²·p_2²] = (1/6)·∫ A_2²·L_0^(n−2) d(ln t), E[p_1²·z_1²] = ∫ E[z²·y²·e^(−y)]·L_0^(n−1) d(ln t) and
 * E[p_1·p_2·z_1·z_2] = ∫ E[z·y·e^(−y)]²·L_0^(n−2) d(ln t) (1/x^m = (1/Γ(m))·∫ t^(m−1)·e^(−t·x) dt; own algebra), on the
 * lattice of gaussianSoftmaxMoments at the largest n (the smaller rows' integrands vanish below its anchor too), with
 * z = s·x taken at the Gaussian nodes, so that no ln y is formed. The powers L_0^(n−1) are built by repeated
 * products over n; past the first 128 lengths the sums are taken on a geometric grid of lengths and the rows between
 * interpolated (betweenRows, within 1e-9 of summing every length). Below s² = 10⁻⁴ the first-order expansion
 * p ≈ (1 + z − z̄)/n is used, above ROW_QUADRATURE_VARIANCE
 * the quadrature there carried on by the peaked limit's leading order (peakedRows), never exactly one-hot.
 * Returns an empty list for a non-finite or negative variance or fewer than one key.
 */
export function gaussianSoftmaxRows(variance: number, maxKeys: number): SoftmaxRowMoments[] {
  return softmaxRows(variance, 1, maxKeys);
}

/**
 * gaussianSoftmaxRows for rows of exactly `keys` keys only (full attention), without the sums of the shorter rows;
 * undefined where gaussianSoftmaxRows returns an empty list. `quadratureUpTo` moves the end of the quadrature
 * (default 2000, ROW_QUADRATURE_VARIANCE; its cost grows as the variance): the tests compare the peaked limit with it.
 */
export function gaussianSoftmaxRow(variance: number, keys: number, quadratureUpTo = ROW_QUADRATURE_VARIANCE): SoftmaxRowMoments | undefined {
  return softmaxRows(variance, keys, keys, quadratureUpTo)[0];
}

/** The rows of minKeys … maxKeys keys of gaussianSoftmaxRows (index n − minKeys). */
function softmaxRows(variance: number, minKeys: number, maxKeys: number, quadratureUpTo = ROW_QUADRATURE_VARIANCE): SoftmaxRowMoments[] {
  if (!(variance >= 0) || !Number.isFinite(variance) || !(maxKeys >= 1) || !Number.isInteger(maxKeys)) return [];
  if (variance > quadratureUpTo) return peakedRows(variance, minKeys, maxKeys);
  const rows: SoftmaxRowMoments[] = [];
  if (variance < SMALL_VARIANCE) {
    // p ≈ (1 + z − z̄)/n (derived): S = (1 + s²(1 − 1/n))/n, Σ p z ≈ z̄ + Σ z(z − z̄)/n of second moment
    // s²/n + s⁴(1 − 1/n)² and mean s²(1 − 1/n); the Jacobian's share to zeroth order
    for (let n = minKeys; n <= maxKeys; n++) {
      const spread = 1 - 1 / n;
      rows.push({ sumSquares: (1 + variance * spread) / n, centred: spread / n, slope: spread / n, tilt: 1 / n + variance * spread * spread, tiltMean: spread });
    }
    return rows;
  }
  const s = Math.sqrt(variance);
  // the cut of E[p²] in the module comment (K = e^(s²/2)/e against 1/n²), its K raised by 1 + s² + s⁴ for the
  // logit-weighted transforms (E[z²·e^z] = (s² + s⁴)·e^(s²/2)) and y³, y⁴ (y^m·e^(−y) ≤ y·((m − 1)/e)^(m−1))
  const h = U_STEP / (1 - Math.exp(-U_STEP));
  const cut = Math.log((MOMENT_CUT * Math.E) / (h * 2 * (1 + variance + variance * variance))) - 2 * Math.log(maxKeys) - gridTop(variance, s);
  const { k, spacing, n: nz, weights, low, steps, latticeLength, base } = logLattice(U_STEP, Math.min(0.3, GAUSS_STEP * s), s, variance, maxKeys, cut);
  // z = s·x at the Gaussian nodes (x on a grid of step h = spacing/s centred on 0)
  const wz = new Float64Array(nz);
  const wzz = new Float64Array(nz);
  for (let i = 0; i < nz; i++) {
    const z = (i - (nz - 1) / 2) * spacing;
    wz[i] = (weights[i] as number) * z;
    wzz[i] = (weights[i] as number) * z * z;
  }
  const a0 = new Float64Array(latticeLength);
  const a1 = new Float64Array(latticeLength);
  const a2 = new Float64Array(latticeLength);
  const a3 = new Float64Array(latticeLength);
  const a4 = new Float64Array(latticeLength);
  latticeTransforms(a0, [a1, a2, a3, a4], base, spacing);
  // running sums per row length: E[p²], E[p³], E[p⁴], E[p_1²p_2²], E[p z], E[p² z²], E[p_1 p_2 z_1 z_2], at the
  // lengths summed (all of them up to EXACT_ROWS, then a geometric grid: rowGrid)
  const grid = rowGrid(minKeys, maxKeys);
  const sums = Array.from({ length: 7 }, () => new Float64Array(grid.length));
  for (let m = 0; m < steps; m++) {
    const offset = m * k;
    const oneMinusL0 = dot(weights, a0, offset, nz);
    const l0 = Math.max(1 - oneMinusL0, 0);
    rowStep(sums, l0, dot(weights, a2, offset, nz), dot(weights, a3, offset, nz), dot(weights, a4, offset, nz), dot(wz, a1, offset, nz), dot(wzz, a2, offset, nz), minKeys, grid);
  }
  for (let g = 0; g < grid.length; g++) {
    const n = grid[g] as number;
    const at = (r: number): number => (sums[r] as Float64Array)[g] as number;
    const p2 = at(0) * U_STEP;
    const p3 = (at(1) * U_STEP) / 2;
    const p4 = (at(2) * U_STEP) / 6;
    const p2p2 = (at(3) * U_STEP) / 6;
    const pz = at(4) * U_STEP;
    const p2z2 = at(5) * U_STEP;
    const pzpz = at(6) * U_STEP;
    const S = n * p2;
    rows.push({
      sumSquares: S,
      centred: Math.max(S + n * p4 + n * (n - 1) * p2p2 - 2 * n * p3, 0),
      slope: Math.max(S + 3 * (n * p4 + n * (n - 1) * p2p2) - 4 * n * p3, 0),
      tilt: (n * p2z2 + n * (n - 1) * pzpz) / variance,
      tiltMean: (n * pz) / variance,
    });
  }
  return grid.length === maxKeys - minKeys + 1 ? rows : betweenRows(rows, grid);
}

/** Row lengths up to this many keys past the shortest are each summed; longer rows on a geometric grid (rowGrid). */
const EXACT_ROWS = 128;
// the grid's ratio past EXACT_ROWS: steps of 1/32 in ln n
const GRID_RATIO = Math.exp(1 / 32);

/**
 * The row lengths gaussianSoftmaxRows sums its quadrature at: every length of the first EXACT_ROWS, then lengths a
 * factor GRID_RATIO apart (rounded, distinct), and the longest. A long causal row set (thousands of lengths) then
 * costs a few hundred rows' sums; the lengths between are interpolated (betweenRows).
 */
function rowGrid(minKeys: number, maxKeys: number): Int32Array {
  const count = maxKeys - minKeys + 1;
  if (count <= EXACT_ROWS + 64) return Int32Array.from({ length: count }, (_, i) => minKeys + i);
  const lengths: number[] = [];
  for (let n = minKeys; n < minKeys + EXACT_ROWS; n++) lengths.push(n);
  for (let x = (minKeys + EXACT_ROWS - 1) * GRID_RATIO; x < maxKeys; x *= GRID_RATIO) {
    const n = Math.round(x);
    if (n > (lengths[lengths.length - 1] as number) && n < maxKeys) lengths.push(n);
  }
  lengths.push(maxKeys);
  return Int32Array.from(lengths);
}

// the points each row between the grid's lengths is interpolated through
const POINTS = 6;

/**
 * Every row length from the rows at the grid's lengths: those kept as they are, the lengths between by the quintic
 * through the six nearest grid rows of n·moment against ln n (each moment of n keys goes as 1/n or tends to a
 * constant, so n·moment is smooth in ln n; on steps of 1/32 in ln n past 128 keys the quintic's error is under 1e-9
 * of the value where four points left up to 5e-7, test/ops/softmax-rows.test.ts against each length's own quadrature;
 * Lagrange interpolation, e.g. Abramowitz & Stegun 25.2.2).
 */
function betweenRows(rows: SoftmaxRowMoments[], grid: Int32Array): SoftmaxRowMoments[] {
  const minKeys = grid[0] as number;
  const maxKeys = grid[grid.length - 1] as number;
  const points = grid.length;
  // n·moment at the grid's lengths, field by field, and ln n
  const squares = new Float64Array(points);
  const centred = new Float64Array(points);
  const slope = new Float64Array(points);
  const tilt = new Float64Array(points);
  const tiltMean = new Float64Array(points);
  const u = new Float64Array(points);
  for (let g = 0; g < points; g++) {
    const n = grid[g] as number;
    const row = rows[g] as SoftmaxRowMoments;
    squares[g] = n * row.sumSquares;
    centred[g] = n * row.centred;
    slope[g] = n * row.slope;
    tilt[g] = n * row.tilt;
    tiltMean[g] = n * row.tiltMean;
    u[g] = Math.log(n);
  }
  const w = new Float64Array(POINTS);
  // Π_{b≠a}(u_a − u_b) of the points from `lambdasAt` (they change only where n passes a grid length)
  const lambdas = new Float64Array(POINTS);
  let lambdasAt = -1;
  const out: SoftmaxRowMoments[] = [];
  let g = 0;
  for (let n = minKeys; n <= maxKeys; n++) {
    while ((grid[g] as number) < n) g++;
    if (grid[g] === n) {
      out.push(rows[g] as SoftmaxRowMoments);
      continue;
    }
    // grid[g − 1] < n < grid[g]: the points g − POINTS/2 … g + POINTS/2 − 1, shifted inside the grid
    const first = Math.min(Math.max(g - POINTS / 2, 0), points - POINTS);
    // the Lagrange weights in barycentric form: λ_a/(x − u_a) over their sum (Berrut & Trefethen 2004, SIAM Review
    // 46(3), eq. 4.2), λ_a = 1/Π_{b≠a}(u_a − u_b) (kept as the product); divided by n for the moment itself
    if (first !== lambdasAt) {
      for (let a = 0; a < POINTS; a++) {
        const ua = u[first + a] as number;
        let product = 1;
        for (let b = 0; b < POINTS; b++) if (b !== a) product *= ua - (u[first + b] as number);
        lambdas[a] = product;
      }
      lambdasAt = first;
    }
    const x = Math.log(n);
    let total = 0;
    for (let a = 0; a < POINTS; a++) {
      const weight = 1 / ((lambdas[a] as number) * (x - (u[first + a] as number)));
      w[a] = weight;
      total += weight;
    }
    for (let a = 0; a < POINTS; a++) w[a] = (w[a] as number) / (total * n);
    let v0 = 0;
    let v1 = 0;
    let v2 = 0;
    let v3 = 0;
    let v4 = 0;
    for (let a = 0; a < POINTS; a++) {
      const weight = w[a] as number;
      const at = first + a;
      v0 += weight * (squares[at] as number);
      v1 += weight * (centred[at] as number);
      v2 += weight * (slope[at] as number);
      v3 += weight * (tilt[at] as number);
      v4 += weight * (tiltMean[at] as number);
    }
    out.push({ sumSquares: v0, centred: v1, slope: v2, tilt: v3, tiltMean: v4 });
  }
  return out;
}

/**
 * One node of ln t of gaussianSoftmaxRows for every row length of the grid (rowGrid): the one-class transforms A_2,
 * A_3, A_4, E[z·y·e^(−y)] and E[z²·y²·e^(−y)], weighted by L_0^(n−1) (and L_0^(n−2) for the pairs), added into the running sums.
 */
function rowStep(sums: Float64Array[], l0: number, a2: number, a3: number, a4: number, zy: number, zzyy: number, minKeys: number, grid: Int32Array): void {
  const [s0, s1, s2, s3, s4, s5, s6] = sums as [Float64Array, Float64Array, Float64Array, Float64Array, Float64Array, Float64Array, Float64Array];
  const pair2 = a2 * a2;
  const pairZ = zy * zy;
  let power = minKeys === 1 ? 1 : l0 ** (minKeys - 1); // L_0^(n−1)
  let previous = minKeys === 1 ? 0 : l0 ** (minKeys - 2); // L_0^(n−2), none for n = 1
  const logL0 = Math.log(l0);
  // the powers carried from one length of the grid to the next: by a product per length (every length of the first
  // EXACT_ROWS), by l0 to the gap past them
  for (let g = 0; g < grid.length; g++) {
    if (power === 0 && previous === 0) break;
    s0[g] = (s0[g] as number) + a2 * power;
    s1[g] = (s1[g] as number) + a3 * power;
    s2[g] = (s2[g] as number) + a4 * power;
    s3[g] = (s3[g] as number) + pair2 * previous;
    s4[g] = (s4[g] as number) + zy * power;
    s5[g] = (s5[g] as number) + zzyy * power;
    s6[g] = (s6[g] as number) + pairZ * previous;
    const gap = g + 1 < grid.length ? (grid[g + 1] as number) - (grid[g] as number) : 1;
    if (gap === 1 || !(l0 > 0)) {
      // L_0 = 0 leaves 0 past one length either way
      previous = gap === 1 ? power : 0;
      power *= l0;
    } else {
      // L_0^(gap − 1) and L_0^gap from one exponential
      const factor = Math.exp((gap - 1) * logL0);
      previous = power * factor;
      power = previous * l0;
    }
  }
}
