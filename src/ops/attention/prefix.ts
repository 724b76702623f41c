/**
 * Causal attention over positions whose correlation depends on where they sit. A causal average's outputs are prefix
 * averages: with independent values of unit variance and expected weights E[p_ts] = 1/t (the t keys of row t are
 * exchangeable), Cov(h_t, h_t') = Σ_s E[p_ts]·E[p_t's] = 1/max(t, t') and E[h_t²] = V_t, the row's own Σ_s p_ts² plus
 * the query's tilt (common practice: two prefix means of independent terms over t ≤ t' positions have covariance 1/t'
 * and correlation √(t/t') in units of one term's variance). Added to a residual stream of independent positions, such
 * outputs make early positions far more alike than late ones: the stream's correlation at s ≠ s' is
 *   k(s, s') = w·g_s·g_s'/max(s, s'),  g_s = 1/√(1 + w·V_s),
 * w the average's weight in the stream. A later causal layer's row t averages only the pairs of its prefix, whose mean
 * correlation k̄_t ≈ 2w/t far exceeds the mean over all P positions that the rules carry (≈ 2w/P): its heads keep
 * E[v²]·(S_t + ρ_t·(1 − S_t) + (1 − ρ_t)·τ_t/D), ρ_t = f + (1 − f)·k̄_t, instead of the one mean correlation's
 * (own algebra; f the part every position and sample shares, which is the same at every pair).
 *
 * The rules carry one mean correlation between positions, so the shape is assumed: what positions share beyond what
 * samples share is taken to come from causal averages like this layer's (V_s its own rows), w the weight that gives
 * the carried mean; what exceeds the largest such mean (w → ∞) is taken as shared alike by every pair. Every sum is
 * over the separable k, so the cost is linear in P.
 */

import { findRootBracketed } from "../../numeric/roots.js";

/** A causal layer's rows: Σ_s p_ts², the tilt's excess τ_t − Σ_s p_ts² and E[S + S² − 2Σp³], index t − 1. */
export interface CausalRows {
  sumSquares: Float64Array;
  tiltExcess: Float64Array;
  /** what the softmax Jacobian leaves of row t (SoftmaxRowMoments.centred); absent, the query and key rows are not reweighed */
  centred?: Float64Array;
}

/** What a causal average makes of values whose positions correlate as the model above has it. */
export interface PrefixAverage {
  /** E[h²]/E[v²], the mean over rows */
  heads: number;
  /** mean over rows t ≠ t' of E[h_t·h_t']/E[v²] */
  pairs: number;
}

/** u = w/(1 + w) ∈ [0, 1] to 1e-9: the heads to about as much, far below what the model's assumption errs by */
const TOLERANCE = 1e-9;

/** The kernel's sums at u = w/(1 + w): the prefix sums O_t over ordered pairs s ≠ s' ≤ t, in `prefix`. */
function prefixSums(variances: Float64Array, u: number, prefix: Float64Array): void {
  let sum = 0;
  let pairs = 0;
  for (let s = 1; s <= variances.length; s++) {
    // k(s, s') = u·γ_s·γ_s'/max with γ_s = 1/√(1 − u + u·V_s) (the same kernel, numerator and denominator over 1 + w)
    const gs = 1 / Math.sqrt(1 - u + u * (variances[s - 1] as number));
    pairs += (2 * u * gs * sum) / s;
    prefix[s - 1] = pairs;
    sum += gs;
  }
}

/**
 * Heads and pair moments of causal attention over P positions whose values correlate by `position` on average over
 * pairs, of which `flat` is shared alike by every pair (the sample correlation), with rows `rows` over an input of width
 * `width` (module comment). Keys are exchangeable within a row, so the pairs of row t weigh (1 − S_t)/(t(t − 1)) each,
 * and rows t ≠ t' weigh s, s' by the expected weights 1/t·1/t'.
 */
export function prefixAverage(rows: CausalRows, width: number, flat: number, position: number): PrefixAverage {
  // the start pass runs again for the ledgers with the same numbers (memoised by the rows, which attentionRowSums keeps)
  return memoised(averages, rows, `${width}|${flat}|${position}`, () => average(rows, width, flat, position));
}

const averages = new WeakMap<CausalRows, Map<string, PrefixAverage>>();

