/**
 * Multi-head self-attention on a features input x [positions P, width D], heads H of width d:
 *   q, k, v = x·W (each D → H·d): E[q²] = fan_in·var_w·E[x²] (Poole et al. 2016);
 *   logits s = q·k·c with c = 1/√d (scaling "query" or "logits") or 1 ("none"): Var[s] = d·E[q²]·E[k²]·c²,
 *     so unit q and k give variance d unscaled and 1 scaled (Vaswani et al. 2017, §3.2.1 footnote 4);
 *   probabilities p = softmax over the n keys of a row of independent Gaussian logits: E[p²] by quadrature
 *     (≈ e^Var[s]/n² while rows are spread, → 1/n as they concentrate; src/numeric/softmax.ts);
 *   head outputs o = Σ_j p_j v_j: E[o²] = E[v²]·(Σ_j p_j² + ρ·(1 − Σ_j p_j²) + (1 − ρ)·(τ − Σ_j p_j²)/D) for values whose positions are
 *     correlated by ρ: E[v²]/P for uniform attention over P independent keys, E[v²]·H_P/P under a causal mask (H_P the
 *     harmonic number: row i attends to i keys), and no shrinking at all for ρ = 1 (rank collapse, Dong et al. 2021);
 *     the softmax weighs keys by how far their input lies along the query's direction, so along that one of the
 *     input's D directions the average keeps τ = E[(Σ_j p_j z_j)²]/s² (≈ s² + Σp² for spread rows) instead of Σp²;
 *     under a causal mask row i averages only its own prefix, and what positions share beyond what samples share is
 *     taken as causal averages below leave it, far more among early positions than on average (prefix.ts);
 *   output = o·W_o (H·d → D).
 * Backward runs the same chain in reverse; under a causal mask the value gradient δv_s = Σ_(t≥s) p_ts·δo_t sums the later
 * positions, and the head gradients' size and pairs over positions are taken as a pre-norm stream and causal averages
 * above leave them, which also weigh the query and key gradients row by row (prefix.ts, suffixGradient). The softmax Jacobian gives a row Σ_j E[δ_s²] = E[S + S² − 2Σp³]·E[δ_p²]·(1 − ρ_v):
 * it removes the part of the values all positions share, and nearly everything of a concentrated row. The query and key gradients carry Σ_j p_j², so they are small while
 * attention is spread out; the query gradient sums δ_s·k over keys, where the keys' shared part cancels too (1 − ρ_k),
 * and pairs of keys add 1/D through the weights they share (D the input width).
 */
import type { GraphLayer } from "../../graph/types.js";
import type { AttentionLayer } from "../../spec/types.js";
import {
  NO_FACTORS,
  SOURCES,
  crossCorrelationOf,
  factor,
  fmt,
  gradientSum,
  hazardInput,
  linearGradient,
  linearOutput,
  positionCorrelationOf,
  sampleCorrelationOf,
  backwardSumHazard,
  productTerms,
  sharedOf,
  sumLogVar,
  transposedHazard,
  weightOf,
  weightSumHazard,
} from "../common.js";
import { gaussianSoftmaxRow, gaussianSoftmaxRows, type SoftmaxRowMoments } from "../../numeric/softmax.js";
import { densePullback } from "../dense/analytic.js";
import { prefixAverage, suffixGradient, type CausalRows } from "./prefix.js";
import { averagedExcess, mappedExcess, pooledExcessOf, sequenceExcessOf } from "../sequence-excess.js";
import type {
  AnalyticRule,
  BackwardResult,
  Curvature,
  Factor,
  ForwardResult,
  Gradient,
  InnerGradient,
  InnerTensor,
  OpContext,
  OpHazard,
  Signal,
  WeightGradientMoment,
} from "../types.js";

const SOURCE = "Vaswani et al. 2017, §3.2.1 and footnote 4: Var[q·k] = d·E[q²]·E[k²]";
const SOFTMAX_SOURCE = "softmax of N(0, Var[s]) logits, E[Σ_j p_j²] by quadrature (Cressie et al. 1981 Laplace transform)";
const AVERAGE_SOURCE =
  "attention average of correlated positions: E[o²] = E[v²]·(Σ_j p_j² + ρ·(1 − Σ_j p_j²)) (variance of a weighted mean; common practice), plus the query's tilt (own algebra)";
const PREFIX_SOURCE =
  "causal average of positions whose correlation comes from causal averages below: two prefix means of i.i.d. terms over t ≤ t' positions have covariance 1/t' (common practice); row t averages its own prefix's pairs (own algebra)";
const SUFFIX_SOURCE =
  "causal value gradient: δv_s = Σ_(t≥s) p_ts·δo_t, E[p_ts] = 1/t, so its sum over s is Σ_t S_t·E[δo_t²] + Σ_(t≠t') E[δo_t·δo_t']/max(t, t') (own algebra); a norm's backward divides each position by its input's rms (common practice)";
const CANCEL_SOURCE = "softmax Jacobian removes what all keys share: the part of E[v²] (E[k²]) common to positions cancels (derived)";

/**
 * Averaging over positions with weights p (Σ p = 1): the part of q all positions share passes, the rest shrinks by
 * `weights` (Σ p² for one row, or Σ_j p_ij·p_kj for two rows: the correlated sum of SCIENCE.md §2.1; common practice).
 */
function positionAverage(q: number, shared: number, weights: number): number {
  return (q - shared) * weights + shared;
}

/** Sums over the rows of an attention matrix. */
interface RowSums {
  /** mean over rows of Σ_j E[p_ij²] */
  sumSquares: number;
  /**
   * mean over rows of E[S + S² − 2·Σ_j p_j³], S = Σ_j p_j² (gaussianSoftmaxRows): what the softmax Jacobian leaves of
   * key-wise independent gradients, E[Σ_j p_j²·(g_j − Σ_l p_l·g_l)²] per unit E[g²] (own algebra). S·(1 − 1/n) for an
   * even row, far less for a concentrated one (Σp³ ≥ S² by Cauchy–Schwarz); nothing for a row of one key
   */
  centredSquares: number;
  /** mean over rows of dE[S]/d(s²) = E[S + 3S² − 4Σp³] (gaussianSoftmaxRows): how the rows concentrate as the logits spread */
  slope: number;
  /** E[p²] over the unmasked elements */
  elementSecond: number;
  /** unmasked elements per row on average; 1/keys is Σ_j p_ij·p_kj for two rows i ≠ k at initialisation */
  keys: number;
  /** spread of log2(1/n) over unmasked elements (different row lengths under a causal mask) */
  rowLog2Variance: number;
  /**
   * mean over rows of E[(Σ_j p_j z_j)²]/s² − E[Σ_j p_j²] for the row's logits z (gaussianSoftmaxRows): how much more of
   * the keys' input the average keeps along the direction the query picks out than along any other (headsTilt)
   */
  tiltExcess: number;
  /** a causal matrix's rows one by one (prefixAverage): Σ_j p_tj² and the tilt's excess of row t at index t − 1 */
  causalRows?: CausalRows;
}

