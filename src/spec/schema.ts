/**
 * The network spec as written in YAML (kebab-case keys), as a zod schema. It is the one source of the
 * validation rules and of the JSON Schema that editors use; normalize.ts turns its output into a NetworkSpec.
 * Loading zod and building the schema cost a batch worker about 150 ms, and valid specs are read without
 * them (validate.ts), so both happen on first use only.
 */
import { createRequire } from "node:module";
import type * as Zod from "zod";
import { FORMAT_NAMES } from "../formats/names.js";
import { didYouMean } from "./issues.js";
import {
  ACTIVATION_TYPES,
  ATTENTION_SCALINGS,
  BARE_LAYER_TYPES,
  CONTROL_CHARACTER,
  controlCharacterMessage,
  DISTRIBUTIONS,
  FAN_RULES,
  FINAL_MESSAGE,
  INIT_SHORTHANDS,
  inputKindCount,
  LEAKY_RELU_SLOPE,
  MAX_EXPANDED_LAYERS,
  MAX_SIZE,
  MAGNITUDE_RANGE,
  MAX_STEPS,
  NAME_PATTERN,
  NORM_EPSILONS,
  OPTIMIZER_KINDS,
  OVERFLOW_MODES,
  PADDINGS,
  PLAN_SCALINGS,
  REDUCTIONS,
  SCALE_RANGE,
  WEIGHT_GROWTH_RANGE,
  WORKER_GRADIENTS,
} from "./limits.js";

/** Free text (a name, a description) without control characters. */
function freeText(text: Zod.ZodString) {
  return text.refine((value: string) => !CONTROL_CHARACTER.test(value), { error: (issue) => `${FINAL_MESSAGE}${controlCharacterMessage(String(issue.input))}` });
}

/** `; unknown key "featurs" (did you mean "features"?)` for each key of `input` that no kind of input has. */
function misspeltInputKeys(input: object, inputKeys: readonly string[]): string {
  const unknown = Object.keys(input).filter((key) => !inputKeys.includes(key));
  return unknown.map((key) => `; unknown key "${key}"${didYouMean(key, inputKeys)}`).join("");
}

export {
  ACTIVATION_TYPES,
  BARE_LAYER_TYPES,
  FINAL_MESSAGE,
  INIT_SHORTHANDS,
  inputKindCount,
  LAYER_TYPES,
  MAGNITUDE_RANGE,
  MAX_EXPANDED_LAYERS,
  MAX_SIZE,
  MAX_TENSOR_ELEMENTS,
  NAME_PATTERN,
  SCALE_RANGE,
  WEIGHT_GROWTH_RANGE,
  type LayerType,
} from "./limits.js";

function describeInput(value: unknown): string {
  if (value === null || value === undefined) return "an empty value";
  if (Array.isArray(value)) return "a list";
  if (typeof value === "string") return `the string ${JSON.stringify(value)}`;
  return typeof value === "object" ? "a mapping" : String(value);
}

