/** Network specs built in code for the graph, ops and magnitude tests (the YAML loader is another module). */
import type {
  ActivationName,
  InitSpec,
  InputSpec,
  LayerSpec,
  LossSpec,
  NetworkSpec,
  PrecisionPlan,
  TrainingSpec,
} from "../../src/spec/types.js";

/** The plan of the built specs: binary16 storage, a binary32 master copy, states and accumulation, no scaling. */
export const halfPlan: Readonly<PrecisionPlan> = {
  name: "half",
  activations: "binary16",
  weights: "binary16",
  gradients: "binary16",
  optimizerStates: "binary32",
  masterWeights: "binary32",
  accumulate: "binary32",
  overflow: "saturate",
  flushSubnormals: false,
  scaling: "none",
};

let counter = 0;
const path = (): (string | number)[] => ["layers", counter++];

export const he: InitSpec = { kind: "he", distribution: "normal", gain: 1 };
export const glorot: InitSpec = { kind: "glorot", distribution: "normal", gain: 1 };
export const lecun: InitSpec = { kind: "lecun", distribution: "normal", gain: 1 };
export const normalInit = (std: number): InitSpec => ({ kind: "normal", std, gain: 1 });

export const dense = (name: string, width: number, init: InitSpec = he, bias = false): LayerSpec => ({ family: "dense", name, path: path(), width, bias, init });
export const act = (name: string, activation: ActivationName = "relu", slope = 0): LayerSpec => ({ family: "activation", name, path: path(), activation, slope });
export const norm = (name: string, family: "layer-norm" | "rms-norm" | "batch-norm" = "layer-norm", gain = 1): LayerSpec => ({ family, name, path: path(), gain, epsilon: 1e-5 });
export const residual = (name: string, branch: LayerSpec[], multiplier = 1): LayerSpec => ({ family: "residual", name, path: path(), multiplier, branch });
export const repeat = (name: string, times: number, layers: LayerSpec[]): LayerSpec => ({ family: "repeat", name, path: path(), times, layers });
export const use = (name: string, block: string): LayerSpec => ({ family: "use", name, path: path(), block });
export const dropout = (name: string, rate: number): LayerSpec => ({ family: "dropout", name, path: path(), rate });
export const flatten = (name: string): LayerSpec => ({ family: "flatten", name, path: path() });
export const conv = (name: string, channels: number, kernel = 3, stride = 1, padding: "same" | "valid" | number = "same", init: InitSpec = he): LayerSpec => ({
  family: "conv2d", name, path: path(), channels, kernel, stride, padding, bias: false, init,
});
export const pool = (name: string, family: "average-pool" | "max-pool", size: number, stride = size): LayerSpec => ({ family, name, path: path(), size, stride });
export const embedding = (name: string, vocabulary: number, width: number, init: InitSpec = normalInit(1), multiplier = 1): LayerSpec => ({
  family: "embedding", name, path: path(), vocabulary, width, init, multiplier,
});
export const attention = (name: string, heads: number, headWidth: number, options: { causal?: boolean; scaling?: "query" | "logits" | "none"; init?: InitSpec } = {}): LayerSpec => ({
  family: "attention",
  name,
  path: path(),
  heads,
  headWidth,
  causal: options.causal ?? false,
  scaling: options.scaling ?? "logits",
  subtractMax: true,
  init: options.init ?? lecun,
  outputInit: options.init ?? lecun,
});
export const gated = (name: string, hidden: number, activation: ActivationName = "silu", init: InitSpec = lecun): LayerSpec => ({
  family: "gated-feed-forward", name, path: path(), hidden, activation, init, outputInit: init,
});

export const features = (n: number, positions = 1, scale = 1): InputSpec => ({ kind: "features", features: n, positions, scale });
export const image = (channels: number, height: number, width: number, scale = 1): InputSpec => ({ kind: "image", channels, height, width, scale });
export const tokens = (positions: number): InputSpec => ({ kind: "tokens", positions });
export const crossEntropy = (classes: number, reduction: "mean" | "sum" = "mean"): LossSpec => ({ kind: "cross-entropy", classes, reduction });
export const mse = (targetScale = 1, reduction: "mean" | "sum" = "mean"): LossSpec => ({ kind: "mean-squared-error", reduction, targetScale });

/** A complete spec with plain defaults (batch 32, one worker, AdamW, no drift). */
export function makeSpec(
  layers: LayerSpec[],
  options: { input?: InputSpec; loss?: LossSpec; training?: Partial<TrainingSpec>; blocks?: Record<string, LayerSpec[]>; name?: string } = {},
): NetworkSpec {
  const training: TrainingSpec = {
    batch: 32,
    loss: options.loss ?? mse(),
    workers: 1,
    workerGradients: "average",
    accumulationSteps: 1,
    optimizer: {
      kind: "adamw",
      learningRate: { peak: 1e-3, end: 1e-5 },
      warmupSteps: 100,
      momentum: 0.9,
      betas: [0.9, 0.999],
      epsilon: 1e-8,
      weightDecay: 0.01,
    },
    horizon: { steps: 1000, weightGrowth: 1 },
    ...options.training,
  };
  return {
    source: "<memory>",
    name: options.name ?? "test-network",
    description: "built in a test",
    input: options.input ?? features(64),
    training,
    precision: { ...halfPlan },
    plans: [],
    blocks: options.blocks ?? {},
    layers,
  };
}