function harmonic(n: number): number {
  if (n <= 0) return 0;
  if (n < 64) {
    let h = 0;
    for (let i = 1; i <= n; i++) h += 1 / i;
    return h;
  }
  // Euler–Maclaurin: H_n = ln n + γ + 1/(2n) − 1/(12n²) + 1/(120n⁴)
  return Math.log(n) + 0.5772156649015329 + 1 / (2 * n) - 1 / (12 * n * n) + 1 / (120 * n ** 4);
}

const rowLengthCache = new Map<number, number>();

/** Variance of log2 i over the unmasked elements of a causal P×P matrix (row i holds i of them), memoised by P. */
function causalRowLog2Variance(positions: number): number {
  const hit = rowLengthCache.get(positions);
  if (hit !== undefined) return hit;
  const unmasked = (positions * (positions + 1)) / 2;
  let m1 = 0;
  let m2 = 0;
  if (positions <= 4096) {
    for (let i = 1; i <= positions; i++) {
      const l = Math.log2(i);
      m1 += i * l;
      m2 += i * l * l;
    }
    m1 /= unmasked;
    m2 /= unmasked;
  } else {
    // continuous limit: density ∝ i on [0, P]: E[ln i] = ln P − ½, Var[ln i] = ¼
    m1 = (Math.log(positions) - 0.5) / Math.LN2;
    m2 = m1 * m1 + 0.25 / (Math.LN2 * Math.LN2);
  }
  const variance = Math.max(m2 - m1 * m1, 0);
  rowLengthCache.set(positions, variance);
  return variance;
}

const columnCache = new Map<number, number>();

/**
 * Mean over keys j of a_j², a_j = Σ_i E[p_ij] the expected weight key j gets from all rows: 1 under full attention;
 * under a causal mask E[p_ij] = 1/i for j ≤ i (the i keys of row i are exchangeable), so a_j = H_P − H_(j−1).
 * Memoised by P.
 */
function causalColumnSquares(positions: number): number {
  const hit = columnCache.get(positions);
  if (hit !== undefined) return hit;
  let a = 0;
  let sum = 0;
  for (let j = positions; j >= 1; j--) {
    a += 1 / j;
    sum += a * a;
  }
  const mean = positions > 0 ? sum / positions : 0;
  columnCache.set(positions, mean);
  return mean;
}

const rowCache = new Map<string, RowSums>();

/**
 * Row sums for P positions at logit variance s2, full or causal (row i of a causal matrix attends to its first i keys),
 * from the exact moments of softmax rows of independent N(0, s2) logits (gaussianSoftmaxRows); memoised.
 * tiltExcess, own algebra: a row's logits are z_j = a·x_j with a = Aᵀx_i (A = c·W_qᵀW_k), so the softmax tilts the
 * keys' inputs toward a: along a the weighted mean Σ_j p_j·x_j keeps E[x²]·τ, τ = E[(Σ_j p_j z_j)²]/s² (≈ s² + S for
 * spread rows, by Stein's lemma), along the D − 1 other directions E[x²]·S as for independent keys.
 */
export function attentionRowSums(positions: number, causal: boolean, s2: number): RowSums {
  const key = `${positions}|${causal}|${s2}`;
  const hit = rowCache.get(key);
  if (hit !== undefined) return hit;
  // +∞ (an overflowed logit variance) is the one-hot limit
  const variance = Math.min(s2, Number.MAX_VALUE);
  // full attention needs its one row length only
  const rows = causal ? gaussianSoftmaxRows(variance, positions) : [gaussianSoftmaxRow(variance, positions)].filter((r) => r !== undefined);
  let result: RowSums;
  if (rows.length < (causal ? positions : 1) || positions < 1) {
    result = { sumSquares: NaN, centredSquares: NaN, slope: NaN, elementSecond: NaN, keys: positions, rowLog2Variance: 0, tiltExcess: NaN };
  } else if (!causal) {
    const row = rows[0] as SoftmaxRowMoments;
    result = {
      sumSquares: row.sumSquares,
      centredSquares: row.centred,
      slope: row.slope,
      elementSecond: row.sumSquares / positions,
      keys: positions,
      rowLog2Variance: 0,
      tiltExcess: row.tilt - row.sumSquares,
    };
  } else {
    let total = 0;
    let centred = 0;
    let slope = 0;
    let tilt = 0;
    const centredRows = new Float64Array(positions);
    const causalRows: CausalRows = { sumSquares: new Float64Array(positions), tiltExcess: new Float64Array(positions), centred: centredRows };
    for (let i = 0; i < positions; i++) {
      const row = rows[i] as SoftmaxRowMoments;
      total += row.sumSquares;
      centred += row.centred;
      slope += row.slope;
      tilt += row.tilt - row.sumSquares;
      causalRows.sumSquares[i] = row.sumSquares;
      causalRows.tiltExcess[i] = row.tilt - row.sumSquares;
      centredRows[i] = row.centred;
    }
    const unmasked = (positions * (positions + 1)) / 2;
    result = {
      sumSquares: total / positions,
      centredSquares: centred / positions,
      slope: slope / positions,
      elementSecond: total / unmasked,
      keys: unmasked / positions,
      rowLog2Variance: causalRowLog2Variance(positions),
      tiltExcess: tilt / positions,
      causalRows,
    };
  }
  if (rowCache.size > 1024) rowCache.clear();
  rowCache.set(key, result);
  return result;
}

/** What the attention backward rule needs. */
export interface AttentionStash {
  input: Signal;
  query: Signal;
  key: Signal;
  value: Signal;
  heads: Signal;
  /** fan_in·var_w of the value projection: the heads are W_v times the attention-weighted inputs */
  valueGain: number;
  rows: RowSums;
  /** c² where s = c·(q·k) */
  scale2: number;
  headWidth: number;
}