/** The zod schemas of a spec, built with the given zod library. */
function buildSchemas(z: typeof Zod) {
  // ---------------------------------------------------------------------------------------------
  // building blocks

  const size = (description: string) => z.int().min(1).max(MAX_SIZE).describe(description);
  const count = (description: string) => z.int().min(0).max(MAX_SIZE).describe(description);
  const positive = (description: string) => z.number().positive().describe(description);
  const fraction = (description: string) => z.number().min(0).lt(1).describe(description);
  // a value beyond any real network is refused as a likely typo (limits.ts MAGNITUDE_RANGE)
  const magnitude = (description: string) => z.number().min(MAGNITUDE_RANGE.min).max(MAGNITUDE_RANGE.max).describe(description);
  // a value that may be 0 (an epsilon, a decay, a final value), else as large as `magnitude` allows
  const upToMagnitude = (description: string) => z.number().min(0).max(MAGNITUDE_RANGE.max).describe(description);
  const dataScale = (description: string) => z.number().min(SCALE_RANGE.min).max(SCALE_RANGE.max).describe(description);
  const format = (description: string) => z.enum(FORMAT_NAMES).describe(description);

  const layerName = z
    .string()
    .regex(NAME_PATTERN)
    .describe(
      "A name for the layer, unique within its list (ASCII letters, digits, '-' and '_'). Default: '<type>-<index>', " +
        "e.g. 'dense-3' for the layer at index 3",
    )
    .optional();

  const gain = magnitude("A factor on the standard deviation (default 1)").default(1);

  const initObject = z.discriminatedUnion("kind", [
    z
      .strictObject({
        kind: z
          .enum(FAN_RULES)
          .describe(
            "Variance rule: he 2/fan-in (He et al. 2015), glorot (also xavier) 2/(fan-in + fan-out) " +
              "(Glorot & Bengio 2010), lecun 1/fan-in",
          ),
        distribution: z.enum(DISTRIBUTIONS).describe("Normal or uniform draws (default normal)").default("normal"),
        gain,
      })
      .describe("A fan-based initialisation"),
    z
      .strictObject({
        kind: z.literal("normal").describe("Normal draws with a given standard deviation"),
        std: magnitude("The standard deviation"),
        gain,
      })
      .describe("A normal distribution with a given standard deviation"),
    z
      .strictObject({
        kind: z.literal("uniform").describe("Uniform draws on [-limit, limit]"),
        limit: magnitude("The half-width of the interval"),
        gain,
      })
      .describe("A uniform distribution on [-limit, limit]"),
    z
      .strictObject({
        kind: z.literal("orthogonal").describe("A (semi-)orthogonal matrix times the gain"),
        gain,
      })
      .describe("An orthogonal initialisation"),
    z
      .strictObject({ kind: z.literal("zeros").describe("All weights start at zero") })
      .describe("All zeros"),
  ]);

  const init = z
    .union([
      z.enum(INIT_SHORTHANDS).describe("A shorthand: he-normal, glorot-uniform, lecun-normal, orthogonal, zeros, …"),
      magnitude("The standard deviation of a normal initialisation"),
      initObject,
    ])
    .describe(
      "How the weights are initialised: a shorthand ('he-normal'), a number (the std of a normal), or an object " +
        "({ kind: normal, std: 0.02 }, { kind: he, distribution: uniform, gain: 1.4 })",
    )
    .meta({ id: "init" });


  // ---------------------------------------------------------------------------------------------
  // layers

  const dense = z
    .strictObject({
      type: z.literal("dense").describe("A fully connected layer"),
      name: layerName,
      width: size("Output features"),
      bias: z.boolean().describe("Whether the layer adds a bias (default true)").default(true),
      init: init.optional().describe("Weight initialisation (default lecun-normal)"),
    })
    .describe("A fully connected layer: y = W x + b");

  const conv2d = z
    .strictObject({
      type: z.literal("conv2d").describe("A 2-d convolution over channels-first images"),
      name: layerName,
      channels: size("Output channels"),
      kernel: size("Kernel height and width (square)"),
      stride: size("Stride in both directions (default 1)").default(1),
      padding: z
        .union([z.enum(PADDINGS), z.int().min(0).max(MAX_SIZE)])
        .describe("'same' keeps the image size at stride 1, 'valid' pads nothing, a number pads that many pixels each side (default same)")
        .default("same"),
      bias: z.boolean().describe("Whether the layer adds a bias (default true)").default(true),
      init: init.optional().describe("Kernel initialisation (default lecun-normal)"),
    })
    .describe("A 2-d convolution; the image size comes from the input and earlier layers");

  const embedding = z
    .strictObject({
      type: z.literal("embedding").describe("A table lookup of token ids; must be the first layer, with token input"),
      name: layerName,
      vocabulary: size("Number of rows (distinct token ids)"),
      width: size("Width of each row"),
      init: init.optional().describe("Initialisation of the rows (default: normal with std 1)"),
      multiplier: magnitude("A constant the looked-up rows are multiplied by, e.g. sqrt(width) (default 1)").default(1),
    })
    .describe("An embedding table");

  const activationObjects = ACTIVATION_TYPES.map((activation) =>
    activation === "leaky-relu"
      ? z
          .strictObject({
            type: z.literal("leaky-relu").describe("max(x, slope·x)"),
            name: layerName,
            slope: fraction(`Slope on the negative side (default ${LEAKY_RELU_SLOPE})`).default(LEAKY_RELU_SLOPE),
          })
          .describe("A leaky ReLU activation")
      : z
          .strictObject({
            type: z.literal(activation).describe(`The ${activation} activation`),
            name: layerName,
          })
          .describe(`The ${activation} activation`),
  );

  const norm = (type: "layer-norm" | "rms-norm" | "batch-norm", what: string, epsilon: number) =>
    z
      .strictObject({
        type: z.literal(type).describe(what),
        name: layerName,
        gain: magnitude("The value of the gain vector, initial or measured (default 1)").default(1),
        epsilon: upToMagnitude(`Added to the variance before the square root (default ${epsilon})`).default(epsilon),
      })
      .describe(what);

  const dropout = z
    .strictObject({
      type: z.literal("dropout").describe("Zeroes a fraction of the elements and rescales the rest by 1/(1-rate)"),
      name: layerName,
      rate: fraction("Fraction of elements dropped, in [0, 1)"),
    })
    .describe("Dropout");

  const pool = (type: "average-pool" | "max-pool", what: string) =>
    z
      .strictObject({
        type: z.literal(type).describe(what),
        name: layerName,
        size: size("Window height and width (square)"),
        stride: size("Stride (default: the window size)").optional(),
      })
      .describe(what);

  const flatten = z
    .strictObject({
      type: z.literal("flatten").describe("Turns channels × height × width into one feature vector"),
      name: layerName,
    })
    .describe("Flatten");

  const attention = z
    .strictObject({
      type: z.literal("attention").describe("Multi-head self-attention with query, key, value and output projections"),
      name: layerName,
      heads: size("Number of heads"),
      "head-width": size("Width of each head; heads × head-width is normally the model width"),
      causal: z.boolean().describe("Whether each position sees only earlier positions (default false)").default(false),
      scaling: z
        .enum(ATTENTION_SCALINGS)
        .describe("Where 1/sqrt(head-width) is applied: to the query before q·k, to the logits after it, or nowhere (default logits)")
        .default("logits"),
      "subtract-max": z
        .boolean()
        .describe("Whether the softmax subtracts the row maximum before exp (default true)")
        .default(true),
      init: init.optional().describe("Initialisation of the query, key and value projections (default lecun-normal)"),
      "output-init": init.optional().describe("Initialisation of the output projection (default: same as init)"),
    })
    .describe("Multi-head self-attention over the input's positions");

  const gatedFeedForward = z
    .strictObject({
      type: z.literal("gated-feed-forward").describe("down(activation(gate(x)) × up(x))"),
      name: layerName,
      hidden: size("Width of the gate and up projections"),
      activation: z.enum(ACTIVATION_TYPES).describe("The gate's activation (default silu)").default("silu"),
      init: init.optional().describe("Initialisation of the gate and up projections (default lecun-normal)"),
      "output-init": init.optional().describe("Initialisation of the down projection (default: same as init)"),
    })
    .describe("A gated feed-forward block; its output width equals its input width");

  const use = z
    .strictObject({
      type: z.literal("use").describe("Inserts a named block"),
      name: layerName,
      block: z.string().describe("The name of an entry of `blocks`"),
    })
    .describe("A reference to a named block");

  // Residual and repeat hold layer lists, so the layer schema is recursive (zod resolves the getters lazily).
  const residual = z
    .strictObject({
      type: z.literal("residual").describe("x + multiplier × branch(x)"),
      name: layerName,
      multiplier: magnitude("The branch output is multiplied by this before it is added to the input (default 1)").default(1),
      get branch(): Zod.ZodArray<typeof layer> {
        return z.array(layer).min(1).describe("The layers of the branch; the branch must keep the width of its input");
      },
    })
    .describe("A residual connection around a branch");

  const repeat = z
    .strictObject({
      type: z.literal("repeat").describe("The layers, repeated"),
      name: layerName,
      times: z.int().min(1).max(MAX_EXPANDED_LAYERS).describe("How many times"),
      get layers(): Zod.ZodArray<typeof layer> {
        return z.array(layer).min(1).describe("The layers to repeat");
      },
    })
    .describe("A list of layers repeated a number of times");

  const layerObject = z.discriminatedUnion("type", [
    dense,
    conv2d,
    embedding,
    ...(activationObjects as [(typeof activationObjects)[number], ...(typeof activationObjects)[number][]]),
    norm("layer-norm", "Layer normalization over the features of each position", NORM_EPSILONS["layer-norm"]),
    norm("rms-norm", "Root-mean-square normalization over the features of each position", NORM_EPSILONS["rms-norm"]),
    norm("batch-norm", "Batch normalization in training mode (statistics of the current batch)", NORM_EPSILONS["batch-norm"]),
    dropout,
    pool("average-pool", "Average pooling over square windows"),
    pool("max-pool", "Max pooling over square windows"),
    flatten,
    residual,
    attention,
    gatedFeedForward,
    use,
    repeat,
  ]);

  const layer: Zod.ZodUnion<readonly [Zod.ZodEnum<{ [K in (typeof BARE_LAYER_TYPES)[number]]: K }>, typeof layerObject]> = z
    .union([
      z.enum(BARE_LAYER_TYPES).describe("A layer without parameters, by its type"),
      layerObject,
    ], {
      error: (issue) =>
        issue.code === "invalid_union"
          ? `expected a layer: a mapping with a type key, or the bare type of a layer without parameters such as relu; got ${describeInput(issue.input)}`
          : undefined,
    })
    .describe("A layer: a mapping with a `type` key, or the bare type of a layer without parameters ('relu')")
    .meta({ id: "layer" });


  const layerList = z.array(layer).min(1);

  // ---------------------------------------------------------------------------------------------
  // input and training

  const inputKinds = [
    z
      .strictObject({
        features: size("Features per position"),
        positions: size("Positions per sample, e.g. a sequence length (default 1)").default(1),
        scale: dataScale("Root-mean-square of an input element (default 1)").default(1),
      })
      .describe("Real-valued features"),
    z
      .strictObject({
        tokens: size("Sequence length: token positions per sample; the first layer must be an embedding"),
      })
      .describe("Token ids"),
    z
      .strictObject({
        channels: size("Image channels"),
        height: size("Image height in pixels"),
        width: size("Image width in pixels"),
        scale: dataScale("Root-mean-square of a pixel value (default 1)").default(1),
      })
      .describe("Images, channels first"),
  ] as const;
  // every key some kind of input takes, in the order written, to name a misspelt one ("featurs")
  const inputKeys = [...new Set(inputKinds.flatMap((kind) => Object.keys(kind.shape)))];

  const input = z
    .union(
      inputKinds,
      {
        error: (issue) =>
          // an absent `input` is a missing key like any other required key, not "a mapping, got nothing"
          issue.input === undefined
            ? "missing key"
            : issue.code === "invalid_union" && inputKindCount(issue.input) > 1
            ? `${FINAL_MESSAGE}give one kind of input: features (with positions, scale), tokens, or channels, height and width (with scale)`
            : issue.code === "invalid_union" && Array.isArray(issue.input)
            ? `${FINAL_MESSAGE}expected a mapping such as { features: 784 }, got a list`
            : issue.code === "invalid_union" && inputKindCount(issue.input) === 0 && typeof issue.input === "object" && issue.input !== null
              ? `${FINAL_MESSAGE}expected features, tokens, or channels, height and width${misspeltInputKeys(issue.input as object, inputKeys)}`
              : undefined,
      },
    )
    .describe("One sample: { features, positions?, scale? }, { tokens } or { channels, height, width, scale? }");


  const loss = z
    .discriminatedUnion("kind", [
      z
        .strictObject({
          kind: z.literal("cross-entropy").describe("Softmax cross-entropy"),
          classes: z.int().min(2).max(MAX_SIZE).describe("Number of classes; the last layer's width"),
          reduction: z.enum(REDUCTIONS).describe("How per-sample losses are combined (default mean)").default("mean"),
        })
        .describe("Softmax cross-entropy over a number of classes"),
      z
        .strictObject({
          kind: z.literal("mean-squared-error").describe("Mean squared error"),
          reduction: z.enum(REDUCTIONS).describe("How per-element losses are combined (default mean)").default("mean"),
          "target-scale": dataScale("Root-mean-square of a target value (default 1)").default(1),
        })
        .describe("Squared error against real-valued targets"),
    ])
    .describe("The loss: { kind: cross-entropy, classes } or { kind: mean-squared-error }");

  const learningRate = z
    .union([
      magnitude("A constant learning rate"),
      z
        .strictObject({
          peak: magnitude("The schedule's peak (reached after warm-up)"),
          end: upToMagnitude("The final value (default: the peak)").optional(),
        })
        .describe("A schedule's peak and end"),
    ])
    .describe("A constant rate, or { peak, end } (default 0.001 for adam/adamw, 0.01 for sgd/momentum)");

  const optimizer = z
    .strictObject({
      kind: z.enum(OPTIMIZER_KINDS).describe("sgd, momentum (SGD with momentum), adam or adamw"),
      "learning-rate": learningRate.optional(),
      "warmup-steps": count("Steps of linear warm-up to the peak (default 0)").default(0),
      momentum: fraction("Momentum coefficient, for kind momentum only (default 0.9)").optional(),
      betas: z
        .tuple([fraction("beta1"), fraction("beta2")])
        .describe("Adam's decay rates [beta1, beta2], each in [0, 1), for adam and adamw only (default [0.9, 0.999])")
        .optional(),
      epsilon: upToMagnitude("Adam's epsilon, for adam and adamw only (default 1e-8)").optional(),
      "weight-decay": upToMagnitude("Weight decay (default 0; 0.01 for adamw)").optional(),
      "clip-norm": magnitude("Clip gradients to this global norm (off when absent)").optional(),
    })
    .describe("The optimizer (default: adam with learning rate 0.001)");

  const horizon = z
    .strictObject({
      steps: z.int().min(1).max(MAX_STEPS).describe("Training steps until the end"),
      "final-loss": upToMagnitude("Expected loss at the end, per sample (the mean over samples and positions, also with reduction: sum); gradients shrink as the loss falls (absent: not assumed to shrink)").optional(),
      "weight-growth": z
        .number()
        .min(WEIGHT_GROWTH_RANGE.min)
        .max(WEIGHT_GROWTH_RANGE.max)
        .describe("How much the weights' rms grows by the end (default 1: not at all; from 0.001 to 1000)")
        .default(1),
    })
    .describe("Where training is expected to end, so late-training gradients are covered too (default: the first step only)");

  const training = z
    .strictObject({
      batch: size("Samples per step on one worker (per accumulation step)"),
      loss,
      workers: size("Data-parallel workers (default 1)").default(1),
      "worker-gradients": z
        .enum(WORKER_GRADIENTS)
        .describe("Whether gradients are summed or averaged across workers (default average)")
        .default("average"),
      "accumulation-steps": size("Micro-batches whose gradients are accumulated before each update (default 1)").default(1),
      optimizer: optimizer.optional(),
      horizon: horizon.optional(),
    })
    .describe("The training setup");

  // ---------------------------------------------------------------------------------------------
  // precision

  const planFields = {
    activations: format("Storage format of activations (default binary32)").optional(),
    weights: format("Storage format of weights (default: as activations)").optional(),
    gradients: format("Storage format of activation and weight gradients (default: as activations)").optional(),
    "optimizer-states": format("Storage format of optimizer states (default binary32)").optional(),
    "master-weights": z
      .union([z.enum(FORMAT_NAMES), z.literal("none")])
      .describe("The master copy the optimizer updates, or none (default binary32 when weights are narrower, else none)")
      .optional(),
    accumulate: format("Accumulate format of matrix products and reductions (default binary32)").optional(),
    "gradient-sums": format(
      "Format of the buffer the gradients of workers and accumulation steps are summed in (default: as gradients)",
    ).optional(),
    "loss-scale": positive("A static loss scale to evaluate, a power of two (absent: headroom recommends one)").optional(),
    overflow: z
      .enum(OVERFLOW_MODES)
      .describe("What 8-bit conversions do on overflow: clamp to the largest finite value, or give infinity/NaN (default saturate)")
      .default("saturate"),
    "flush-subnormals": z
      .boolean()
      .describe("Whether results below the smallest normal become zero (default false); bfloat16 is judged flushing them either way")
      .default(false),
    scaling: z
      .enum(PLAN_SCALINGS)
      .describe("Scale factors for 8-bit formats: per tensor, per block of 32 elements, or none (default tensor when an 8-bit format is used)")
      .optional(),
  };

  const plan = z
    .strictObject({
      name: z.string().regex(NAME_PATTERN).describe("The plan's name (default 'planned')").optional(),
      ...planFields,
    })
    .describe("A precision plan: the format of each tensor role");

  const namedPlan = z
    .strictObject({
      name: z.string().regex(NAME_PATTERN).describe("The plan's name, unique among plans"),
      ...planFields,
    })
    .describe("A named precision plan, for comparisons");

  // ---------------------------------------------------------------------------------------------
  // the whole spec

  const tensorName = z.string().min(1);
  const measured = z
    .strictObject({
      weights: z
        .union([z.string().min(1), z.array(z.string().min(1))])
        .describe("safetensors or .npy files (globs allowed), relative to the spec's folder")
        .optional(),
      names: z
        .record(z.string(), tensorName)
        .describe("Layer name → tensor name in the weights files, where the default matching is wrong")
        .optional(),
      statistics: z.string().min(1).describe("A recorded-statistics file (CSV or JSON) from a short real run").optional(),
    })
    .describe("Measured data that replaces predictions");

  // the whole spec file, as written (kebab-case keys)
  const specSchema = z
    .strictObject({
      $schema: z.string().describe("The JSON Schema this file follows (for editors); ignored").optional(),
      name: freeText(z.string().min(1)).describe("The network's name (default: the file name)").optional(),
      description: freeText(z.string()).describe("What the network is for").optional(),
      input: input,
      training,
      precision: z
        .union([plan, z.string().regex(NAME_PATTERN).describe("The name of an entry of `plans`")])
        .describe("The precision plan to evaluate, or the name of one of `plans` (default: everything in binary32)")
        .optional(),
      plans: z.array(namedPlan).describe("Further named precision plans, for comparisons").optional(),
      blocks: z
        .record(z.string().regex(NAME_PATTERN), layerList.describe("The block's layers"))
        .describe("Named lists of layers, inserted with { type: use, block: <name> }")
        .optional(),
      layers: layerList.describe("The network's layers, input to output"),
      measured: measured.optional(),
    })
    .describe("A network spec for headroom: layers, initialisation, training setup and precision plan");

  return { specSchema, plan, input, init, layer, layerObject, layerList, tensorName };
}

