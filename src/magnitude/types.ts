/**
 * The contract between the magnitude engine (which predicts), the risk module (which judges a prediction
 * against formats), the loss-scale module, the simulator (which measures) and the renderers.
 * Everything here is plain JSON-able data.
 */
import type { LayerFamily } from "../spec/types.js";
import type { MixtureField } from "../numeric/gated-mixture.js";

/** What a tensor is, in one training step (DESIGN.md vocabulary). */
export const TENSOR_ROLES = [
  "activation",
  "pre-activation",
  "activation-gradient",
  "weight",
  "weight-gradient",
  "optimizer-state",
  "update",
  "loss",
] as const;
export type TensorRole = (typeof TENSOR_ROLES)[number];

/** Which entry of the precision plan a tensor is stored in. */
export type PlanSlot = "activations" | "weights" | "gradients" | "optimizerStates";

/**
 * The distribution of one nonzero element, given the tensor's scale (its rms):
 * - gaussian: x = rms·Z, Z ~ N(0,1)
 * - half-gaussian: |x| = rms·|Z| with the sign fixed (a ReLU output's nonzero part); same magnitudes as gaussian
 * - uniform: x ~ U[-a, a] with a = rms·sqrt(3)
 * - constant: every nonzero element has magnitude rms (a norm gain at initialisation, a bias constant)
 * - bounded: magnitudes spread up to `bound`, never above it (softmax probabilities, sigmoid outputs)
 * - log-normal: log2|x| ~ N(m, elementLog2Spread²), with m set so the rms is `rms` (softmax probabilities and
 *   cross-entropy logit gradients over many classes, whose elements span many binades)
 * - gaussian-mixture: x = rms·c·Z with the scale c drawn per element from `mixture` (the gradient δ·φ'(x) at the input
 *   of a smooth activation: Gaussian given x, scaled by |φ'(x)|, which crosses zero or fades in a saturated tail)
 */
export type ElementShape = "gaussian" | "half-gaussian" | "uniform" | "constant" | "bounded" | "log-normal" | "gaussian-mixture";

/**
 * The scale mixture of a "gaussian-mixture" profile: the element's scale is |φ'(x)| of the activation's Gaussian input
 * over its rms (src/numeric/derivative-mixture.ts), or as `of` and `rows` say (src/numeric/gated-mixture.ts, where the
 * fields are described)
 */
export type DerivativeMixture = MixtureField;

/**
 * The predicted distribution of a tensor's element magnitudes (DESIGN.md: magnitude profile).
 * The scale itself varies from draw to draw (initialisation, data): log2(rms) ~ N(log2(rms), log2Spread²),
 * the finite-width log-normal spread (Hanin 2018; Hanin & Nica 2019).
 */
export interface MagnitudeProfile {
  /** elements of the tensor in one training step on one worker (batch × positions × features, or the weight's size) */
  elements: number;
  /** share of elements that are exactly zero, e.g. 1/2 for a ReLU output, the rate for dropout */
  zeroFraction: number;
  /** the element distribution of the nonzero part */
  shape: ElementShape;
  /** root mean square of the nonzero elements at the median draw */
  rms: number;
  /** standard deviation of log2(rms) over draws; 0 when the scale is fixed */
  log2Spread: number;
  /** for shape "bounded": the largest magnitude an element can take */
  bound?: number;
  /** for shape "log-normal": the standard deviation of log2|x| across the elements of one draw */
  elementLog2Spread?: number;
  /** for shape "gaussian-mixture": the activation derivative whose law scales the Gaussian elements */
  mixture?: DerivativeMixture;
  /**
   * the mean-field second moment E[x²] over all elements (zeros included), averaged over draws: the quantity the
   * propagation rules carry (Poole et al. 2016); rms² ≈ meanSquare/(1 − zeroFraction) at the mean draw
   */
  meanSquare?: number;
  /** expected largest element magnitude of one step at the median draw, from the element shape's tail and the element count */
  maxElement?: number;
  /**
   * weight gradients: the rms if every summed term were aligned (coherent sum, N·rms_term instead of √N·rms_term),
   * the upper bracket of SCIENCE.md §2.1; `rms` is the incoherent (independent signs) prediction
   */
  coherentRms?: number;
  /**
   * mean correlation of one feature between two samples of the batch (negative below a batch norm, whose gradient sums
   * to zero over the batch); it makes batch sums partly coherent. Absent: 0
   */
  sampleCorrelation?: number;
  /** mean correlation of one feature between two positions (tokens, pixels) of one sample. Absent: as sampleCorrelation */
  positionCorrelation?: number;
}

