/**
 * From the validated YAML shape (kebab-case keys, defaults left out) to the NetworkSpec every other module
 * reads: camelCase keys, shorthands expanded, every default filled in. Only called on a document that passed
 * validation and the cross-key checks.
 */
import type { FormatName } from "../formats/names.js";
import { LEAKY_RELU_SLOPE, NORM_EPSILONS } from "./limits.js";
import type { RawInit, RawLayer, RawPlan, RawSpec } from "./schema.js";
import type {
  ActivationName,
  HorizonSpec,
  InitSpec,
  InputSpec,
  LayerSpec,
  NetworkSpec,
  OptimizerSpec,
  PrecisionPlan,
  SpecPath,
  TrainingSpec,
} from "./types.js";

/** Default weight initialisation of dense, conv2d, attention and gated feed-forward layers: variance 1/fan-in. */
export const DEFAULT_INIT: InitSpec = { kind: "lecun", distribution: "normal", gain: 1 };
/** Default initialisation of embedding rows: a standard normal (common practice). */
export const DEFAULT_EMBEDDING_INIT: InitSpec = { kind: "normal", std: 1, gain: 1 };

function normalizeInit(raw: RawInit | undefined, fallback: InitSpec): InitSpec {
  if (raw === undefined) return fallback;
  if (typeof raw === "number") return { kind: "normal", std: raw, gain: 1 };
  if (typeof raw === "string") {
    if (raw === "zeros") return { kind: "zeros" };
    if (raw === "orthogonal") return { kind: "orthogonal", gain: 1 };
    const [rule, distribution] = raw.split("-") as [string, "normal" | "uniform"];
    return { kind: rule === "xavier" ? "glorot" : (rule as "he" | "glorot" | "lecun"), distribution, gain: 1 };
  }
  switch (raw.kind) {
    case "he":
    case "glorot":
    case "xavier":
    case "lecun":
      return { kind: raw.kind === "xavier" ? "glorot" : raw.kind, distribution: raw.distribution, gain: raw.gain };
    case "normal":
      return { kind: "normal", std: raw.std, gain: raw.gain };
    case "uniform":
      return { kind: "uniform", limit: raw.limit, gain: raw.gain };
    case "orthogonal":
      return { kind: "orthogonal", gain: raw.gain };
    case "zeros":
      return { kind: "zeros" };
  }
}

function normalizeLayers(items: readonly RawLayer[], path: SpecPath): LayerSpec[] {
  return items.map((item, index) => normalizeLayer(item, index, [...path, index]));
}

function normalizeLayer(item: RawLayer, index: number, path: SpecPath): LayerSpec {
  const raw = typeof item === "string" ? ({ type: item } as const) : item;
  const name = ("name" in raw && raw.name !== undefined ? raw.name : undefined) ?? `${raw.type}-${index}`;
  // no `{ name, path, family }` spreads here: on Node 20 a literal that adds keys after a spread costs microseconds
  switch (raw.type) {
    case "dense":
      return { name, path, family: "dense", width: raw.width, bias: raw.bias, init: normalizeInit(raw.init, DEFAULT_INIT) };
    case "conv2d":
      return {
        name,
        path,
        family: "conv2d",
        channels: raw.channels,
        kernel: raw.kernel,
        stride: raw.stride,
        padding: raw.padding,
        bias: raw.bias,
        init: normalizeInit(raw.init, DEFAULT_INIT),
      };
    case "embedding":
      return {
        name,
        path,
        family: "embedding",
        vocabulary: raw.vocabulary,
        width: raw.width,
        init: normalizeInit(raw.init, DEFAULT_EMBEDDING_INIT),
        multiplier: raw.multiplier,
      };
    case "relu":
    case "leaky-relu":
    case "gelu":
    case "silu":
    case "tanh":
    case "sigmoid":
    case "softplus":
    case "identity":
    case "softmax": {
      const slope = raw.type === "leaky-relu" ? ("slope" in raw && typeof raw.slope === "number" ? raw.slope : LEAKY_RELU_SLOPE) : 0;
      return { name, path, family: "activation", activation: raw.type as ActivationName, slope };
    }
    case "layer-norm":
    case "rms-norm":
    case "batch-norm": {
      // a bare `- layer-norm` has no defaults filled in: the schema's ones
      const defaults = { gain: 1, epsilon: NORM_EPSILONS[raw.type] };
      const given = "gain" in raw ? raw : defaults;
      return { name, path, family: raw.type, gain: given.gain, epsilon: given.epsilon };
    }
    case "dropout":
      return { name, path, family: "dropout", rate: raw.rate };
    case "average-pool":
    case "max-pool":
      return { name, path, family: raw.type, size: raw.size, stride: raw.stride ?? raw.size };
    case "flatten":
      return { name, path, family: "flatten" };
    case "residual":
      return { name, path, family: "residual", multiplier: raw.multiplier, branch: normalizeLayers(raw.branch, [...path, "branch"]) };
    case "attention": {
      const init = normalizeInit(raw.init, DEFAULT_INIT);
      return {
        name,
        path,
        family: "attention",
        heads: raw.heads,
        headWidth: raw["head-width"],
        causal: raw.causal,
        scaling: raw.scaling,
        subtractMax: raw["subtract-max"],
        init,
        outputInit: normalizeInit(raw["output-init"], init),
      };
    }
    case "gated-feed-forward": {
      const init = normalizeInit(raw.init, DEFAULT_INIT);
      return {
        name,
        path,
        family: "gated-feed-forward",
        hidden: raw.hidden,
        activation: raw.activation,
        init,
        outputInit: normalizeInit(raw["output-init"], init),
      };
    }
    case "use":
      return { name, path, family: "use", block: raw.block };
    case "repeat":
      return { name, path, family: "repeat", times: raw.times, layers: normalizeLayers(raw.layers, [...path, "layers"]) };
  }
}

