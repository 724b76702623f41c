/**
 * The spec's names and limits, without the zod schema: the plain-data checks, the messages and the fast
 * validator use them without loading zod (schema.ts re-exports them).
 */
import { ACTIVATIONS } from "./types.js";

/** Marks a union's own message as the one to show (see messages.ts). */
export const FINAL_MESSAGE = "\u0001";

/** Largest size (width, vocabulary, batch…) accepted: larger is beyond any real network and likely a typo. */
export const MAX_SIZE = 1e9;
/** Largest element count accepted for one tensor the spec fixes on its own (input batch, embedding table). */
export const MAX_TENSOR_ELEMENTS = 1e12;
/** Largest number of layers a spec may expand to (repeats and blocks unrolled). */
export const MAX_EXPANDED_LAYERS = 1_000_000;

/**
 * The range of a magnitude the spec gives as a number (init std, limit and gain, norm gains, multipliers, learning
 * rates): 10^-30 to 10^30. No real network comes near either end, and the engine squares these values and takes
 * fourth moments of them (10^±120), times element counts up to 10^12, which binary64 (2^±1022, about 10^±308,
 * IEEE 754-2019 Table 3.5) still carries with room for the products of depth. A weight's std × gain × growth stays
 * within 10^63, about 2^209.
 */
export const MAGNITUDE_RANGE = { min: 1e-30, max: 1e30 } as const;
/**
 * The range of the data's scales (`input.scale`, `target-scale`): 10^-60 to 10^60, past every format judged
 * (binary32 holds 2^-149 ≈ 1.4e-45 to 3.4e38, IEEE 754-2019 Table 3.5), so that a spec can describe data no format
 * holds and see it fail, while the fourth power of either end (10^±240) stays inside binary64.
 */
export const SCALE_RANGE = { min: 1e-60, max: 1e60 } as const;
/**
 * The range of `horizon.weight-growth`: 10^-3 to 10^3. Weights a thousand times larger or smaller than at
 * initialisation are beyond any real run, and the growth compounds over depth (g^depth), so a larger bound would
 * leave binary64 within a few dozen layers.
 */
export const WEIGHT_GROWTH_RANGE = { min: 1e-3, max: 1e3 } as const;

/**
 * Why a loss scale 2^exponent is refused, or undefined when it lies in binary32's normal range 2^-126 to 2^127
 * (IEEE 754-2019 Table 3.5: emin −126, emax 127, p 24; the smallest subnormal is 2^(emin−p+1) = 2^-149), where the
 * scaled loss is computed with full precision.
 */
export function lossScaleRangeProblem(exponent: number): string | undefined {
  if (exponent >= -126 && exponent <= 127) return undefined;
  const why =
    exponent > 127
      ? "above its largest finite value"
      : exponent >= -149
        ? "a subnormal there, holding fewer significant bits"
        : "below binary32's smallest subnormal, 2^-149: it would be zero";
  return `2^${exponent} is outside binary32's normal range, 2^-126 to 2^127 (${why})`;
}

/**
 * What is wrong with a loss scale, or undefined when it is usable: a power of two, so scaling and unscaling change only
 * exponents and are exact (Micikevicius et al. 2018 §3.2), inside binary32's normal range ({@link lossScaleRangeProblem}).
 * The spec's `loss-scale`, `--loss-scale` and the library's `lossScale` option share it.
 */
export function lossScaleProblem(scale: number): string | undefined {
  if (!(scale > 0) || !Number.isFinite(scale)) return `must be a positive finite power of two, got ${scale}`;
  const exponent = Math.log2(scale);
  if (!Number.isInteger(exponent) || 2 ** exponent !== scale) return `must be a power of two (such as 1024 or 65536), got ${scale}`;
  return lossScaleRangeProblem(exponent);
}

/** A bound as a message writes it: 1e30 rather than 1e+30. */
export function boundText(value: number): string {
  return String(value).replace("e+", "e");
}

/** Layer and block names: letters, digits, "_" and "-", starting with a letter, digit or "_". */
export const NAME_PATTERN = /^[A-Za-z0-9_][A-Za-z0-9_-]*$/;