// `make`'s result for a row set and the arguments `key` writes, kept per row set (a WeakMap on the rows
// attentionRowSums keeps), at most 257 argument sets a row set
function memoised<T>(store: WeakMap<CausalRows, Map<string, T>>, rows: CausalRows, key: string, make: () => T): T {
  let memo = store.get(rows);
  if (memo === undefined) {
    memo = new Map();
    store.set(rows, memo);
  }
  const hit = memo.get(key);
  if (hit !== undefined) return hit;
  const result = make();
  if (memo.size > 256) memo.clear();
  memo.set(key, result);
  return result;
}

/** The model's weight u = w/(1 + w) of the causal averages, with the share f every pair has alike, fitted to a mean. */
interface PrefixFit {
  u: number;
  f: number;
  /** V_s of each position, index s − 1 */
  variances: Float64Array;
  /** O_t at u, index t − 1 */
  prefix: Float64Array;
}

const fits = new WeakMap<CausalRows, Map<string, PrefixFit>>();

/** fit, memoised: the backward's value gradient reads the forward's fit of the same rows and values (its arrays are only read) */
function fitted(rows: CausalRows, width: number, flat: number, position: number): PrefixFit {
  return memoised(fits, rows, `${width}|${flat}|${position}`, () => fit(rows, width, flat, position));
}

function fit(rows: CausalRows, width: number, flat: number, position: number): PrefixFit {
  const P = rows.sumSquares.length;
  const D = Math.max(width, 1);
  const variances = new Float64Array(P);
  for (let t = 0; t < P; t++) variances[t] = (rows.sumSquares[t] as number) + (rows.tiltExcess[t] as number) / D;
  const prefix = new Float64Array(P);
  const allPairs = P * (P - 1);
  // the largest mean correlation causal averages give (w → ∞); beyond it the excess is shared alike by every pair
  prefixSums(variances, 1, prefix);
  const widest = allPairs > 0 ? (prefix[P - 1] as number) / allPairs : 0;
  let f = Math.max(flat, 0);
  let c = f < 1 ? (position - f) / (1 - f) : 0;
  if (c > widest) {
    f = (position - widest) / (1 - widest);
    c = widest;
  }
  // the mean grows with u from 0 to `widest`
  const mean = (x: number): number => {
    prefixSums(variances, x, prefix);
    return (prefix[P - 1] as number) / allPairs - c;
  };
  const u = c <= 0 ? 0 : c >= widest ? 1 : findRootBracketed(mean, 0, 1, TOLERANCE);
  prefixSums(variances, u, prefix);
  return { u, f, variances, prefix };
}

function average(rows: CausalRows, width: number, flat: number, position: number): PrefixAverage {
  const P = rows.sumSquares.length;
  const D = Math.max(width, 1);
  const allPairs = P * (P - 1);
  const { u, f, variances, prefix } = fitted(rows, width, flat, position);
  // heads: row t keeps S_t + ρ_t·(1 − S_t) + (1 − ρ_t)·τ_t/D with ρ_t = f + (1 − f)·k̄_t, k̄_t = O_t/(t(t − 1))
  let heads = 0;
  // rows t ≠ t': Σ_(s≤t, s'≤t', s≠s') k(s, s')/(t·t') summed over all t, t' is Σ_(s≠s') k(s, s')·a_s·a_s' with
  // a_s = Σ_(t≥s) 1/t; the rows' own terms t = t' are Σ_t O_t/t²
  let same = 0;
  for (let t = 1; t <= P; t++) {
    const S = rows.sumSquares[t - 1] as number;
    const kbar = t > 1 ? (prefix[t - 1] as number) / (t * (t - 1)) : 0;
    const rho = f + (1 - f) * kbar;
    heads += S + rho * (1 - S) + ((1 - rho) * (rows.tiltExcess[t - 1] as number)) / D;
    same += (prefix[t - 1] as number) / (t * t);
  }
  heads /= P;
  let a = 0;
  const column = new Float64Array(P);
  for (let s = P; s >= 1; s--) {
    a += 1 / s;
    column[s - 1] = a;
  }
  let weighted = 0;
  let total = 0;
  for (let s = 1; s <= P; s++) {
    const gs = 1 / Math.sqrt(1 - u + u * (variances[s - 1] as number));
    const as = column[s - 1] as number;
    total += (2 * u * gs * as * weighted) / s;
    weighted += gs * as;
  }
  // the independent part's pairs: 1/max(t, t') over t ≠ t', Σ_m 2(m − 1)/m = 2(P − H_P) over P(P − 1) pairs
  let harmonic = 0;
  for (let t = 1; t <= P; t++) harmonic += 1 / t;
  const independent = allPairs > 0 ? (2 * (P - harmonic)) / allPairs : 0;
  const kernelPairs = allPairs > 0 ? (total - same) / allPairs : 0;
  const pairs = f + (1 - f) * (independent + kernelPairs);
  return { heads, pairs };
}

