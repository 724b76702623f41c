/**
 * The laws of a gated product's input gradients as Gaussian scale mixtures. With h = φ(g)·u, g and u independent
 * Gaussian pre-activations (two projections of one input at initialisation) and δ the Gaussian gradient at h:
 * - the up gradient δ·φ(g) is, given g, N(0, s²φ(g)²): a mixture over |φ(g)|, which has mass near 0 where φ crosses or
 *   nears zero (GELU and SiLU at g = 0 and for g ≪ 0; Hendrycks & Gimpel 2016, Elfwing et al. 2018);
 * - the gate gradient δ·u·φ'(g) is a mixture over |u|·|φ'(g)|, the product of two independent scales: the half-normal
 *   |u| alone already makes δ·u the normal product law, whose density grows like −ln|x| at 0 (Craig 1936).
 * Each is a ScaleMixture of rms 1, as src/numeric/derivative-mixture.ts makes for δ·φ'(x).
 */
import { activationFunction } from "./activations.js";
import { derivativeMixture, fromComponents, makeMixture, type MixtureActivation, type ScaleMixture } from "./derivative-mixture.js";

/**
 * Which product a mixture field scales δ by: absent (the derivative φ'(x), an activation's input gradient), "value"
 * (φ(x): a gated product's up gradient) or "gate" (u·φ'(x), u an independent Gaussian: its gate gradient).
 */
export type MixtureOf = "value" | "gate";

/**
 * A profile's mixture field (src/magnitude/types.ts DerivativeMixture; src/ops/types.ts OpMixture). relu and identity
 * name only a gated product's gradients: on a ReLU gate's nonzero part (g > 0) and on an identity gate, δ·φ(g) is δ·|g|
 * and δ·u·φ'(g) is δ·u, both the normal product law.
 */
export interface MixtureField {
  activation: MixtureActivation | "relu" | "identity";
  inputVariance: number;
  slope?: number;
  of?: MixtureOf;
}

/** The scale mixture a profile's mixture field names. */
export function fieldMixture(field: MixtureField): ScaleMixture {
  const name = field.activation;
  if (name === "relu" || name === "identity") {
    if (field.of === undefined) throw new RangeError(`fieldMixture: ${name} has no derivative mixture (its derivative is constant where nonzero)`);
    return (halfNormal ??= makeMixture((x) => x, 1));
  }
  if (field.of === undefined) return derivativeMixture(name, field.inputVariance, field.slope);
  const slot = `${field.of}:${field.activation}:${field.inputVariance}:${field.slope ?? ""}`;
  const known = MEMO.get(slot);
  if (known !== undefined) return known;
  const made = field.of === "value" ? valueMixture({ ...field, activation: name }) : gateMixture({ ...field, activation: name });
  if (MEMO.size >= MEMO_LIMIT) MEMO.clear();
  MEMO.set(slot, made);
  return made;
}
const MEMO = new Map<string, ScaleMixture>();
const MEMO_LIMIT = 4096;

function valueMixture(field: MixtureField & { activation: MixtureActivation }): ScaleMixture {
  const { f } = activationFunction(field.activation, field.slope);
  return makeMixture(f, field.inputVariance);
}

// |u| for u ~ N(0, 1): the mixture over the identity's value (its scale drops out in the rms normalisation)
let halfNormal: ScaleMixture | undefined;

function gateMixture(field: MixtureField & { activation: MixtureActivation }): ScaleMixture {
  halfNormal ??= makeMixture((x) => x, 1);
  return productMixture(derivativeMixture(field.activation, field.inputVariance, field.slope), halfNormal);
}

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