/**
 * Control characters a spec's free text (`name`, `description`) may not hold: C0 but tab, LF and CR, DEL, and C1
 * (Unicode's Cc category). They reach terminals as they are, and ESC or CSI there starts a command (ECMA-48 §5.3).
 */
export const CONTROL_CHARACTER = /[\u0000-\u0008\u000b\u000c\u000e-\u001f\u007f-\u009f]/;

/** The message for free text holding a control character, naming the first. */
export function controlCharacterMessage(text: string): string {
  const found = CONTROL_CHARACTER.exec(text)?.[0] ?? "";
  const code = found.charCodeAt(0).toString(16).toUpperCase().padStart(4, "0");
  return `holds the control character U+${code}, which a terminal would act on; remove it`;
}

/** Every layer `type` a spec may use. */
export const LAYER_TYPES = [
  "dense",
  "conv2d",
  "embedding",
  ...ACTIVATIONS,
  "layer-norm",
  "rms-norm",
  "batch-norm",
  "dropout",
  "average-pool",
  "max-pool",
  "flatten",
  "residual",
  "attention",
  "gated-feed-forward",
  "use",
  "repeat",
] as const;
export type LayerType = (typeof LAYER_TYPES)[number];

/** Layer types that need no parameters and so may be written as a bare string (`- relu`). */
export const BARE_LAYER_TYPES = [
  ...ACTIVATIONS,
  "layer-norm",
  "rms-norm",
  "batch-norm",
  "flatten",
] as const satisfies readonly LayerType[];

/** Initialisation shorthands: `<rule>-<distribution>`, plus `orthogonal` and `zeros`. */
export const INIT_SHORTHANDS = [
  "he-normal",
  "he-uniform",
  "glorot-normal",
  "glorot-uniform",
  "xavier-normal",
  "xavier-uniform",
  "lecun-normal",
  "lecun-uniform",
  "orthogonal",
  "zeros",
] as const;

/** The activation layer types (the bare ones and leaky-relu). */
export const ACTIVATION_TYPES = ACTIVATIONS;

/** Largest `horizon.steps` accepted. */
export const MAX_STEPS = 1e12;

/** Variance rules of a fan-based initialisation. */
export const FAN_RULES = ["he", "glorot", "xavier", "lecun"] as const;
/** Distributions of a fan-based initialisation. */
export const DISTRIBUTIONS = ["normal", "uniform"] as const;
/** Named conv2d paddings. */
export const PADDINGS = ["same", "valid"] as const;
/** Where attention applies 1/sqrt(head-width). */
export const ATTENTION_SCALINGS = ["query", "logits", "none"] as const;
/** How a loss combines per-sample losses. */
export const REDUCTIONS = ["mean", "sum"] as const;
/** Optimizer kinds. */
export const OPTIMIZER_KINDS = ["sgd", "momentum", "adam", "adamw"] as const;
/** How gradients are combined across workers. */
export const WORKER_GRADIENTS = ["sum", "average"] as const;
/** What 8-bit conversions do on overflow. */
export const OVERFLOW_MODES = ["saturate", "infinity-or-nan"] as const;
/** Scale factors for 8-bit formats. */
export const PLAN_SCALINGS = ["none", "tensor", "block"] as const;
/** leaky-relu's default slope on the negative side (common practice). */
export const LEAKY_RELU_SLOPE = 0.01;

/** Default epsilon of each normalization layer type: 1e-5 for layer and batch norm, 1e-6 for rms norm (common practice). */
export const NORM_EPSILONS = { "layer-norm": 1e-5, "rms-norm": 1e-6, "batch-norm": 1e-5 } as const;

const INPUT_KINDS = [["features", "positions"], ["tokens"], ["channels", "height", "width"]] as const;

/** How many kinds of input an `input` mapping names keys of (features, tokens, image). */
export function inputKindCount(value: unknown): number {
  if (typeof value !== "object" || value === null) return 0;
  return INPUT_KINDS.filter((keys) => keys.some((key) => key in value)).length;
}