function shapes(ctx: OpContext, layer: GraphLayer) {
  const spec = layer.spec as AttentionLayer;
  const P = layer.input.layout === "features" ? layer.input.positions : 1;
  const inner = spec.heads * spec.headWidth;
  const projection = [ctx.batch, P, inner];
  const matrix = [ctx.batch, spec.heads, P, P];
  const matrixElements = ctx.batch * spec.heads * P * P;
  return { spec, P, inner, projection, projectionElements: ctx.batch * P * inner, matrix, matrixElements };
}

export const attentionRule: AnalyticRule<AttentionStash> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<AttentionStash> {
    const { spec, P, inner, projection, projectionElements, matrix, matrixElements } = shapes(ctx, layer);
    const D = layer.input.layout === "features" ? layer.input.features : 1;
    const d = spec.headWidth;
    const project = (name: string): { signal: Signal; gain: number } => {
      const w = weightOf(layer, name);
      const gain = ctx.variance(w) * w.fanIn;
      const signal = linearOutput(gain * input.q, input.logVar, inner, gain * sharedOf(input));
      signal.positionCorrelation = positionCorrelationOf(input);
      return { signal, gain };
    };
    const query = project("query");
    const key = project("key");
    const value = project("value");
    const scale2 = spec.scaling === "none" ? 1 : 1 / d;
    const rawVariance = d * query.signal.q * key.signal.q;
    const logitVariance = rawVariance * scale2;
    const logits: Signal = {
      q: logitVariance,
      mean: 0,
      zeroFraction: 0,
      shape: "gaussian",
      logVar: sumLogVar(query.signal.q, query.signal.logVar, key.signal.q, key.signal.logVar, 1) * 4,
      gaussian: true,
    };
    const rows = attentionRowSums(P, spec.causal, logitVariance);
    const probabilities: Signal = {
      q: rows.elementSecond * (spec.causal ? rows.keys / P : 1),
      mean: 1 / P,
      zeroFraction: spec.causal ? (P - 1) / (2 * P) : 0,
      shape: "log-normal",
      elementLog2Spread: Math.sqrt(logitVariance / (Math.LN2 * Math.LN2) + rows.rowLog2Variance),
      bound: 1,
      logVar: 0,
      gaussian: false,
    };
    // averaging keeps what all positions of a sample share and shrinks the rest by Σ_j p_j²
    const valueShared = value.signal.shared ?? 0;
    const valuePositionShared = Math.max(positionCorrelationOf(value.signal) * value.signal.q, valueShared);
    // the query's tilt: along the direction a row's logits read from the keys' input, the average keeps τ instead of S
    // of the part positions do not share, one direction of the input's D (own algebra, rowTiltExcess)
    // under a causal mask, what positions share beyond what samples share is taken to come from causal averages below,
    // which make a row's own prefix more alike than all positions are (prefixAverage)
    const valueFlat = value.signal.q > 0 ? valueShared / value.signal.q : 0;
    const valuePosition = value.signal.q > 0 ? valuePositionShared / value.signal.q : 0;
    const prefix = rows.causalRows !== undefined ? prefixAverage(rows.causalRows, D, valueFlat, valuePosition) : undefined;
    const headsQ =
      prefix !== undefined
        ? value.signal.q * prefix.heads
        : positionAverage(value.signal.q, valuePositionShared, rows.sumSquares) + ((value.signal.q - valuePositionShared) * rows.tiltExcess) / Math.max(D, 1);
    const headsPairs = prefix !== undefined ? value.signal.q * prefix.pairs : positionAverage(value.signal.q, valuePositionShared, 1 / rows.keys);
    const heads: Signal = {
      q: headsQ,
      shared: valueShared,
      positionCorrelation: headsQ > 0 ? headsPairs / headsQ : 0,
      mean: 0,
      zeroFraction: 0,
      shape: "gaussian",
      logVar: value.signal.logVar,
      gaussian: true,
    };
    const averageRatio = value.signal.q > 0 ? headsQ / value.signal.q : rows.sumSquares;
    const wo = weightOf(layer, "output");
    const outGain = ctx.variance(wo) * wo.fanIn;
    const output = linearOutput(outGain * heads.q, heads.logVar, D, outGain * valueShared);
    output.positionCorrelation = heads.positionCorrelation ?? 0;
    // two features of the output covary over the data (featureCovariance): heads a, b are rows of W_v applied to the
    // averages x̄ of their heads, Cov(x̄^h, x̄^h') = κ·Cov(x) with κ = Σ_j p_ij² in one head and Σ_j E[p_ij]² (1/P full,
    // H_P/P causal) across two, so E[Cov_ab²] = var_v²·D·κ²·(Var[x]² + (D − 1)·E[Cov(x_k, x_l)²]); W_o then maps them as
    // a dense layer does (own algebra)
    const expectedRow = P > 0 ? (spec.causal ? harmonic(P) : 1) / P : 0;
    const kappa2 = inner > 1 ? ((d - 1) * rows.sumSquares * rows.sumSquares + (inner - d) * expectedRow * expectedRow) / (inner - 1) : 0;
    const inputVariance = Math.max(input.q - sharedOf(input), 0);
    const headsCovariance =
      headsQ > 0 && D > 0 ? ((value.gain * value.gain) / D) * kappa2 * (inputVariance * inputVariance + (D - 1) * (input.featureCovariance ?? 0) * input.q * input.q) / (headsQ * headsQ) : 0;
    const headsVariance = Math.max(headsQ - valueShared, 0);
    output.featureCovariance =
      output.q > 0 && inner > 0 ? ((outGain * outGain) / inner) * (headsVariance * headsVariance + (inner - 1) * headsCovariance * headsQ * headsQ) / (output.q * output.q) : 0;
    // a row's average moves within the span of its sequence's keys, then W_v and W_o map it (sequence-excess.ts)
    if (P > 1 && D > 0) output.sequenceExcess = mappedExcess(mappedExcess(averagedExcess(sequenceExcessOf(input, D), D, rows.keys), D, inner), inner, D);

    // the ledger factors, made only with a ledger (one closure instead of every factor and its wording in both passes)
    const forwardFactors = () => {
      const qFactor = (gain: number, name: string): Factor => factor(gain, () => `attention ${name}: fan_in·var_w = ${fmt(gain)}`, SOURCES.lengthMap);
      const logitFactor = factor(
        query.signal.q > 0 ? logitVariance / query.signal.q : 0,
        () => `attention logits: d·E[k²]·c² = ${d}·${fmt(key.signal.q)}·${fmt(scale2)}`,
        SOURCE,
      );
      const probFactor = factor(logitVariance > 0 ? probabilities.q / logitVariance : 0, () => `softmax over ${fmt(rows.keys)} keys: E[p²] = ${fmt(probabilities.q)}`, SOFTMAX_SOURCE);
      const headFactor = factor(
        averageRatio,
        () =>
          `attention average: Σ_j p_j² + ρ·(1 − Σ_j p_j²) + (1 − ρ)·(τ − Σ_j p_j²)/D = ${fmt(averageRatio)} with Σ_j p_j² = ${fmt(rows.sumSquares)}${spec.causal ? " (causal: H_P/P at init)" : " (1/P at init)"}, positions correlated by ρ = ${fmt(value.signal.q > 0 ? valuePositionShared / value.signal.q : 0)}${prefix !== undefined && valuePosition > valueFlat ? ` (beyond the ${fmt(valueFlat)} samples share, taken as causal averages': more within each row's prefix)` : ""} and the query's tilt τ − Σ_j p_j² = ${fmt(rows.tiltExcess)} over D = ${D} inputs`,
        prefix !== undefined && valuePosition > valueFlat ? PREFIX_SOURCE : AVERAGE_SOURCE,
      );
      const outFactor = factor(outGain, () => `attention output: fan_in·var_w = ${fmt(outGain)}`, SOURCES.lengthMap);
      const queryFactor = qFactor(query.gain, "query");
      const valueFactor = qFactor(value.gain, "value");
      return {
        query: [queryFactor],
        key: [qFactor(key.gain, "key")],
        value: [valueFactor],
        logits: [queryFactor, logitFactor],
        probabilities: [queryFactor, logitFactor, probFactor],
        heads: [valueFactor, headFactor],
        output: [valueFactor, headFactor, outFactor],
      };
    };
    const ledger = ctx.ledger ? forwardFactors() : undefined;

    const inner_: InnerTensor[] = [
      { suffix: "query", role: "pre-activation", shape: projection, elements: projectionElements, signal: query.signal, factors: ledger?.query ?? NO_FACTORS },
      { suffix: "key", role: "pre-activation", shape: projection, elements: projectionElements, signal: key.signal, factors: ledger?.key ?? NO_FACTORS },
      { suffix: "value", role: "pre-activation", shape: projection, elements: projectionElements, signal: value.signal, factors: ledger?.value ?? NO_FACTORS },
      {
        suffix: "logits",
        role: "pre-activation",
        shape: matrix,
        elements: spec.causal ? (ctx.batch * spec.heads * P * (P + 1)) / 2 : matrixElements,
        signal: logits,
        factors: ledger?.logits ?? NO_FACTORS,
      },
      {
        suffix: "probabilities",
        role: "activation",
        shape: matrix,
        elements: matrixElements,
        signal: probabilities,
        factors: ledger?.probabilities ?? NO_FACTORS,
      },
      { suffix: "heads", role: "activation", shape: projection, elements: projectionElements, signal: heads, factors: ledger?.heads ?? NO_FACTORS },
    ];

    const accumulated: Signal = { ...logits, q: rawVariance * (spec.scaling === "query" ? scale2 : 1) };
    const hazards: OpHazard[] = [
      {
        kind: "accumulation",
        input: hazardInput(query.signal, query.signal.q * key.signal.q * (spec.scaling === "query" ? scale2 : 1), query.signal.shape),
        inputElements: matrixElements * d,
        output: accumulated,
        outputElements: matrixElements,
        terms: d,
        guarded: false,
        detail: ctx.details
          ? () =>
              spec.scaling === "logits"
                ? `query·key summed over head width ${d} before the 1/√${d} scaling`
                : spec.scaling === "query"
                  ? `query·key summed over head width ${d}, query pre-scaled by 1/√${d}`
                  : `query·key summed over head width ${d}, never scaled`
          : "",
      },
      {
        kind: "softmax-exp",
        input: logits,
        inputElements: matrixElements,
        terms: P,
        guarded: spec.subtractMax,
        detail: ctx.details ? () => `exp of attention logits over ${P} keys${spec.causal ? " (causal mask)" : ""}${spec.subtractMax ? ", row maximum subtracted" : ", row maximum NOT subtracted"}` : "",
      },
      {
        kind: "accumulation",
        input: hazardInput(value.signal, value.signal.q * rows.elementSecond, value.signal.shape),
        inputElements: matrixElements * d,
        output: heads,
        outputElements: projectionElements,
        // the longest row sums P keys (a causal mask's last row attends to all of them; rows.keys is the mean row length)
        terms: P,
        guarded: false,
        detail: ctx.details ? () => (spec.causal ? `probability-weighted values summed over up to ${P} keys (the causal mask's longest row)` : `probability-weighted values summed over ${P} keys`) : "",
      },
      {
        kind: "accumulation",
        input: hazardInput(heads, heads.q * ctx.variance(wo), heads.shape),
        inputElements: projectionElements * D,
        output,
        outputElements: ctx.batch * P * D,
        terms: inner,
        guarded: false,
        detail: ctx.details ? () => `output projection summed over ${inner} inputs` : "",
      },
    ];
    return {
      output,
      factors: ledger?.output ?? NO_FACTORS,
      role: "activation",
      inner: inner_,
      hazards,
      stash: { input, query: query.signal, key: key.signal, value: value.signal, heads, valueGain: value.gain, rows, scale2, headWidth: d },
    };
  },

  backward(ctx: OpContext, layer: GraphLayer, stash: AttentionStash, output: Gradient): BackwardResult {
    const { P, inner, projection, projectionElements, matrix, matrixElements, spec } = shapes(ctx, layer);
    const d = stash.headWidth;
    const wo = weightOf(layer, "output");
    const wq = weightOf(layer, "query");
    const wk = weightOf(layer, "key");
    const wv = weightOf(layer, "value");
    const outGain = ctx.variance(wo) * wo.fanOut;
    const headsQ = outGain * output.q;
    const heads = linearGradient(headsQ, output.logVar, inner);
    heads.positionCorrelation = positionCorrelationOf(output);
    // W_oᵀ is the same for every sample and position: two samples' gradients keep what they share (as dense's backward)
    if (output.shared !== undefined) heads.shared = outGain * output.shared;
    if (output.crossCorrelation !== undefined) heads.crossCorrelation = output.crossCorrelation;
    // δv_j = Σ_i p_ij·δo_i, with E[δo_i·δo_i'] = E[δo²]·(ρ + (1 − ρ)·[i = i']): E[δv_j²] = E[δo²]·((1 − ρ)·Σ_i p_ij² +
    // ρ·a_j²), a_j = Σ_i p_ij the weight key j gets (its mean taken, 1 full, H_P − H_(j−1) causal). Two keys j ≠ j'
    // share (1 − ρ)·Σ_i p_ij·p_ij' + ρ·a_j·a_j', where Σ_(j≠j') p_ij·p_ij' = 1 − Σ_j p_ij² in every row and
    // Σ_(j≠j') a_j·a_j' = P² − Σ_j a_j² (own algebra)
    const headsPositionShared = headsQ * heads.positionCorrelation;
    const columnSquares = spec.causal ? causalColumnSquares(P) : 1;
    const inWidth = layer.input.layout === "features" ? layer.input.features : 1;
    // (x̃_j·x̃_j')² has mean tr(Σ̃_s²) = D·E[x̃²]²·(1 + ε) over two keys of one sequence, ε how unevenly the sequence's
    // deviations fill the features (sequenceExcess; absent, from featureCovariance): a narrow layer below, or a gated
    // one whose units each sequence scales by gains of its own, fills fewer directions (own algebra). Two keys of two
    // sequences pair through the covariance pooled over sequences. Under a causal mask the pooled width stays: with the
    // sequence's own, a four-block causal tagger's query and key gradients came out up to 0.24 binade above the float64
    // simulation, with the pooled one within 0.15 (test/magnitude/attention-sequence-width.test.ts); why is not known
    const pooledPairWidth = inWidth / (1 + pooledExcessOf(stash.input, inWidth));
    const pairWidth = spec.causal ? pooledPairWidth : inWidth / (1 + sequenceExcessOf(stash.input, inWidth));
    // under a causal mask δv_s sums the later positions' δo, whose size and pairs are taken as a pre-norm stack and causal
    // averages above leave them (suffixGradient)
    const valueSignalShared = stash.value.shared ?? 0;
    const suffix =
      stash.rows.causalRows !== undefined && stash.value.q > 0 && headsQ > 0
        ? suffixGradient(
            stash.rows.causalRows,
            inWidth,
            valueSignalShared / stash.value.q,
            Math.max(positionCorrelationOf(stash.value) * stash.value.q, valueSignalShared) / stash.value.q,
            sampleCorrelationOf(heads),
            heads.positionCorrelation,
            pairWidth,
          )
        : undefined;
    const valueQ = suffix !== undefined ? headsQ * suffix.value : (headsQ - headsPositionShared) * stash.rows.sumSquares + headsPositionShared * columnSquares;
    const valuePositionShared =
      suffix !== undefined
        ? headsQ * suffix.pairs
        : P > 1
          ? ((headsQ - headsPositionShared) * (1 - stash.rows.sumSquares) + headsPositionShared * (P - columnSquares)) / (P - 1)
          : valueQ;
    const valuePositionCorrelation = valueQ > 0 ? valuePositionShared / valueQ : 0;
    const probQ = d * headsQ * stash.value.q;
    const unmaskedShare = spec.causal ? (P + 1) / (2 * P) : 1;
    const valueApart = 1 - positionCorrelationOf(stash.value);
    const keyApart = 1 - positionCorrelationOf(stash.key);
    // δs_ij = p_ij·δo_i·(v_j − v̄_i): each row keeps E[S + S² − 2Σp³] of the values' deviations (centredSquares)
    const centredElement = spec.causal ? (stash.rows.centredSquares * P) / ((P * (P + 1)) / 2) : stash.rows.centredSquares / Math.max(P, 1);
    const logitQ = centredElement * probQ * unmaskedShare * valueApart;
    // δq_i = c·Σ_j p_ij·(δo_i·ṽ_j)·k̃_j over the deviations ṽ, k̃ (what positions share cancels). With W_v and W_k the same
    // for every key, two keys j ≠ j' pair through (x̃_j·x̃_j')², of mean D·E[x̃²]² for an input of width D filled evenly:
    // besides the Σ_j p_ij² of independent keys, every pair of keys adds 1/D_s (pairWidth), and the pairs of two samples,
    // which share δo_n·δo_m, 1/D of the pooled covariance (own algebra)
    const queryScale = d * stash.scale2 * headsQ * stash.value.q * valueApart * stash.key.q * keyApart;
    const queryCoherent = queryScale / pairWidth;
    // under a causal mask row t's own head gradient, larger or smaller than the mean, weighs its row (suffixGradient)
    const queryQ = (stash.rows.centredSquares * queryScale + (1 - stash.rows.sumSquares) * queryCoherent) * (suffix?.query ?? 1);
    // δk_j = c·Σ_i p_ij·(δo_i·ṽ_j)·q_i: two rows i ≠ i' of one sample pair by E[δo_i·δo_i']·E[q_i·q_i'], the head
    // gradients' and the queries' position correlations (nothing cancels the part all queries share), so besides the
    // Σ_i p_ij² of independent rows the column adds ρ_o·ρ_q·(a_j² − Σ_i p_ij²), a_j = Σ_i p_ij (own algebra)
    const rowPairs = positionCorrelationOf(heads) * positionCorrelationOf(stash.query);
    const keyColumn = stash.rows.centredSquares * (suffix?.key ?? 1) + rowPairs * Math.max(columnSquares - stash.rows.sumSquares, 0);
    const keyQ = keyColumn * d * stash.scale2 * headsQ * stash.value.q * valueApart * stash.query.q;
    const zeroMasked = spec.causal ? (P - 1) / (2 * P) : 0;
    const g = (q: number, zeroFraction = 0): Gradient => ({ q, zeroFraction, shape: "gaussian", logVar: heads.logVar });
    const valueGradient: Gradient = { q: valueQ, zeroFraction: 0, shape: "gaussian", logVar: heads.logVar, positionCorrelation: valuePositionCorrelation };
    // two samples: every row of p sums to 1, so Σ_j δv_j = Σ_i δo_i in each sample and the pairs of two samples keep
    // their total T = E[δo²]·P·(ρ_sample + (P − 1)·ρ_cross) (exact). Two samples' attention being independent,
    // E[p_n,ij·p_m,i'j'] = E[p_ij]·E[p_i'j'] = e_ij·e_i'j', so one key j of two samples shares
    // E[δo²]·(ρ_cross·a_j² + (ρ_sample − ρ_cross)·Σ_i e_ij²) with a_j = Σ_i e_ij; on average over keys
    // ρ_cross·mean(a_j²) + (ρ_sample − ρ_cross)·mean over rows of Σ_j e_ij² (1 and 1/P with full attention, where
    // e_ij = 1/P; H_P/P causal), and two keys the rest of T (own algebra)
    const headsSample = sampleCorrelationOf(heads);
    const headsCross = crossCorrelationOf(heads);
    const pairTotal = headsQ * P * (headsSample + (P - 1) * headsCross);
    const rowSquares = P > 0 ? (spec.causal ? harmonic(P) : 1) / P : 0;
    const valueSamplePair = headsQ * (headsCross * columnSquares + (headsSample - headsCross) * rowSquares);
    const valueCrossPair = P > 1 ? (pairTotal - P * valueSamplePair) / (P * (P - 1)) : valueSamplePair;
    if (valueSamplePair !== 0) valueGradient.shared = valueSamplePair;
    valueGradient.crossCorrelation = valueQ > 0 ? valueCrossPair / valueQ : 0;
    // δq_i weighs the same keys' and values' deviations in every row, so rows share what their δo share; δk_j weighs
    // key j's own value deviation (its pairs below). Both are sums of δo·(v_j − Σ_l p_il v_l), where the part
    // of the values two samples share cancels. Two samples' query gradients still pair through the shared W_v and W_k,
    // by the 1/D term above (of the covariance pooled over sequences) times what their δo share; their key gradients pair through two different dot products
    // x̃_n,j·x̃_m,j and x̃_n,i·x̃_m,i', of mean 0, so they share nothing (own algebra)
    const queryGradient: Gradient = { q: queryQ, zeroFraction: 0, shape: "gaussian", logVar: heads.logVar, positionCorrelation: heads.positionCorrelation ?? 0 };
    const queryBetween = queryScale / pooledPairWidth;
    const querySamplePair = queryBetween * headsSample;
    const queryCrossPair = queryBetween * headsCross;
    if (querySamplePair !== 0) queryGradient.shared = querySamplePair;
    queryGradient.crossCorrelation = queryQ > 0 ? queryCrossPair / queryQ : 0;
    // every row of the softmax Jacobian sums to zero, so Σ_j δk_j = c·Σ_i q_i·Σ_j δs_ij = 0 in each sample: the P keys'
    // gradients pair at −1/(P − 1) on average (own algebra), and the key path adds nothing to a sum over positions
    const keyPositionCorrelation = P > 1 ? -1 / (P - 1) : 0;
    const keyGradient: Gradient = { q: keyQ, zeroFraction: 0, shape: "gaussian", logVar: heads.logVar, positionCorrelation: keyPositionCorrelation };
    const queryInput = ctx.variance(wq) * wq.fanOut * queryQ;
    const valueInput = ctx.variance(wv) * wv.fanOut * valueQ;
    const keyInput = ctx.variance(wk) * wk.fanOut * keyQ;
    const inputQ = queryInput + keyInput + valueInput;
    // the ledger factors, made only with a ledger (one closure instead of every factor and its wording in both passes)
    const backwardFactors = () => {
      const headFactor = factor(outGain, () => `attention output: fan_out·var_w = ${fmt(outGain)}`, SOURCES.backward);
      const probFactor = factor(d * stash.value.q, () => `attention: d·E[v²] = ${d}·${fmt(stash.value.q)}`, SOURCE);
      const logitFactor = factor(
        centredElement * unmaskedShare * valueApart,
        // under a causal mask E[p²] is per unmasked element, and the masked share of the logits' gradient is zero
        () =>
          spec.causal
            ? `softmax Jacobian: E[S + S² − 2Σp³]/n·(1 − ρ_v)·(unmasked share) = ${fmt(centredElement)}·${fmt(valueApart)}·${fmt(unmaskedShare)}`
            : `softmax Jacobian: E[S + S² − 2Σp³]/n·(1 − ρ_v) = ${fmt(centredElement)}·${fmt(valueApart)}`,
        valueApart < 1 ? CANCEL_SOURCE : SOFTMAX_SOURCE,
      );
      const queryFactor = factor(
        queryQ / Math.max(headsQ, 1e-300),
        () =>
          `attention query: (E[S + S² − 2Σp³] + (1 − S)/D_s)·d·c²·E[v²](1 − ρ_v)·E[k²](1 − ρ_k) = ${fmt(queryQ / Math.max(headsQ, 1e-300))} with D_s = ${fmt(pairWidth)} of the ${inWidth} input features filled by one sequence's deviations`,
        SOURCE,
      );
      const keyFactor = factor(
        keyQ / Math.max(headsQ, 1e-300),
        () => `attention key: (E[S + S² − 2Σp³] + ρ_o·ρ_q·(mean a_j² − S))·d·c²·E[v²](1 − ρ_v)·E[q²] = ${fmt(keyQ / Math.max(headsQ, 1e-300))} with ρ_o·ρ_q = ${fmt(rowPairs)}`,
        SOURCE,
      );
      const valueFactor = factor(
        headsQ > 0 ? valueQ / headsQ : 0,
        () =>
          suffix !== undefined
            ? `attention value (causal): Σ_t S_t·C_tt + Σ_(t≠t') C_tt'/max(t, t') over P = ${fmt(headsQ > 0 ? valueQ / headsQ : 0)}, the head gradients' C taken as a pre-norm stream and causal averages above leave them`
            : `attention value: (1 − ρ)·Σ_i p_ij² + ρ·mean a_j² = ${fmt(headsQ > 0 ? valueQ / headsQ : 0)} with mean a_j² = ${fmt(columnSquares)}`,
        suffix !== undefined ? SUFFIX_SOURCE : AVERAGE_SOURCE,
      );
      const inputFactor = factor(headsQ > 0 ? inputQ / headsQ : 0, () => `attention input: value path Σp²·fan_out·var_w plus query and key paths = ${fmt(headsQ > 0 ? inputQ / headsQ : 0)}`, SOURCES.backward);
      return {
        heads: [headFactor],
        probabilities: [headFactor, probFactor],
        logits: [headFactor, probFactor, logitFactor],
        query: [headFactor, queryFactor],
        key: [headFactor, keyFactor],
        value: [headFactor, valueFactor],
        input: [headFactor, inputFactor],
      };
    };
    const ledger = ctx.ledger ? backwardFactors() : undefined;
    const innerGradients: InnerGradient[] = [
      { suffix: "heads", shape: projection, elements: projectionElements, gradient: heads, factors: ledger?.heads ?? NO_FACTORS },
      {
        suffix: "probabilities",
        shape: matrix,
        elements: matrixElements,
        gradient: g(probQ),
        factors: ledger?.probabilities ?? NO_FACTORS,
      },
      { suffix: "logits", shape: matrix, elements: matrixElements, gradient: g(logitQ, zeroMasked), factors: ledger?.logits ?? NO_FACTORS },
      {
        suffix: "query",
        shape: projection,
        elements: projectionElements,
        gradient: queryGradient,
        factors: ledger?.query ?? NO_FACTORS,
      },
      {
        suffix: "key",
        shape: projection,
        elements: projectionElements,
        gradient: keyGradient,
        factors: ledger?.key ?? NO_FACTORS,
      },
      {
        suffix: "value",
        shape: projection,
        elements: projectionElements,
        gradient: valueGradient,
        factors: ledger?.value ?? NO_FACTORS,
      },
    ];
    const N = ctx.batch * P;
    const wg = (weight: string, x: Signal, delta: Gradient, logVar: number, alignedQ = 0): WeightGradientMoment => ({
      weight,
      q: gradientSum(ctx.batch, P, delta, x) + alignedQ,
      alignedQ,
      coherentQ: N * N * x.q * delta.q,
      terms: N,
      zeroFraction: 0,
      logVar,
      rule: ctx.ledger
        ? () => `sum of ${N} products (batch × positions) of input and gradient, plus the parts positions and samples share${alignedQ > 0 ? " and the part the loss's curvature aligns" : ""}`
        : "",
    });
    const input = linearGradient(inputQ, heads.logVar, inWidth);
    input.positionCorrelation =
      inputQ > 0 ? (valueInput * valuePositionCorrelation + queryInput * (queryGradient.positionCorrelation ?? 0) + keyInput * keyPositionCorrelation) / inputQ : 0;
    // what two samples share reaches the input by the value and query paths (the key gradients share nothing across
    // samples); W_vᵀ and W_qᵀ keep their pair moments, and the independent W_v, W_q leave no pairs between the paths
    // (own algebra)
    const valueMap = ctx.variance(wv) * wv.fanOut;
    const queryMap = ctx.variance(wq) * wq.fanOut;
    input.shared = valueMap * valueSamplePair + queryMap * querySamplePair;
    input.crossCorrelation = inputQ > 0 ? (valueMap * valueCrossPair + queryMap * queryCrossPair) / inputQ : 0;
    // The value and key weight gradients sum over keys j terms whose gradient depends on the key's own input x_j through
    // p_ij; regrouped by rows they are sums of independent per-row terms (own algebra): Σ_j δv_j·x_jᵀ = Σ_i δo_i·x̄_iᵀ with
    // x̄_i = Σ_j p_ij·x_j (the heads before W_v), and Σ_j δk_j·x_jᵀ = c·Σ_i q_i·ξ_iᵀ with ξ_i = Σ_j δs_ij·x_j, whose
    // second moment c²·E[ξ²] = E[δq²]/(fan_in·var_w of W_k) since δq_i = c·W_k·ξ_i
    const gainV = stash.valueGain > 0 ? stash.valueGain : 1;
    const averagedInput: Signal = { ...stash.heads, q: stash.heads.q / gainV, shared: (stash.heads.shared ?? 0) / gainV };
    // the loss's curvature M at the output (start of the horizon) aligns a part of the output and value weight gradients,
    // the same in every micro-batch: N²·E[x²]²·var_w·(row squares of the curvature each weight sees), W_o seeing M and
    // W_v (through h = W_v·x̄) M_h = W_oᵀ·M·W_o (own algebra, as dense's and the gated layer's weights)
    const curvature = output.curvature;
    const headsCurvature = curvature === undefined ? undefined : densePullback(curvature, ctx.variance(wo), wo.fanOut, inner);
    const outputAligned = curvature === undefined ? 0 : N * N * stash.heads.q * stash.heads.q * ctx.variance(wo) * curvature.rowSquares;
    const valueAligned = headsCurvature === undefined ? 0 : N * N * averagedInput.q * averagedInput.q * ctx.variance(wv) * headsCurvature.rowSquares;
    if (headsCurvature !== undefined) {
      const expectedRow = P > 0 ? (spec.causal ? harmonic(P) : 1) / P : 0;
      input.curvature = attentionPullback(headsCurvature, {
        sameHead: stash.rows.sumSquares,
        logitVariance: d * stash.query.q * stash.key.q * stash.scale2,
        acrossHeads: expectedRow,
        headWidth: d,
        inner,
        queryLogit: stash.scale2 * stash.rows.slope * stash.value.q * valueApart * stash.key.q * keyApart,
        keyLogit: stash.scale2 * stash.rows.slope * stash.query.q * stash.value.q * valueApart,
        value: ctx.variance(wv),
        query: ctx.variance(wq),
        key: ctx.variance(wk),
        width: inWidth,
      });
    }
    const keyMap = ctx.variance(wk) * wk.fanIn;
    const keyRows: Gradient = { ...queryGradient, q: keyMap > 0 ? queryQ / keyMap : 0 };
    if (queryGradient.shared !== undefined && keyMap > 0) keyRows.shared = queryGradient.shared / keyMap;
    // the sums this backward pass accumulates (Vaswani et al. 2017's products, differentiated): W_oᵀ·δ over the D
    // outputs; δp = δo·vᵀ over the head width; δv_j = Σ_i p_ij·δo_i and δk_j = c·Σ_i δs_ij·q_i over the queries, and
    // δq_i = c·Σ_j δs_ij·k_j over the keys, P terms for the longest row or column of a causal mask as of a full one
    // (each product's mean square over the unmasked elements: E[p²] and E[δs²] there); the four weight gradients over
    // batch × positions; δ_x = W_qᵀ·δq + W_kᵀ·δk + W_vᵀ·δv over 3·H·d terms
    const details = ctx.details;
    const unmaskedLogitQ = unmaskedShare > 0 ? logitQ / unmaskedShare : 0;
    const hazards: OpHazard[] = [
      transposedHazard(details, ctx.variance(wo), output, wo.fanOut, heads, projectionElements, "activation-gradient:heads", "attention output W_oᵀ·δ"),
      backwardSumHazard(details, productTerms(headsQ * stash.value.q, 0, heads.logVar), d, g(probQ), matrixElements, "activation-gradient:probabilities", "attention δo·vᵀ"),
      backwardSumHazard(details, productTerms(stash.scale2 * unmaskedLogitQ * stash.key.q, 0, heads.logVar), P, queryGradient, projectionElements, "activation-gradient:query", "attention δs·k over keys"),
      backwardSumHazard(details, productTerms(stash.scale2 * unmaskedLogitQ * stash.query.q, 0, heads.logVar), P, keyGradient, projectionElements, "activation-gradient:key", "attention δsᵀ·q over queries"),
      backwardSumHazard(details, productTerms(stash.rows.elementSecond * headsQ, 0, heads.logVar), P, valueGradient, projectionElements, "activation-gradient:value", "attention pᵀ·δo over queries"),
      weightSumHazard(details, wq, "weight-gradient:query", stash.input, queryGradient, N),
      weightSumHazard(details, wk, "weight-gradient:key", stash.input, keyGradient, N),
      weightSumHazard(details, wv, "weight-gradient:value", stash.input, valueGradient, N),
      weightSumHazard(details, wo, "weight-gradient:output", stash.heads, output, N),
      backwardSumHazard(details, productTerms(inputQ / (3 * inner), 0, heads.logVar), 3 * inner, input, N * inWidth, "input", "attention W_qᵀ·δq + W_kᵀ·δk + W_vᵀ·δv"),
    ];
    return {
      input,
      factors: ledger?.input ?? NO_FACTORS,
      inner: innerGradients,
      weightGradients: [
        wg("query", stash.input, queryGradient, stash.input.logVar + heads.logVar),
        wg("key", stash.query, keyRows, stash.input.logVar + heads.logVar),
        wg("value", averagedInput, heads, stash.input.logVar + heads.logVar, valueAligned),
        wg("output", stash.heads, output, stash.heads.logVar + output.logVar, outputAligned),
      ],
      hazards,
    };
  },
};

