/**
 * The normalized network spec: what the YAML loader produces after validation.
 * YAML keys are kebab-case plain words (`head-width`); here they are camelCase.
 * Defaults are filled in by the loader, so every field below is concrete unless marked optional.
 */
import type { FormatName } from "../formats/names.js";

/** A key path into the YAML document, e.g. ["layers", 3, "width"]. */
export type SpecPath = readonly (string | number)[];

// ---------------------------------------------------------------------------------------------
// initialisation

export type InitDistribution = "normal" | "uniform";

/**
 * How a weight is initialised. Variance rules (fan-in n_in, fan-out n_out, gain g):
 * he: g²·2/n_in (He et al. 2015); glorot: g²·2/(n_in+n_out) (Glorot & Bengio 2010);
 * lecun: g²/n_in; normal: (g·std)²; uniform: (g·limit)²/3; orthogonal: g²/max(n_in, n_out); zeros: 0.
 */
export type InitSpec =
  | { kind: "he" | "glorot" | "lecun"; distribution: InitDistribution; gain: number }
  | { kind: "normal"; std: number; gain: number }
  | { kind: "uniform"; limit: number; gain: number }
  | { kind: "orthogonal"; gain: number }
  | { kind: "zeros" };

// ---------------------------------------------------------------------------------------------
// layers

export const ACTIVATIONS = [
  "relu",
  "leaky-relu",
  "gelu",
  "silu",
  "tanh",
  "sigmoid",
  "softplus",
  "identity",
  "softmax",
] as const;
export type ActivationName = (typeof ACTIVATIONS)[number];

interface LayerCommon {
  /** unique within its list; generated as `<family>-<index>` when the YAML gives none */
  name: string;
  /** where the layer sits in the YAML document */
  path: SpecPath;
}

export interface DenseLayer extends LayerCommon {
  family: "dense";
  /** output features */
  width: number;
  bias: boolean;
  init: InitSpec;
}

export interface Conv2dLayer extends LayerCommon {
  family: "conv2d";
  /** output channels */
  channels: number;
  kernel: number;
  stride: number;
  /** "same" keeps the image size at stride 1; "valid" adds none; a number pads that many pixels each side */
  padding: "same" | "valid" | number;
  bias: boolean;
  init: InitSpec;
}

export interface EmbeddingLayer extends LayerCommon {
  family: "embedding";
  vocabulary: number;
  width: number;
  init: InitSpec;
  /** a constant the looked-up rows are multiplied by (some models scale by sqrt(width)) */
  multiplier: number;
}

export interface ActivationLayer extends LayerCommon {
  family: "activation";
  activation: ActivationName;
  /** negative-side slope of leaky-relu; 0 for the others */
  slope: number;
}

export interface NormLayer extends LayerCommon {
  family: "layer-norm" | "rms-norm" | "batch-norm";
  /** the initial (or measured) value of the gain vector */
  gain: number;
  epsilon: number;
}

export interface DropoutLayer extends LayerCommon {
  family: "dropout";
  rate: number;
}

export interface PoolLayer extends LayerCommon {
  family: "average-pool" | "max-pool";
  size: number;
  stride: number;
}

export interface FlattenLayer extends LayerCommon {
  family: "flatten";
}

export interface ResidualLayer extends LayerCommon {
  family: "residual";
  /** the branch output is multiplied by this before it is added to the input */
  multiplier: number;
  branch: LayerSpec[];
}

export interface AttentionLayer extends LayerCommon {
  family: "attention";
  heads: number;
  headWidth: number;
  causal: boolean;
  /** where 1/sqrt(headWidth) is applied: on the query before q·k, on the logits after it, or nowhere */
  scaling: "query" | "logits" | "none";
  /** whether the softmax subtracts the row maximum before exp (most implementations do) */
  subtractMax: boolean;
  init: InitSpec;
  /** initialisation of the output projection (defaults to `init`) */
  outputInit: InitSpec;
}

export interface GatedFeedForwardLayer extends LayerCommon {
  family: "gated-feed-forward";
  /** width of the gate and up projections */
  hidden: number;
  /** the gate's activation */
  activation: ActivationName;
  init: InitSpec;
  /** initialisation of the down projection (defaults to `init`) */
  outputInit: InitSpec;
}

export interface UseBlockLayer extends LayerCommon {
  family: "use";
  /** the name of an entry of `blocks` */
  block: string;
}

