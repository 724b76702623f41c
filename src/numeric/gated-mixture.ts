/**
 * The laws of a gated product's input gradients as Gaussian scale mixtures. With h = φ(g)·u, g and u independent
 * Gaussian pre-activations (two projections of one input at initialisation) and δ the Gaussian gradient at h:
 * - the up gradient δ·φ(g) is, given g, N(0, s²φ(g)²): a mixture over |φ(g)|, which has mass near 0 where φ crosses or
 *   nears zero (GELU and SiLU at g = 0 and for g ≪ 0; Hendrycks & Gimpel 2016, Elfwing et al. 2018);
 * - the gate gradient δ·u·φ'(g) is a mixture over |u|·|φ'(g)|, the product of two independent scales: the half-normal
 *   |u| alone already makes δ·u the normal product law, whose density grows like −ln|x| at 0 (Craig 1936).
 * Each is a ScaleMixture of rms 1, as src/numeric/derivative-mixture.ts makes for δ·φ'(x). Below a squared-error head of
 * k outputs per row, each row's elements share one more independent scale, the row's residual norm √(χ²_k/k)
 * (rowMixture): a mixture field's `rows` multiplies it in.
 */
import { activationFunction } from "./activations.js";
import { derivativeMixture, fromComponents, makeMixture, type MixtureActivation, type ScaleMixture } from "./derivative-mixture.js";
import { upperGammaQ } from "./chi-square.js";

/**
 * Which product a mixture field scales δ by: absent (the derivative φ'(x), an activation's input gradient), "value"
 * (φ(x): a gated product's up gradient) or "gate" (u·φ'(x), u an independent Gaussian: its gate gradient).
 */
export type MixtureOf = "value" | "gate";

/**
 * A profile's mixture field, the one layout of src/magnitude/types.ts DerivativeMixture and src/ops/types.ts OpMixture:
 * the gradient behind `activation`, whose input x ~ N(0, inputVariance). relu and identity name only a gated product's
 * gradients: on a ReLU gate's nonzero part (g > 0) and on an identity gate, δ·φ(g) is δ·|g| and δ·u·φ'(g) is δ·u, both
 * the normal product law.
 */
export interface MixtureField {
  /** absent: no activation factor, only the row scale of `rows` */
  activation?: MixtureActivation | "relu" | "identity";
  inputVariance?: number;
  /** leaky-relu: its negative slope (the two scales 1 and |slope|, each on half the elements) */
  slope?: number;
  /**
   * absent: the scale is |φ'(x)|; "value": |φ(x)| (a gated product's up gradient); "gate": |u·φ'(x)|, u an independent
   * Gaussian (its gate gradient)
   */
  of?: MixtureOf;
  /**
   * below a squared-error head of k ≤ 64 outputs: every element of a row (a sample, or a sample's position) is scaled
   * by the row's residual norm, √(χ²_k/k) over its mean, times the activation's factor (Gradient.rows)
   */
  rows?: number;
  /** the rows per micro-batch whose scales `rows` draws (a step's typical draw has none below the 1/(count + 1) quantile) */
  rowCount?: number;
}

/** The scale mixture a profile's mixture field names. */
export function fieldMixture(field: MixtureField): ScaleMixture {
  const rows = field.rows;
  if (rows === undefined) return activationMixture(field);
  const count = field.rowCount ?? Infinity;
  const slot = `rows:${rows}:${count}:${field.of ?? ""}:${field.activation ?? ""}:${field.inputVariance ?? ""}:${field.slope ?? ""}`;
  const known = MEMO.get(slot);
  if (known !== undefined) return known;
  const made = field.activation === undefined ? rowMixture(rows, count) : productMixture(activationMixture(field), rowMixture(rows, count));
  if (MEMO.size >= MEMO_LIMIT) MEMO.clear();
  MEMO.set(slot, made);
  return made;
}

// the mixture of the activation's factor the field names (without its row scale)
function activationMixture(field: MixtureField): ScaleMixture {
  const name = field.activation;
  if (name === undefined) throw new RangeError("fieldMixture: a mixture names an activation, a row scale, or both");
  if (name === "relu" || name === "identity") {
    if (field.of === undefined) throw new RangeError(`fieldMixture: ${name} has no derivative mixture (its derivative is constant where nonzero)`);
    return (halfNormal ??= makeMixture((x) => x, 1));
  }
  const q = field.inputVariance ?? 1;
  if (field.of === undefined) return derivativeMixture(name, q, field.slope);
  const slot = `${field.of}:${field.activation}:${q}:${field.slope ?? ""}`;
  const known = MEMO.get(slot);
  if (known !== undefined) return known;
  const made = field.of === "value" ? valueMixture(name, q, field.slope) : gateMixture(name, q, field.slope);
  if (MEMO.size >= MEMO_LIMIT) MEMO.clear();
  MEMO.set(slot, made);
  return made;
}
const MEMO = new Map<string, ScaleMixture>();
const MEMO_LIMIT = 4096;

function valueMixture(name: MixtureActivation, q: number, slope: number | undefined): ScaleMixture {
  const { f } = activationFunction(name, slope);
  return makeMixture(f, q);
}

// |u| for u ~ N(0, 1): the mixture over the identity's value (its scale drops out in the rms normalisation)
let halfNormal: ScaleMixture | undefined;

function gateMixture(name: MixtureActivation, q: number, slope: number | undefined): ScaleMixture {
  halfNormal ??= makeMixture((x) => x, 1);
  return productMixture(derivativeMixture(name, q, slope), halfNormal);
}

// the row scale's mixtures, by k and row count
const ROWS = new Map<string, ScaleMixture>();