function normalizeInput(raw: RawSpec["input"]): InputSpec {
  if ("tokens" in raw) return { kind: "tokens", positions: raw.tokens };
  if ("features" in raw) return { kind: "features", features: raw.features, positions: raw.positions, scale: raw.scale };
  return { kind: "image", channels: raw.channels, height: raw.height, width: raw.width, scale: raw.scale };
}

/** The optimizer when a spec names none: Adam with the defaults its authors suggest (Kingma & Ba 2015, Algorithm 1). */
export const DEFAULT_OPTIMIZER: OptimizerSpec = {
  kind: "adam",
  learningRate: { peak: 1e-3, end: 1e-3 },
  warmupSteps: 0,
  momentum: 0,
  betas: [0.9, 0.999],
  epsilon: 1e-8,
  weightDecay: 0,
};

function normalizeOptimizer(raw: RawSpec["training"]["optimizer"]): OptimizerSpec {
  if (raw === undefined) return structuredClone(DEFAULT_OPTIMIZER);
  const adam = raw.kind === "adam" || raw.kind === "adamw";
  // learning rates: Adam's suggested 0.001 (Kingma & Ba 2015); 0.01 for SGD (common practice)
  const rate = raw["learning-rate"] ?? (adam ? 1e-3 : 1e-2);
  const learningRate = typeof rate === "number" ? { peak: rate, end: rate } : { peak: rate.peak, end: rate.end ?? rate.peak };
  const spec: OptimizerSpec = {
    kind: raw.kind,
    learningRate,
    warmupSteps: raw["warmup-steps"],
    // momentum 0.9 (common practice)
    momentum: raw.kind === "momentum" ? (raw.momentum ?? 0.9) : 0,
    betas: raw.betas ? [raw.betas[0], raw.betas[1]] : [0.9, 0.999],
    epsilon: raw.epsilon ?? 1e-8,
    // AdamW's decoupled weight decay 0.01 (common practice)
    weightDecay: raw["weight-decay"] ?? (raw.kind === "adamw" ? 0.01 : 0),
  };
  if (raw["clip-norm"] !== undefined) spec.clipNorm = raw["clip-norm"];
  return spec;
}

function normalizeHorizon(raw: RawSpec["training"]["horizon"]): HorizonSpec {
  if (raw === undefined) return { steps: 1, weightGrowth: 1 };
  const horizon: HorizonSpec = { steps: raw.steps, weightGrowth: raw["weight-growth"] };
  if (raw["final-loss"] !== undefined) horizon.finalLoss = raw["final-loss"];
  return horizon;
}

function normalizeTraining(raw: RawSpec["training"]): TrainingSpec {
  return {
    batch: raw.batch,
    loss:
      raw.loss.kind === "cross-entropy"
        ? { kind: "cross-entropy", classes: raw.loss.classes, reduction: raw.loss.reduction }
        : { kind: "mean-squared-error", reduction: raw.loss.reduction, targetScale: raw.loss["target-scale"] },
    workers: raw.workers,
    workerGradients: raw["worker-gradients"],
    accumulationSteps: raw["accumulation-steps"],
    optimizer: normalizeOptimizer(raw.optimizer),
    horizon: normalizeHorizon(raw.horizon),
  };
}

