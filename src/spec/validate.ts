/**
 * A fast validator for specs that are valid: it walks the plain data of a spec the way the zod schema in
 * schema.ts does and returns exactly what the schema's parse returns (defaults filled in, keys in the
 * schema's order), or undefined as soon as anything is not certainly valid. The caller then runs zod,
 * which finds and words every problem; so this file never words an error and never decides that a spec
 * is invalid. It exists because a batch worker would otherwise load zod (about 150 ms per worker) and
 * spend about half a millisecond per spec in it. test/spec/validate.test.ts holds it to zod's answers on
 * generated valid and invalid specs.
 */
import { FORMAT_NAMES } from "../formats/names.js";
import {
  ACTIVATION_TYPES,
  ATTENTION_SCALINGS,
  BARE_LAYER_TYPES,
  CONTROL_CHARACTER,
  DISTRIBUTIONS,
  FAN_RULES,
  INIT_SHORTHANDS,
  LEAKY_RELU_SLOPE,
  MAGNITUDE_RANGE,
  MAX_EXPANDED_LAYERS,
  MAX_SIZE,
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
import type { RawSpec } from "./schema.js";

type Data = Record<string, unknown>;

/** Thrown inside the validator when the data leaves what it accepts; never escapes it. */
class Refused extends Error {}
const REFUSED = new Refused();

function refuse(): never {
  throw REFUSED;
}

/** A plain mapping (what the YAML readers give) whose keys are all among `keys`. */
function mapping(value: unknown, keys: ReadonlySet<string>): Data {
  if (typeof value !== "object" || value === null || Array.isArray(value) || Object.getPrototypeOf(value) !== Object.prototype) refuse();
  for (const key in value) if (!keys.has(key)) refuse();
  return value as Data;
}

/** A plain mapping used as a record (any keys but `__proto__`, which an assignment would not copy). */
function record(value: unknown): Data {
  if (typeof value !== "object" || value === null || Array.isArray(value) || Object.getPrototypeOf(value) !== Object.prototype) refuse();
  if (Object.hasOwn(value, "__proto__")) refuse();
  return value as Data;
}

function list(value: unknown): unknown[] {
  return Array.isArray(value) ? value : refuse();
}

// zod's number() takes finite numbers only, int() safe integers only
function finite(value: unknown): number {
  return typeof value === "number" && Number.isFinite(value) ? value : refuse();
}

function integer(value: unknown, min: number, max: number): number {
  return Number.isSafeInteger(value) && (value as number) >= min && (value as number) <= max ? (value as number) : refuse();
}

/** schema.ts `size`: a whole number from 1 to MAX_SIZE. */
const size = (value: unknown): number => integer(value, 1, MAX_SIZE);
/** schema.ts `count`: a whole number from 0 to MAX_SIZE. */
const count = (value: unknown): number => integer(value, 0, MAX_SIZE);
const positive = (value: unknown): number => (finite(value) > 0 ? (value as number) : refuse());
const nonNegative = (value: unknown): number => (finite(value) >= 0 ? (value as number) : refuse());
/** schema.ts `magnitude`: a number within MAGNITUDE_RANGE. */
const magnitude = (value: unknown): number => (finite(value) >= MAGNITUDE_RANGE.min && (value as number) <= MAGNITUDE_RANGE.max ? (value as number) : refuse());
/** schema.ts `upToMagnitude`: 0 to MAGNITUDE_RANGE.max. */
const upToMagnitude = (value: unknown): number => (nonNegative(value) <= MAGNITUDE_RANGE.max ? (value as number) : refuse());
/** schema.ts `dataScale`: a number within SCALE_RANGE. */
const dataScale = (value: unknown): number => (finite(value) >= SCALE_RANGE.min && (value as number) <= SCALE_RANGE.max ? (value as number) : refuse());
const weightGrowth = (value: unknown): number => (finite(value) >= WEIGHT_GROWTH_RANGE.min && (value as number) <= WEIGHT_GROWTH_RANGE.max ? (value as number) : refuse());
const fraction = (value: unknown): number => (finite(value) >= 0 && (value as number) < 1 ? (value as number) : refuse());
const boolean = (value: unknown): boolean => (typeof value === "boolean" ? value : refuse());
const string = (value: unknown): string => (typeof value === "string" ? value : refuse());
const nonEmpty = (value: unknown): string => (string(value).length >= 1 ? (value as string) : refuse());
const text = (value: unknown): string => (CONTROL_CHARACTER.test(string(value)) ? refuse() : (value as string));
const name = (value: unknown): string => (NAME_PATTERN.test(string(value)) ? (value as string) : refuse());

// An accepted name is returned as the list's own literal, not the string read from the document: a literal is an
// interned string, so every later compare against a literal is one pointer compare, and optimised code that met
// only interned strings is not thrown away when a document's copy arrives (V8 deoptimises on "wrong instance type").
function oneOf<T extends string>(values: readonly T[]): (value: unknown) => T {
  const canonical = new Map<string, T>(values.map((v) => [v, v]));
  return (value) => (typeof value === "string" ? canonical.get(value) : undefined) ?? refuse();
}

const format = oneOf(FORMAT_NAMES);
const masterFormat = oneOf([...FORMAT_NAMES, "none"] as const);

/** Copy `key` from `from` to `to` through `check` when it is there (an optional key). */
function optional(to: Data, from: Data, key: string, check: (value: unknown) => unknown): void {
  const value = from[key];
  if (value !== undefined) to[key] = check(value);
  else if (key in from) refuse();
}

/** Copy `key` through `check`, or its default when it is absent. */
function withDefault(to: Data, from: Data, key: string, check: (value: unknown) => unknown, fallback: unknown): void {
  const value = from[key];
  if (value !== undefined) to[key] = check(value);
  else if (key in from) refuse();
  else to[key] = fallback;
}

const keys = (...names: string[]): ReadonlySet<string> => new Set(names);

// ---------------------------------------------------------------------------------------------
// initialisation

const INIT_SHORTHAND = oneOf(INIT_SHORTHANDS);
const FAN_RULE = new Set<string>(FAN_RULES);
const FAN_KEYS = keys("kind", "distribution", "gain");
const NORMAL_KEYS = keys("kind", "std", "gain");
const UNIFORM_KEYS = keys("kind", "limit", "gain");
const ORTHOGONAL_KEYS = keys("kind", "gain");
const ZEROS_KEYS = keys("kind");
const distribution = oneOf(DISTRIBUTIONS);

function init(value: unknown): unknown {
  if (typeof value === "string") return INIT_SHORTHAND(value);
  if (typeof value === "number") return magnitude(value);
  const kind = (value as Data | null)?.["kind"];
  const out: Data = {};
  if (typeof kind === "string" && FAN_RULE.has(kind)) {
    const raw = mapping(value, FAN_KEYS);
    out["kind"] = kind;
    withDefault(out, raw, "distribution", distribution, "normal");
    withDefault(out, raw, "gain", magnitude, 1);
  } else if (kind === "normal") {
    const raw = mapping(value, NORMAL_KEYS);
    out["kind"] = kind;
    out["std"] = magnitude(raw["std"]);
    withDefault(out, raw, "gain", magnitude, 1);
  } else if (kind === "uniform") {
    const raw = mapping(value, UNIFORM_KEYS);
    out["kind"] = kind;
    out["limit"] = magnitude(raw["limit"]);
    withDefault(out, raw, "gain", magnitude, 1);
  } else if (kind === "orthogonal") {
    const raw = mapping(value, ORTHOGONAL_KEYS);
    out["kind"] = kind;
    withDefault(out, raw, "gain", magnitude, 1);
  } else if (kind === "zeros") {
    mapping(value, ZEROS_KEYS);
    out["kind"] = kind;
  } else refuse();
  return out;
}

// ---------------------------------------------------------------------------------------------
// layers

const BARE = oneOf(BARE_LAYER_TYPES);
const ACTIVATION = oneOf(ACTIVATION_TYPES);
const PADDING = oneOf(PADDINGS);
const SCALING = oneOf(ATTENTION_SCALINGS);

/** Each layer type's keys, and how its fields after `type` and `name` are read, in the schema's order. */
const LAYERS: Record<string, { keys: ReadonlySet<string>; fields: (out: Data, raw: Data) => void }> = {
  dense: {
    keys: keys("type", "name", "width", "bias", "init"),
    fields: (out, raw) => {
      out["width"] = size(raw["width"]);
      withDefault(out, raw, "bias", boolean, true);
      optional(out, raw, "init", init);
    },
  },
  conv2d: {
    keys: keys("type", "name", "channels", "kernel", "stride", "padding", "bias", "init"),
    fields: (out, raw) => {
      out["channels"] = size(raw["channels"]);
      out["kernel"] = size(raw["kernel"]);
      withDefault(out, raw, "stride", size, 1);
      withDefault(out, raw, "padding", (value) => (typeof value === "string" ? PADDING(value) : count(value)), "same");
      withDefault(out, raw, "bias", boolean, true);
      optional(out, raw, "init", init);
    },
  },
  embedding: {
    keys: keys("type", "name", "vocabulary", "width", "init", "multiplier"),
    fields: (out, raw) => {
      out["vocabulary"] = size(raw["vocabulary"]);
      out["width"] = size(raw["width"]);
      optional(out, raw, "init", init);
      withDefault(out, raw, "multiplier", magnitude, 1);
    },
  },
  "layer-norm": norm(NORM_EPSILONS["layer-norm"]),
  "rms-norm": norm(NORM_EPSILONS["rms-norm"]),
  "batch-norm": norm(NORM_EPSILONS["batch-norm"]),
  dropout: {
    keys: keys("type", "name", "rate"),
    fields: (out, raw) => {
      out["rate"] = fraction(raw["rate"]);
    },
  },
  "average-pool": pool(),
  "max-pool": pool(),
  flatten: { keys: keys("type", "name"), fields: () => {} },
  residual: {
    keys: keys("type", "name", "multiplier", "branch"),
    fields: (out, raw) => {
      withDefault(out, raw, "multiplier", magnitude, 1);
      out["branch"] = layerList(raw["branch"]);
    },
  },
  attention: {
    keys: keys("type", "name", "heads", "head-width", "causal", "scaling", "subtract-max", "init", "output-init"),
    fields: (out, raw) => {
      out["heads"] = size(raw["heads"]);
      out["head-width"] = size(raw["head-width"]);
      withDefault(out, raw, "causal", boolean, false);
      withDefault(out, raw, "scaling", SCALING, "logits");
      withDefault(out, raw, "subtract-max", boolean, true);
      optional(out, raw, "init", init);
      optional(out, raw, "output-init", init);
    },
  },
  "gated-feed-forward": {
    keys: keys("type", "name", "hidden", "activation", "init", "output-init"),
    fields: (out, raw) => {
      out["hidden"] = size(raw["hidden"]);
      withDefault(out, raw, "activation", ACTIVATION, "silu");
      optional(out, raw, "init", init);
      optional(out, raw, "output-init", init);
    },
  },
  use: {
    keys: keys("type", "name", "block"),
    fields: (out, raw) => {
      out["block"] = string(raw["block"]);
    },
  },
  repeat: {
    keys: keys("type", "name", "times", "layers"),
    fields: (out, raw) => {
      out["times"] = integer(raw["times"], 1, MAX_EXPANDED_LAYERS);
      out["layers"] = layerList(raw["layers"]);
    },
  },
};
for (const activation of ACTIVATION_TYPES) {
  LAYERS[activation] =
    activation === "leaky-relu"
      ? { keys: keys("type", "name", "slope"), fields: (out, raw) => withDefault(out, raw, "slope", fraction, LEAKY_RELU_SLOPE) }
      : { keys: keys("type", "name"), fields: () => {} };
}

function norm(epsilon: number): (typeof LAYERS)[string] {
  return {
    keys: keys("type", "name", "gain", "epsilon"),
    fields: (out, raw) => {
      withDefault(out, raw, "gain", magnitude, 1);
      withDefault(out, raw, "epsilon", upToMagnitude, epsilon);
    },
  };
}

function pool(): (typeof LAYERS)[string] {
  return {
    keys: keys("type", "name", "size", "stride"),
    fields: (out, raw) => {
      out["size"] = size(raw["size"]);
      optional(out, raw, "stride", size);
    },
  };
}

// the layer types as literals (see oneOf)
const LAYER_TYPE = oneOf(Object.keys(LAYERS));

function layer(value: unknown): unknown {
  if (typeof value === "string") return BARE(value);
  const type = (value as Data | null)?.["type"];
  const kind = typeof type === "string" && Object.hasOwn(LAYERS, type) ? LAYERS[type]! : refuse();
  const raw = mapping(value, kind.keys);
  const out: Data = { type: LAYER_TYPE(type) };
  optional(out, raw, "name", name);
  kind.fields(out, raw);
  return out;
}

function layerList(value: unknown): unknown[] {
  const items = list(value);
  if (items.length < 1) refuse();
  return items.map(layer);
}

// ---------------------------------------------------------------------------------------------
// input and training

const FEATURES_KEYS = keys("features", "positions", "scale");
const TOKENS_KEYS = keys("tokens");
const IMAGE_KEYS = keys("channels", "height", "width", "scale");

function input(value: unknown): Data {
  const out: Data = {};
  // the schema's union of strict objects: at most one branch takes a mapping, the one whose required key it has
  if (typeof value === "object" && value !== null && "features" in value) {
    const raw = mapping(value, FEATURES_KEYS);
    out["features"] = size(raw["features"]);
    withDefault(out, raw, "positions", size, 1);
    withDefault(out, raw, "scale", dataScale, 1);
  } else if (typeof value === "object" && value !== null && "tokens" in value) {
    out["tokens"] = size(mapping(value, TOKENS_KEYS)["tokens"]);
  } else if (typeof value === "object" && value !== null && "channels" in value) {
    const raw = mapping(value, IMAGE_KEYS);
    out["channels"] = size(raw["channels"]);
    out["height"] = size(raw["height"]);
    out["width"] = size(raw["width"]);
    withDefault(out, raw, "scale", dataScale, 1);
  } else refuse();
  return out;
}

const REDUCTION = oneOf(REDUCTIONS);
const CROSS_ENTROPY_KEYS = keys("kind", "classes", "reduction");
const SQUARED_ERROR_KEYS = keys("kind", "reduction", "target-scale");

function loss(value: unknown): Data {
  const kind = (value as Data | null)?.["kind"];
  const out: Data = { kind };
  if (kind === "cross-entropy") {
    const raw = mapping(value, CROSS_ENTROPY_KEYS);
    out["classes"] = integer(raw["classes"], 2, MAX_SIZE);
    withDefault(out, raw, "reduction", REDUCTION, "mean");
  } else if (kind === "mean-squared-error") {
    const raw = mapping(value, SQUARED_ERROR_KEYS);
    withDefault(out, raw, "reduction", REDUCTION, "mean");
    withDefault(out, raw, "target-scale", dataScale, 1);
  } else refuse();
  return out;
}

const SCHEDULE_KEYS = keys("peak", "end");

function learningRate(value: unknown): unknown {
  if (typeof value === "number") return magnitude(value);
  const raw = mapping(value, SCHEDULE_KEYS);
  const out: Data = { peak: magnitude(raw["peak"]) };
  optional(out, raw, "end", upToMagnitude);
  return out;
}

const OPTIMIZER_KIND = oneOf(OPTIMIZER_KINDS);
const OPTIMIZER_KEYS = keys("kind", "learning-rate", "warmup-steps", "momentum", "betas", "epsilon", "weight-decay", "clip-norm");

function optimizer(value: unknown): Data {
  const raw = mapping(value, OPTIMIZER_KEYS);
  const out: Data = { kind: OPTIMIZER_KIND(raw["kind"]) };
  optional(out, raw, "learning-rate", learningRate);
  withDefault(out, raw, "warmup-steps", count, 0);
  optional(out, raw, "momentum", fraction);
  optional(out, raw, "betas", (betas) => {
    const items = list(betas);
    return items.length === 2 ? [fraction(items[0]), fraction(items[1])] : refuse();
  });
  optional(out, raw, "epsilon", upToMagnitude);
  optional(out, raw, "weight-decay", upToMagnitude);
  optional(out, raw, "clip-norm", magnitude);
  return out;
}

const HORIZON_KEYS = keys("steps", "final-loss", "weight-growth");

function horizon(value: unknown): Data {
  const raw = mapping(value, HORIZON_KEYS);
  const out: Data = { steps: integer(raw["steps"], 1, MAX_STEPS) };
  optional(out, raw, "final-loss", upToMagnitude);
  withDefault(out, raw, "weight-growth", weightGrowth, 1);
  return out;
}

const TRAINING_KEYS = keys("batch", "loss", "workers", "worker-gradients", "accumulation-steps", "optimizer", "horizon");
const WORKER_GRADIENT = oneOf(WORKER_GRADIENTS);

function training(value: unknown): Data {
  const raw = mapping(value, TRAINING_KEYS);
  const out: Data = { batch: size(raw["batch"]), loss: loss(raw["loss"]) };
  withDefault(out, raw, "workers", size, 1);
  withDefault(out, raw, "worker-gradients", WORKER_GRADIENT, "average");
  withDefault(out, raw, "accumulation-steps", size, 1);
  optional(out, raw, "optimizer", optimizer);
  optional(out, raw, "horizon", horizon);
  return out;
}

// ---------------------------------------------------------------------------------------------
// precision and the whole spec

const PLAN_KEYS = keys(
  "name",
  "activations",
  "weights",
  "gradients",
  "optimizer-states",
  "master-weights",
  "accumulate",
  "gradient-sums",
  "loss-scale",
  "overflow",
  "flush-subnormals",
  "scaling",
);
const OVERFLOW = oneOf(OVERFLOW_MODES);
const PLAN_SCALING = oneOf(PLAN_SCALINGS);

function plan(value: unknown, named: boolean): Data {
  const raw = mapping(value, PLAN_KEYS);
  const out: Data = {};
  if (named) out["name"] = name(raw["name"]);
  else optional(out, raw, "name", name);
  optional(out, raw, "activations", format);
  optional(out, raw, "weights", format);
  optional(out, raw, "gradients", format);
  optional(out, raw, "optimizer-states", format);
  optional(out, raw, "master-weights", masterFormat);
  optional(out, raw, "accumulate", format);
  optional(out, raw, "gradient-sums", format);
  optional(out, raw, "loss-scale", positive);
  withDefault(out, raw, "overflow", OVERFLOW, "saturate");
  withDefault(out, raw, "flush-subnormals", boolean, false);
  optional(out, raw, "scaling", PLAN_SCALING);
  return out;
}

const MEASURED_KEYS = keys("weights", "names", "statistics");

function measured(value: unknown): Data {
  const raw = mapping(value, MEASURED_KEYS);
  const out: Data = {};
  optional(out, raw, "weights", (weights) => (typeof weights === "string" ? nonEmpty(weights) : list(weights).map(nonEmpty)));
  optional(out, raw, "names", (names) => {
    const entries = record(names);
    const copy: Data = {};
    for (const key of Object.keys(entries)) copy[key] = nonEmpty(entries[key]);
    return copy;
  });
  optional(out, raw, "statistics", nonEmpty);
  return out;
}

const SPEC_KEYS = keys("$schema", "name", "description", "input", "training", "precision", "plans", "blocks", "layers", "measured");

/**
 * The spec's plain data (top-level `x-` keys already removed) as the zod schema would parse it, when it is
 * certainly valid; undefined otherwise, including for some valid specs (then zod decides).
 * @example validPlainSpec({ input: { features: 4 }, training: { batch: 8, loss: { kind: "cross-entropy", classes: 4 } }, layers: [{ type: "dense", width: 4 }] })
 */
export function validPlainSpec(data: Record<string, unknown>): RawSpec | undefined {
  try {
    const raw = mapping(data, SPEC_KEYS);
    const out: Data = {};
    optional(out, raw, "$schema", string);
    optional(out, raw, "name", (value) => text(nonEmpty(value)));
    optional(out, raw, "description", text);
    out["input"] = input(raw["input"]);
    out["training"] = training(raw["training"]);
    optional(out, raw, "precision", (precision) => (typeof precision === "string" ? name(precision) : plan(precision, false)));
    optional(out, raw, "plans", (plans) => list(plans).map((item) => plan(item, true)));
    optional(out, raw, "blocks", (blocks) => {
      const entries = record(blocks);
      const copy: Data = {};
      for (const key of Object.keys(entries)) copy[name(key)] = layerList(entries[key]);
      return copy;
    });
    out["layers"] = layerList(raw["layers"]);
    optional(out, raw, "measured", measured);
    return out as unknown as RawSpec;
  } catch (error) {
    if (error instanceof Refused) return undefined;
    // a stack overflow on absurd nesting: zod decides
    if (error instanceof RangeError) return undefined;
    throw error;
  }
}