/**
 * The value gradient of causal attention, δv_s = Σ_(t≥s) p_ts·δo_t: a sum over the LATER positions, the mirror of the
 * forward's prefix (own algebra below; E[p_ts] = 1/t and E[p_ts²] = S_t/t, the t keys of row t being exchangeable).
 * With Cov(δo_t, δo_t') = C_tt', summed over s:
 *   Σ_s E[δv_s²] = Σ_t S_t·C_tt + Σ_(t≠t') C_tt'/max(t, t')   (Σ_(s≤min) 1/(t·t') = 1/max),
 *   Σ_(s,s') E[δv_s·δv_s'] = Σ_(t,t') C_tt'                    (every row sums to 1).
 * The rules carry the gradient's mean square and mean pair correlation only, so its shape over positions is assumed,
 * in a pre-norm stack: the stream's variance at s grows as 1 + w·V_s with the causal averages the forward fit found
 * (fit), and a norm's backward divides position s's gradient by its input's rms, so E[δo_s²] ∝ e_s = γ_s²
 * (γ_s² = 1/(1 − u + u·V_s)); what the positions' gradients share beyond what samples share is taken as causal
 * averages above leave it, Σ_(t≥s) p_ts·δo_t at each position s (a sum over its suffix), whose covariance at s, s'
 * is √(e_s·e_s')·Q_max(s, s') with Q_m = Σ_(t≥m) e_t·(1 − S_t)/(t(t − 1)), and variance e_s·R_s, R_s = Σ_(t≥s) e_t·S_t/t.
 * So C_ss' = λ·√(e_s·e_s')·([s = s']·(1 + z·R_s) + [s ≠ s']·z·Q_max), λ making the mean square 1 and z the weight that
 * gives the carried mean pair correlation (closed form: the mean is z·B/(a₀ + z·a₁)); the part samples share is
 * taken alike at every pair. Every sum is over the separable kernel, so the cost is linear in P.
 */
export interface SuffixGradient {
  /** mean over positions of E[δv²]/E[δo²] */
  value: number;
  /** mean over positions s ≠ s' of E[δv_s·δv_s']/E[δo²] */
  pairs: number;
  /**
   * the query gradient's rows, Σ_t C_tt·(c_t + (1 − S_t)/W) over Σ_t (c_t + (1 − S_t)/W): δq_t weighs row t's own
   * head gradient, of mean square C_tt (in units of the mean), by what its softmax Jacobian leaves, c_t = E[S_t + S_t² −
   * 2Σp³] and the key pairs' (1 − S_t)/W, W their pair width (own algebra); 1 without the rows' c_t
   */
  query: number;
  /** the key gradient's independent rows, Σ_t C_tt·c_t over Σ_t c_t (each row's δs_t·q_t, as the query's) */
  key: number;
}

const suffixMemos = new WeakMap<CausalRows, Map<string, SuffixGradient>>();

/**
 * Value gradient moments of causal attention whose forward values correlate by `position` on average (of which `flat`
 * samples share; as prefixAverage) and whose head gradients correlate by `gradientPosition` on average over positions,
 * of which `gradientFlat` samples share.
 */