/** What attentionPullback needs besides the curvature at the heads. */
interface AttentionPaths {
  /** S = Σ_i E[p_ij²] of one head, averaged over keys j (the mean row sum of squares) */
  sameHead: number;
  /** s², the logits' variance */
  logitVariance: number;
  /** Σ_i E[p_ij]·E[p'_ij] of two independent heads, averaged over keys (1/P full, H_P/P causal) */
  acrossHeads: number;
  headWidth: number;
  /** H·d, the heads' features */
  inner: number;
  /** λ_q = c²·dE[S]/ds²·E[ṽ²]·E[k̃²]: the query path's weight of a head's tr M_h */
  queryLogit: number;
  /** λ_k = c²·dE[S]/ds²·E[q²]·E[ṽ²]: the key path's */
  keyLogit: number;
  /** var_w of the value, query and key projections */
  value: number;
  query: number;
  key: number;
  /** D, the input's width */
  width: number;
}

/**
 * The loss's curvature at attention's input, A = E[∂δ_x/∂x] at one position (by Stein's lemma E[x_i·δ_i] = E[x²]·A_ii,
 * what the layers below sum), from M_h = W_oᵀ·M·W_o at the heads (inner = H·d features), by the three paths, whose
 * independent weights leave no mean between them but on the diagonal (own algebra; positions independent, x Gaussian):
 *   value path: Σ_h,h' K_hh'·W_v,hᵀ·(M_h)_hh'·W_v,h' with K_hh' = Σ_i E[p_ij·p'_ij], S within a head (plus the tilt:
 *     p_ij grows with x_j along the row's key direction a, and the row's average leans along a by Σ_l p_l z_l, so
 *     E[(1 − S)·Σ_l p_l z_l]/D ≈ s²·(1 − S)²/D more, one of the input's D directions) and the product of the expected
 *     weights across two heads;
 *   query path: E[∂δq/∂q] over q ~ N(0, E[q²]·I) has trace 2·dE[Φ]/dE[q²] (the heat equation), Φ = ½·oᵀ·M·o holding
 *     ½·tr M_hh·E[ṽ²]·S(s²) for head h, so W_q,hᵀ·(λ_q·tr M_hh)·W_q,h, λ_q = c²·S'(s²)·E[ṽ²]·E[k̃²]; it vanishes for
 *     one-hot rows, whose Φ does not change with |q|;
 *   key path: the same through all keys at once, W_k,hᵀ·(λ_k·tr M_hh)·W_k,h, λ_k = c²·S'(s²)·E[q²]·E[ṽ²].
 * Each is a dense pull-back of an inner-space matrix (densePullback), the diagonal entries of M_h taken as independent.
 */