type Schemas = ReturnType<typeof buildSchemas>;
export type RawSpec = Zod.output<Schemas["specSchema"]>;
export type RawPlan = Zod.output<Schemas["plan"]>;
export type RawInput = Zod.output<Schemas["input"]>;
export type RawInit = Zod.output<Schemas["init"]>;
export type RawLayer = Zod.output<Schemas["layer"]>;
export type RawLayerObject = Zod.output<Schemas["layerObject"]>;

let zod: typeof Zod | undefined;
let schemas: Schemas | undefined;

/** The zod library, loaded on first use (its CommonJS build: the loader stays synchronous). */
function zodLib(): typeof Zod {
  return (zod ??= createRequire(import.meta.url)("zod") as typeof Zod);
}

/** The whole spec file, as written (kebab-case keys), as a zod schema; built on the first call. */
export function specSchema(): Schemas["specSchema"] {
  return (schemas ??= buildSchemas(zodLib())).specSchema;
}

/**
 * zod's records skip a key named "__proto__": its value is neither checked nor copied to the output (an assignment
 * would set the output's prototype). In a spec it is a name like any other (it matches NAME_PATTERN), so the two
 * records keyed by names, `blocks` and `measured.names`, have that entry checked here with the record's value
 * schema and, when `output` is zod's successful parse, kept in it as an own property in the document's key order.
 * Gives the issues of those values with the path of each entry.
 */