export function suffixGradient(
  rows: CausalRows,
  width: number,
  flat: number,
  position: number,
  gradientFlat: number,
  gradientPosition: number,
  pairWidth: number,
): SuffixGradient {
  const key = `${width}|${flat}|${position}|${gradientFlat}|${gradientPosition}|${pairWidth}`;
  return memoised(suffixMemos, rows, key, (): SuffixGradient => {
    const P = rows.sumSquares.length;
    if (P < 2) return { value: P === 1 ? 1 : 0, pairs: 0, query: 1, key: 1 };
    const allPairs = P * (P - 1);
    const { u, variances } = fitted(rows, width, flat, position);
    // e_s, the norm's 1/rms² at s: γ_s² of the forward's kernel
    const e = new Float64Array(P);
    for (let s = 0; s < P; s++) e[s] = 1 / (1 - u + u * (variances[s] as number));
    // R_s and Q_s, index s − 1, from the end
    const R = new Float64Array(P);
    const Q = new Float64Array(P);
    let r = 0;
    let q = 0;
    for (let t = P; t >= 1; t--) {
      const S = rows.sumSquares[t - 1] as number;
      const et = e[t - 1] as number;
      r += (et * S) / t;
      if (t > 1) q += (et * (1 - S)) / (t * (t - 1));
      R[t - 1] = r;
      Q[t - 1] = q;
    }
    // a₀ = mean e_s, a₁ = mean e_s·R_s, B = mean over s ≠ s' of √(e_s·e_s')·Q_max; with the sums the value needs
    let a0 = 0;
    let a1 = 0;
    let B = 0;
    let diagonal0 = 0;
    let diagonal1 = 0;
    let across = 0;
    let roots = 0;
    for (let m = 1; m <= P; m++) {
      const em = e[m - 1] as number;
      const S = rows.sumSquares[m - 1] as number;
      const rm = Math.sqrt(em);
      const Qm = Q[m - 1] as number;
      a0 += em;
      a1 += em * (R[m - 1] as number);
      B += 2 * rm * Qm * roots;
      diagonal0 += S * em;
      diagonal1 += S * em * (R[m - 1] as number);
      across += (2 * rm * Qm * roots) / m;
      roots += rm;
    }
    a0 /= P;
    a1 /= P;
    B /= allPairs;
    const rho = Math.min(Math.max(gradientPosition, -1 / (P - 1)), 1);
    let f = Math.min(Math.max(gradientFlat, 0), Math.max(rho, 0));
    let c = f < 1 ? (rho - f) / (1 - f) : 0;
    // the largest mean pair correlation suffix sums give (z → ∞); beyond it the excess is shared alike by every pair
    const widest = a1 > 0 ? B / a1 : 0;
    if (c > widest && widest < 1) {
      f = (rho - widest) / (1 - widest);
      c = widest;
    }
    const z = c > 0 ? (c >= widest ? Infinity : (c * a0) / (B - c * a1)) : 0;
    // the kernel's part: λ·(Σ S_t·e_t·(1 + z·R_t) + z·Σ_(t≠t') √(e_t·e_t')·Q_max/max), λ = 1/(a₀ + z·a₁) (z → ∞: the limit)
    const kernel = Number.isFinite(z) ? (diagonal0 + z * (diagonal1 + across)) / (a0 + z * a1) : (diagonal1 + across) / a1;
    // the flat part: Σ_t S_t + Σ_(t≠t') 1/max(t, t') = Σ_t S_t + 2(P − H_P) (as the forward's pairs)
    let harmonic = 0;
    let sumSquares = 0;
    for (let t = 1; t <= P; t++) {
      harmonic += 1 / t;
      sumSquares += rows.sumSquares[t - 1] as number;
    }
    const value = (f * (sumSquares + 2 * (P - harmonic)) + (1 - f) * kernel) / P;
    // Σ_(t,t') C_tt' = P·(1 + (P − 1)·ρ) in units of E[δo²]
    const pairs = (P * (1 + (P - 1) * rho) - P * value) / allPairs;
    let query = 1;
    let key = 1;
    const centred = rows.centred;
    if (centred !== undefined) {
      // row t's own head gradient, f + (1 − f)·C_tt of the kernel's part, weighs what its softmax Jacobian leaves
      const lambda = Number.isFinite(z) ? 1 / (a0 + z * a1) : 0;
      let queryRows = 0;
      let queryMean = 0;
      let keyRows = 0;
      let keyMean = 0;
      for (let t = 1; t <= P; t++) {
        const et = e[t - 1] as number;
        const kernelRow = Number.isFinite(z) ? lambda * et * (1 + z * (R[t - 1] as number)) : (et * (R[t - 1] as number)) / a1;
        const C = f + (1 - f) * kernelRow;
        const ct = centred[t - 1] as number;
        const spread = ct + (1 - (rows.sumSquares[t - 1] as number)) / Math.max(pairWidth, 1e-12);
        queryRows += C * spread;
        queryMean += spread;
        keyRows += C * ct;
        keyMean += ct;
      }
      query = queryMean > 0 ? queryRows / queryMean : 1;
      key = keyMean > 0 ? keyRows / keyMean : 1;
    }
    return { value, pairs, query, key };
  });
}