/** One factor of the chain-rule product that gives a tensor's scale (DESIGN.md: ledger). */
export interface LedgerEntry {
  /** the layer that contributes the factor ("input", "loss" for the seeds) */
  layer: string;
  /** the rule, in words, e.g. "dense: fan_in·var_w = 1.000" */
  rule: string;
  /** log2 of the factor applied to the rms (negative shrinks) */
  log2Factor: number;
  /** where the rule comes from, e.g. "Poole et al. 2016, length map" */
  source: string;
}

/** The predicted magnitudes of one tensor of a training step. */
export interface TensorPrediction {
  /** unique within a prediction: `<layer name>/<role>` plus a suffix where a layer has several of a role (`/weight:up`) */
  id: string;
  layer: string;
  /** position of the layer in the forward order (0 = first) */
  layerIndex: number;
  family: LayerFamily | "input" | "loss";
  role: TensorRole;
  /** the plan entry that decides its format */
  slot: PlanSlot;
  /** full shape in one step (batch first for activations and their gradients) */
  shape: number[];
  /** at initialisation */
  start: MagnitudeProfile;
  /** at the end of the training horizon (weights grown, loss fallen) */
  end: MagnitudeProfile;
  /** factors from the seed (input for the forward pass, loss for the backward) to this tensor, at the start */
  ledger: LedgerEntry[];
  /** "measured" where a tensor file or recorded statistics replaced the prediction */
  source: "predicted" | "measured";
  /**
   * The id of the tensor whose stored array holds this one's elements too, when the prediction tells one array's
   * elements apart (the loss gradient's right-class elements, `:target-class`, are part of its `activation-gradient`)
   */
  partOf?: string;
}

/** Places where an operation, not a stored tensor, can overflow or lose values. */
export type HazardKind =
  /** exp() of attention or output logits; safe only with the row maximum subtracted */
  | "softmax-exp"
  /** squares and sums of squares inside layer-norm / rms-norm / batch-norm statistics */
  | "norm-sum-of-squares"
  /** dot products and reductions accumulated in the plan's accumulate format */
  | "accumulation"
  /** the loss value, e.g. under sum reduction over a large batch */
  | "loss-value"
  /** gradient sums across data-parallel workers and accumulation steps */
  | "gradient-sum"
  /** optimizer constants (Adam's epsilon) held in the optimizer-state format */
  | "optimizer-constant"
  /** Adam's second moment (1 − β2)·g², stored in the optimizer-state format */
  | "optimizer-second-moment";

/** An operation site the risk module judges against the plan's formats. */
export interface HazardSite {
  kind: HazardKind;
  layer: string;
  /** the magnitudes going into the operation (logits, the normalised tensor, the summed terms) */
  input: MagnitudeProfile;
  /** how many terms are summed or squared per result (features for a norm, inner length for a product) */
  terms: number;
  /** whether the implementation guards it (e.g. softmax subtracting the row maximum) */
  guarded: boolean;
  /** a constant involved (Adam's epsilon), when there is one */
  constant?: number;
  /** one-line description in plain words */
  detail: string;
  /** what comes out of the operation (the accumulated sum, the summed gradient), when it differs from `input` */
  output?: MagnitudeProfile;
  /** the same site at the end of the training horizon */
  end?: { input: MagnitudeProfile; output?: MagnitudeProfile };
  /** the tensor the operation acts on, when its layer has several (a gradient-sum site's weight or bias gradient) */
  tensor?: string;
  /** a loss-value site under mean reduction: the terms the mean sums before it divides (its rounding is the sum's) */
  averaged?: number;
  /**
   * an accumulation of the backward pass (a transposed map's products, a weight gradient's sum over batch × positions):
   * its terms are gradients, judged at the loss scale as gradient tensors are
   */
  gradient?: boolean;
  /**
   * a norm-sum-of-squares site whose statistics (a batch norm's channels after a convolution) each have a spread of
   * their own, independent between statistics: each a scaled chi-square of `dof` degrees of freedom about the draw's
   * common scale, and `ownLogVar` the part of the input's ln-variance (its mean over the statistics) that makes
   */
  statistics?: { dof: number; ownLogVar: number };
}

/** The magnitude engine's output for one spec and plan. */
export interface Prediction {
  specName: string;
  /** every tensor of one training step, forward order then backward order */
  tensors: TensorPrediction[];
  hazards: HazardSite[];
  /** assumptions the engine made, in plain words (each a sentence) */
  assumptions: string[];
}