export function keepProtoEntries(
  input: Record<string, unknown>,
  output: RawSpec | undefined,
  params: Zod.core.ParseContext<Zod.core.$ZodIssue>,
): { path: string[]; issues: Zod.core.$ZodIssue[] }[] {
  const { layerList, tensorName } = (schemas ??= buildSchemas(zodLib()));
  const out: { path: string[]; issues: Zod.core.$ZodIssue[] }[] = [];
  const keep = (record: unknown, parsed: Record<string, unknown> | undefined, schema: Zod.ZodType, path: string[]): Record<string, unknown> | undefined => {
    if (typeof record !== "object" || record === null || Array.isArray(record) || !Object.hasOwn(record, "__proto__")) return parsed;
    const checked = schema.safeParse((record as Record<string, unknown>)["__proto__"], params);
    if (!checked.success) {
      out.push({ path: [...path, "__proto__"], issues: checked.error.issues });
      return parsed;
    }
    if (parsed === undefined) return parsed;
    // Object.fromEntries defines own properties, so "__proto__" stays a key
    return Object.fromEntries(Object.keys(record).map((key) => [key, key === "__proto__" ? checked.data : parsed[key]]));
  };
  const blocks = keep(input["blocks"], output?.blocks, layerList, ["blocks"]);
  if (output !== undefined && blocks !== undefined) output.blocks = blocks as RawSpec["blocks"];
  const measured = input["measured"];
  if (typeof measured === "object" && measured !== null) {
    const names = keep((measured as Record<string, unknown>)["names"], output?.measured?.names, tensorName, ["measured", "names"]);
    if (output?.measured !== undefined && names !== undefined) output.measured.names = names as Record<string, string>;
  }
  return out;
}

let cachedJsonSchema: Record<string, unknown> | undefined;

/**
 * The JSON Schema (draft-07) of a spec file, for editors' YAML support. A fresh copy each call.
 * Fields with defaults are optional in it (the input side of the schema).
 */
export function specJsonSchema(): Record<string, unknown> {
  cachedJsonSchema ??= {
    ...(zodLib().toJSONSchema(specSchema(), { target: "draft-07", io: "input" }) as Record<string, unknown>),
    title: "headroom network spec",
    // the loader ignores top-level keys starting with "x-": a place for YAML anchors
    patternProperties: { "^x-": { description: "Your own key, ignored by headroom (a place to keep YAML anchors)" } },
  };
  return structuredClone(cachedJsonSchema);
}

/** The JSON Schema as the text committed in specs/network-spec.schema.json (2-space indent, final newline). */
export function specJsonSchemaText(): string {
  return JSON.stringify(specJsonSchema(), null, 2) + "\n";
}