export interface RepeatLayer extends LayerCommon {
  family: "repeat";
  times: number;
  layers: LayerSpec[];
}

export type LayerSpec =
  | DenseLayer
  | Conv2dLayer
  | EmbeddingLayer
  | ActivationLayer
  | NormLayer
  | DropoutLayer
  | PoolLayer
  | FlattenLayer
  | ResidualLayer
  | AttentionLayer
  | GatedFeedForwardLayer
  | UseBlockLayer
  | RepeatLayer;

export type LayerFamily = LayerSpec["family"];

// ---------------------------------------------------------------------------------------------
// input and training setup

export type InputSpec =
  /** real-valued features at each of `positions` positions (1 for a plain vector) */
  | { kind: "features"; features: number; positions: number; scale: number }
  /** integer token ids; the first layer must be an embedding */
  | { kind: "tokens"; positions: number }
  /** images, channels first; `scale` is the rms of a pixel value */
  | { kind: "image"; channels: number; height: number; width: number; scale: number };

export type LossSpec =
  | { kind: "cross-entropy"; classes: number; reduction: "mean" | "sum" }
  | { kind: "mean-squared-error"; reduction: "mean" | "sum"; targetScale: number };

export type OptimizerKind = "sgd" | "momentum" | "adam" | "adamw";

export interface OptimizerSpec {
  kind: OptimizerKind;
  /** the schedule's peak and its final value */
  learningRate: { peak: number; end: number };
  warmupSteps: number;
  /** SGD with momentum */
  momentum: number;
  /** Adam/AdamW */
  betas: [number, number];
  epsilon: number;
  weightDecay: number;
  /** gradient clipping by global norm, applied after the loss scale is removed; absent when off */
  clipNorm?: number;
}

/** Where training is expected to end, so late-training magnitudes are covered too. */
export interface HorizonSpec {
  steps: number;
  /** expected loss at the end (cross-entropy starts near ln(classes)); absent: gradients assumed not to shrink */
  finalLoss?: number;
  /** how much weight rms grows by the end (1 = not at all) */
  weightGrowth: number;
}

export interface TrainingSpec {
  batch: number;
  loss: LossSpec;
  workers: number;
  /** how per-worker gradients are combined */
  workerGradients: "sum" | "average";
  accumulationSteps: number;
  optimizer: OptimizerSpec;
  horizon: HorizonSpec;
}

// ---------------------------------------------------------------------------------------------
// precision plan

export type OverflowMode = "saturate" | "infinity-or-nan";

export interface PrecisionPlan {
  name: string;
  activations: FormatName;
  weights: FormatName;
  gradients: FormatName;
  optimizerStates: FormatName;
  /** the binary32 (or other) master copy of the weights; "none" when the optimizer updates stored weights directly */
  masterWeights: FormatName | "none";
  /** accumulate format of matrix products and reductions */
  accumulate: FormatName;
  /**
   * the format of the buffer the gradient contributions of workers and accumulation steps are summed in (an all-reduce
   * or accumulation buffer); absent: the gradient format (`gradientSumFormat`), whatever the gradients are
   */
  gradientSums?: FormatName;
  /** a static loss scale to evaluate (a power of two); absent: headroom recommends one */
  lossScale?: number;
  /** what 8-bit conversions do on overflow */
  overflow: OverflowMode;
  /** results below the smallest normal become zero (some hardware does this for bfloat16) */
  flushSubnormals: boolean;
  /** per-tensor or per-block (32 elements, OCP microscaling) scale factors for 8-bit formats */
  scaling: "none" | "tensor" | "block";
}

/** Where measured data replaces predictions (tensor files, recorded statistics). */
export interface MeasuredSpec {
  /** safetensors / .npy files (or globs) holding trained weights */
  weights: string[];
  /** layer name -> tensor name in the weights files, overriding the default matching rule */
  names: Record<string, string>;
  /** a recorded-statistics file (CSV or JSON) from a short real run */
  statistics?: string;
}

export interface NetworkSpec {
  /** the file the spec came from (or "<memory>") */
  source: string;
  name: string;
  description: string;
  input: InputSpec;
  training: TrainingSpec;
  /** the plan to evaluate */
  precision: PrecisionPlan;
  /** further named plans, for comparisons */
  plans: PrecisionPlan[];
  blocks: Record<string, LayerSpec[]>;
  layers: LayerSpec[];
  measured?: MeasuredSpec;
}