function attentionPullback(heads: Curvature, paths: AttentionPaths): Curvature {
  const { inner, headWidth: d, width } = paths;
  const apart = 1 - paths.sameHead;
  const same = paths.sameHead + (paths.logitVariance * apart * apart) / Math.max(width, 1);
  const across = paths.acrossHeads;
  // K ∘ M_h: a row's inner − 1 off-diagonal entries, d − 1 of them within the head
  const offSquare = inner > 1 ? Math.max(heads.rowSquares - heads.diagonalSquare, 0) / (inner - 1) : 0;
  const masked: Curvature = {
    diagonal: same * heads.diagonal,
    diagonalSquare: same * same * heads.diagonalSquare,
    rowSquares: same * same * heads.diagonalSquare + (same * same * (d - 1) + across * across * (inner - d)) * offSquare,
  };
  // a head's trace, tr M_hh = Σ of its d diagonal entries
  const trace = d * heads.diagonal;
  const traceSquare = trace * trace + d * Math.max(heads.diagonalSquare - heads.diagonal * heads.diagonal, 0);
  const logit = (lambda: number): Curvature => ({ diagonal: lambda * trace, diagonalSquare: lambda * lambda * traceSquare, rowSquares: lambda * lambda * traceSquare });
  const parts = [
    densePullback(masked, paths.value, inner, width),
    densePullback(logit(paths.queryLogit), paths.query, inner, width),
    densePullback(logit(paths.keyLogit), paths.key, inner, width),
  ];
  // independent weights: the parts' entries add, and their squares with twice the products of the diagonals' means
  let diagonal = 0;
  let diagonalSquare = 0;
  let rowSquares = 0;
  let means = 0;
  for (const part of parts) {
    means += 2 * diagonal * part.diagonal;
    diagonal += part.diagonal;
    diagonalSquare += part.diagonalSquare;
    rowSquares += part.rowSquares;
  }
  const pulled: Curvature = { diagonal, diagonalSquare: diagonalSquare + means, rowSquares: rowSquares + means };
  if (heads.indefinite === true) pulled.indefinite = true;
  return pulled;
}