const STORAGE_BITS: Record<FormatName, number> = {
  binary16: 16,
  bfloat16: 16,
  binary32: 32,
  binary64: 64,
  tf32: 32,
  e5m2: 8,
  e4m3: 8,
};

/** The gradient contributions summed per update: workers × accumulation steps (1: nothing is summed). */
export function gradientContributions(training: Pick<TrainingSpec, "workers" | "accumulationSteps">): number {
  return training.workers * training.accumulationSteps;
}

/** The format a plan sums gradient contributions in (workers, accumulation steps): its `gradientSums`, else its gradients'. */
export function gradientSumFormat(plan: Pick<PrecisionPlan, "gradients" | "gradientSums">): FormatName {
  return plan.gradientSums ?? plan.gradients;
}

/** The name of the plan a spec evaluates when its `precision` gives none. */
export const DEFAULT_PLAN_NAME = "planned";

function normalizePlan(raw: RawPlan | undefined, fallbackName: string): PrecisionPlan {
  const activations = raw?.activations ?? "binary32";
  const weights = raw?.weights ?? activations;
  const gradients = raw?.gradients ?? activations;
  const optimizerStates = raw?.["optimizer-states"] ?? "binary32";
  // a master copy in binary32 when weights are stored narrower, so small updates are not lost (Micikevicius et al. 2018, sec. 3.1)
  const masterWeights = raw?.["master-weights"] ?? (STORAGE_BITS[weights] < 32 ? "binary32" : "none");
  const roles: (FormatName | "none")[] = [activations, weights, gradients, optimizerStates, masterWeights];
  const uses8bit = roles.some((role) => role !== "none" && STORAGE_BITS[role] === 8);
  const plan: PrecisionPlan = {
    name: raw?.name ?? fallbackName,
    activations,
    weights,
    gradients,
    optimizerStates,
    masterWeights,
    accumulate: raw?.accumulate ?? "binary32",
    overflow: raw?.overflow ?? "saturate",
    flushSubnormals: raw?.["flush-subnormals"] ?? false,
    scaling: raw?.scaling ?? (uses8bit ? "tensor" : "none"),
  };
  if (raw?.["loss-scale"] !== undefined) plan.lossScale = raw["loss-scale"];
  // absent, the sums follow the gradient format (also in a plan copied with other gradients): set only when named
  if (raw?.["gradient-sums"] !== undefined) plan.gradientSums = raw["gradient-sums"];
  return plan;
}

/** The spec's name when it gives none: the file name without folder and extension. */
function nameFromSource(source: string): string {
  const base = source.split(/[\\/]/).pop() ?? source;
  const stem = base.replace(/\.(ya?ml|json)$/i, "");
  return stem === "" || stem.startsWith("<") ? "network" : stem;
}

/** The validated YAML shape as a NetworkSpec. */
export function normalizeSpec(raw: RawSpec, source: string): NetworkSpec {
  const plans = (raw.plans ?? []).map((plan) => normalizePlan(plan, plan.name));
  let precision: PrecisionPlan;
  let others = plans;
  if (typeof raw.precision === "string") {
    const chosen = raw.precision;
    precision = plans.find((plan) => plan.name === chosen)!;
    others = plans.filter((plan) => plan.name !== chosen);
  } else {
    precision = normalizePlan(raw.precision, DEFAULT_PLAN_NAME);
  }
  // Object.fromEntries and a spread define own properties: a block or layer named __proto__ stays a key
  const blocks: Record<string, LayerSpec[]> = Object.fromEntries(
    Object.entries(raw.blocks ?? {}).map(([name, items]) => [name, normalizeLayers(items, ["blocks", name])]),
  );
  const spec: NetworkSpec = {
    source,
    name: raw.name ?? nameFromSource(source),
    description: raw.description ?? "",
    input: normalizeInput(raw.input),
    training: normalizeTraining(raw.training),
    precision,
    plans: others,
    blocks,
    layers: normalizeLayers(raw.layers, ["layers"]),
  };
  if (raw.measured !== undefined) {
    const weights = raw.measured.weights;
    spec.measured = {
      weights: weights === undefined ? [] : typeof weights === "string" ? [weights] : [...weights],
      names: { ...raw.measured.names },
    };
    if (raw.measured.statistics !== undefined) spec.measured.statistics = raw.measured.statistics;
  }
  return spec;
}