/**
 * The row scale √(χ²_k/k) of a squared-error head of k outputs as a scale mixture: bins of its value (an eighth of a
 * binade in the two binades under its top, half a binade below, as the factors' bins) with their exact masses,
 * P(χ²_k ≤ k·a²), and energies, E[χ²_k·1{χ²_k ≤ x}] = k·P(χ²_{k+2} ≤ x) (Abramowitz & Stegun 26.4.1 with Γ(a+1) = aΓ(a)),
 * each bin's scale the rms of its part, down to where the mass left below is under 1e-9 — or, for a step's `count` rows,
 * to the scale the smallest of them takes in a typical step: the smallest of n draws sits at the 1/(n + 1) quantile
 * on average (order statistics of the uniform law, E[U₍₁₎] = 1/(n + 1)), so a median step has no row below it, and
 * the mass below joins one component there (the shares read at the median draw, as the rms is).
 */
export function rowMixture(k: number, count = Infinity): ScaleMixture {
  const slot = `${k}:${count}`;
  const known = ROWS.get(slot);
  if (known !== undefined) return known;
  // P(s ≤ a) and E[s²·1{s ≤ a}] for s = √(χ²_k/k)
  const below = (a: number): number => 1 - upperGammaQ(k / 2, (k * a * a) / 2);
  const energyBelow = (a: number): number => 1 - upperGammaQ(k / 2 + 1, (k * a * a) / 2);
  const floorMass = Math.max(ROW_MASS_FLOOR, 1 / (count + 1));
  // the top: where the mass above is under 1e-13 (the chi-square tail falls faster than exponentially there)
  let top = 1;
  while (1 - below(top) > 1e-13) top *= 2 ** FINE;
  const edges = [top];
  for (let e = Math.log2(top) - FINE; e > Math.log2(top) - FINE_REACH; e -= FINE) edges.push(2 ** e);
  for (let e = Math.log2(top) - FINE_REACH; below(2 ** e) > floorMass; e -= BIN) edges.push(2 ** e);
  // the lowest edge at the floor's quantile itself, by bisection on log2 a
  if (floorMass > ROW_MASS_FLOOR) {
    let lo = Math.log2(edges[edges.length - 1] as number) - 2 * BIN;
    let hi = Math.log2(edges[edges.length - 1] as number);
    while (below(2 ** lo) > floorMass) lo -= BIN;
    for (let i = 0; i < 60; i++) {
      const mid = 0.5 * (lo + hi);
      if (below(2 ** mid) > floorMass) hi = mid;
      else lo = mid;
    }
    edges.push(2 ** hi);
  }
  const weights: number[] = [];
  const scales: number[] = [];
  for (let i = 0; i < edges.length; i++) {
    const hi = edges[i] as number;
    const last = i + 1 === edges.length;
    const lo = last ? 0 : (edges[i + 1] as number);
    const w = below(hi) - below(lo);
    const energy = energyBelow(hi) - energyBelow(lo);
    if (w > 0 && energy > 0) {
      weights.push(w);
      // the rows of a step's typical draw stop at the floor's quantile: the mass below sits there
      scales.push(last && floorMass > ROW_MASS_FLOOR ? hi : Math.sqrt(energy / w));
    }
  }
  const made = fromComponents(weights, scales);
  ROWS.set(slot, made);
  return made;
}
const ROW_MASS_FLOOR = 1e-9;

// Bins of the product's scales: half a binade (as the factors' own bins, whose error derivative-mixture.ts states), an
// eighth in the two binades under the largest product, where the tail is carried; below 2^−40 of the largest one
// component (mass there under 1e-9 for these factors: each is linear in its scale near 0, so the product's mass below
// ε is about ε·ln(1/ε))
const BIN = 0.5;
const FINE = 1 / 8;
const FINE_REACH = 2;
const FLOOR = -40;

/**
 * The mixture of the product of two independent scales a·b (a mixture's component pairs multiply: weight wᵢvⱼ, scale
 * cᵢdⱼ), its pairs gathered into bins of log2 scale with each bin's weight and energy kept (its scale the rms of its
 * pairs), so the product's second moment is exact.
 */
export function productMixture(a: ScaleMixture, b: ScaleMixture): ScaleMixture {
  const top = Math.log2((a.scales[0] as number) * (b.scales[0] as number));
  // bin k covers log2 scales from edge(k + 1) to edge(k): FINE steps down to top − FINE_REACH, then BIN steps
  const fineBins = Math.round(FINE_REACH / FINE);
  const bins = fineBins + Math.ceil((FINE_REACH - FLOOR) / BIN) + 1;
  const weight = new Float64Array(bins);
  const energy = new Float64Array(bins);
  for (let i = 0; i < a.weights.length; i++) {
    const wi = a.weights[i] as number;
    const ci = a.scales[i] as number;
    for (let j = 0; j < b.weights.length; j++) {
      const w = wi * (b.weights[j] as number);
      const s = ci * (b.scales[j] as number);
      const below = top - Math.log2(s);
      const k = below < FINE_REACH ? Math.max(0, Math.floor(below / FINE)) : Math.min(bins - 1, fineBins + Math.floor((below - FINE_REACH) / BIN));
      weight[k] = (weight[k] as number) + w;
      energy[k] = (energy[k] as number) + w * s * s;
    }
  }
  const weights: number[] = [];
  const scales: number[] = [];
  for (let k = 0; k < bins; k++) {
    const w = weight[k] as number;
    if (w > 0) {
      weights.push(w);
      scales.push(Math.sqrt((energy[k] as number) / w));
    }
  }
  return fromComponents(weights, scales);
}
