// The fast validator (src/spec/validate.ts) against the zod schema, its oracle: on every generated spec,
// valid or not, the validator either gives exactly what zod's parse gives (same values, same keys in the
// same order) or gives nothing; it gives nothing only where zod refuses the spec, so zod still words
// every error. The specs are generated field by field from the schema, with a few values out of range or
// of the wrong kind, keys dropped and keys added.
import { readdirSync, readFileSync } from "node:fs";
import { isDeepStrictEqual } from "node:util";
import * as fc from "fast-check";
import { describe, expect, it } from "vitest";
import { parseDocument } from "yaml";
import { FORMAT_NAMES } from "../../src/formats/names.js";
import { ACTIVATION_TYPES, BARE_LAYER_TYPES, INIT_SHORTHANDS, LAYER_TYPES } from "../../src/spec/limits.js";
import { errorMap } from "../../src/spec/messages.js";
import { normalizeSpec } from "../../src/spec/normalize.js";
import { specSchema } from "../../src/spec/schema.js";
import { validPlainSpec } from "../../src/spec/validate.js";

type Data = Record<string, unknown>;

/** Values of every kind, at and just past the schema's bounds. */
const WILD: unknown[] = [
  null,
  NaN,
  Infinity,
  -Infinity,
  -1,
  -0,
  0,
  0.5,
  1,
  1.5,
  2,
  1e9,
  1e9 + 1,
  1e12,
  1e12 + 1,
  2 ** 53,
  1_000_000,
  1_000_001,
  "",
  "x",
  "-x",
  "relu",
  "dense",
  "binary16",
  "none",
  "he-normal",
  "same",
  true,
  false,
  [],
  [0.9],
  [0.9, 0.999, 0.5],
  {},
  { kind: "he" },
];

/**
 * Specs built from the schema. With `rare` 0 every value is of the right kind (though sizes, bounds and
 * names may still be refused); otherwise one value or key in about `rare` + 1 is odd.
 */
function specs(rare: number): fc.Arbitrary<Data> {
  /** Values the schema refuses, offered only when odd values are wanted. */
  const odd = <T>(...values: T[]): T[] => (rare === 0 ? [] : values);
  /** Mostly `valid`, now and then (one time in `rare` + 1; never when rare is 0) anything from WILD. */
  const field = <T>(valid: fc.Arbitrary<T>): fc.Arbitrary<unknown> =>
    rare === 0 ? valid : fc.oneof({ weight: rare, arbitrary: valid }, { weight: 1, arbitrary: fc.constantFrom(...WILD) });

  /** A mapping with some keys optional; now and then an unknown key, or a required key dropped. */
  function mapping(required: Record<string, fc.Arbitrary<unknown>>, optional: Record<string, fc.Arbitrary<unknown>> = {}): fc.Arbitrary<unknown> {
    const keys = Object.keys(required);
    return fc
      .tuple(
        fc.record({ ...required, ...optional }, { requiredKeys: keys, noNullPrototype: true }),
        rare === 0 ? fc.constant("keep") : fc.oneof({ weight: rare, arbitrary: fc.constant("keep") }, { weight: 1, arbitrary: fc.constantFrom("add", "drop", "proto") }),
      )
      .map(([value, change]) => {
        const out = { ...(value as Data) };
        if (change === "add") out["widht"] = 3;
        if (change === "drop" && keys.length > 0) delete out[keys[0]!];
        if (change === "proto") Object.defineProperty(out, "__proto__", { value: 1, enumerable: true, configurable: true, writable: true });
        return out;
      });
  }

  const size = field(fc.oneof(fc.constantFrom(1, 2, 1e9), fc.integer({ min: 1, max: 4096 })));
  const count = field(fc.oneof(fc.constantFrom(0, 1e9), fc.integer({ min: 0, max: 100 })));
  const positive = field(fc.oneof(fc.constantFrom(Number.MIN_VALUE, 1e-8, 1, 1e30), fc.double({ min: 1e-6, max: 1e6, noNaN: true })));
  // the plausibility bounds of src/spec/limits.ts (MAGNITUDE_RANGE, WEIGHT_GROWTH_RANGE), each side of each bound
  const magnitude = field(fc.oneof({ arbitrary: fc.constantFrom(Number.MIN_VALUE, 9.9e-31, 1e-30, 1, 1e30, 1.01e30), weight: 1 }, { arbitrary: fc.double({ min: 1e-6, max: 1e6, noNaN: true }), weight: 3 }));
  const dataScale = field(fc.oneof({ arbitrary: fc.constantFrom(Number.MIN_VALUE, 9.9e-61, 1e-60, 1, 1e42, 1e60, 1.01e60), weight: 1 }, { arbitrary: fc.double({ min: 1e-6, max: 1e6, noNaN: true }), weight: 3 }));
  const growth = field(fc.oneof({ arbitrary: fc.constantFrom(0, 9.99e-4, 1e-3, 1e3, 1000.5), weight: 1 }, { arbitrary: fc.double({ min: 0.01, max: 100, noNaN: true }), weight: 3 }));
  const nonNegative = field(fc.oneof(fc.constantFrom(0, -0, 1e-8, 2.5), fc.double({ min: 0, max: 10, noNaN: true })));
  const fraction = field(fc.oneof(fc.constantFrom(0, 0.9, 0.999, 1 - 2 ** -53), fc.double({ min: 0, max: 0.99, noNaN: true })));
  const bool = field(fc.boolean());
  const name = field(fc.oneof(fc.constantFrom(...(rare === 0 ? ["a", "fc-1", "_x", "9"] : ["a", "fc-1", "_x", "9", "__proto__", "x y", "-a"])), fc.stringMatching(/^[a-z][a-z0-9-]{0,6}$/)));
  const format = field(rare === 0 ? fc.constantFrom(...FORMAT_NAMES) : fc.constantFrom(...FORMAT_NAMES, "fp16"));
  const text = field(fc.constantFrom("", "a description", "ü"));

  const init = field(
    fc.oneof(
      fc.constantFrom(...INIT_SHORTHANDS),
      magnitude,
      mapping({ kind: fc.constantFrom("he", "glorot", "xavier", "lecun") }, { distribution: field(fc.constantFrom("normal", "uniform")), gain: magnitude }),
      mapping({ kind: fc.constant("normal"), std: magnitude }, { gain: magnitude }),
      mapping({ kind: fc.constant("uniform"), limit: magnitude }, { gain: magnitude }),
      mapping({ kind: fc.constant("orthogonal") }, { gain: magnitude }),
      mapping({ kind: fc.constant("zeros") }),
    ),
  );

  const named = { name };
  const { layer } = fc.letrec<{ layer: unknown; list: unknown[] }>((tie) => {
    const list = fc.array(tie("layer"), { minLength: rare === 0 ? 1 : 0, maxLength: 3 }) as fc.Arbitrary<unknown[]>;
    const simple = (type: string, required: Record<string, fc.Arbitrary<unknown>> = {}, optional: Record<string, fc.Arbitrary<unknown>> = {}) =>
      mapping({ type: fc.constant(type), ...required }, { ...named, ...optional });
    return {
      list,
      layer: fc.oneof(
        { depthSize: "small", withCrossShrink: true },
        rare === 0 ? fc.constantFrom(...BARE_LAYER_TYPES) : fc.constantFrom(...BARE_LAYER_TYPES, "dense", "bogus"),
        simple("dense", { width: size }, { bias: bool, init }),
        simple("conv2d", { channels: size, kernel: size }, { stride: size, padding: field(fc.oneof(fc.constantFrom("same", "valid"), count)), bias: bool, init }),
        simple("embedding", { vocabulary: size, width: size }, { init, multiplier: magnitude }),
        ...ACTIVATION_TYPES.map((type) => (type === "leaky-relu" ? simple(type, {}, { slope: fraction }) : simple(type))),
        simple("layer-norm", {}, { gain: magnitude, epsilon: nonNegative }),
        simple("rms-norm", {}, { gain: magnitude, epsilon: nonNegative }),
        simple("batch-norm", {}, { gain: magnitude, epsilon: nonNegative }),
        simple("dropout", { rate: fraction }),
        simple("average-pool", { size }, { stride: size }),
        simple("max-pool", { size }, { stride: size }),
        simple("flatten"),
        simple("residual", { branch: tie("list") }, { multiplier: magnitude }),
        simple("attention", { heads: size, "head-width": size }, {
          causal: bool,
          scaling: field(fc.constantFrom("query", "logits", "none")),
          "subtract-max": bool,
          init,
          "output-init": init,
        }),
        simple("gated-feed-forward", { hidden: size }, { activation: field(fc.constantFrom(...ACTIVATION_TYPES)), init, "output-init": init }),
        simple("use", { block: field(fc.constantFrom("core", "head")) }),
        simple("repeat", { times: field(fc.constantFrom(1, 3, 1_000_000, ...odd(1_000_001))), layers: tie("list") }),
        ...(rare === 0 ? [] : [mapping({ type: fc.constantFrom(...LAYER_TYPES, "Dense") })]),
      ),
    };
  });
  const layers = field(fc.array(layer, { minLength: 1, maxLength: 4 }));

  const input = field(
    fc.oneof(
      mapping({ features: size }, { positions: size, scale: dataScale }),
      mapping({ tokens: size }),
      mapping({ channels: size, height: size, width: size }, { scale: dataScale }),
      ...(rare === 0 ? [] : [mapping({ features: size, tokens: size })]),
    ),
  );
  const loss = field(
    fc.oneof(
      mapping({ kind: fc.constant("cross-entropy"), classes: field(fc.constantFrom(2, 10, 1e9, ...odd(1))) }, { reduction: field(fc.constantFrom("mean", "sum")) }),
      mapping({ kind: fc.constant("mean-squared-error") }, { reduction: field(fc.constantFrom("mean", "sum")), "target-scale": dataScale }),
    ),
  );
  const optimizer = field(
    mapping(
      { kind: field(fc.constantFrom("sgd", "momentum", "adam", "adamw")) },
      {
        "learning-rate": field(fc.oneof(magnitude, mapping({ peak: magnitude }, { end: nonNegative }))),
        "warmup-steps": count,
        momentum: fraction,
        betas: field(fc.tuple(fraction, fraction)),
        epsilon: nonNegative,
        "weight-decay": nonNegative,
        "clip-norm": positive,
      },
    ),
  );
  const horizon = field(mapping({ steps: field(fc.constantFrom(1, 1000, 1e12)) }, { "final-loss": nonNegative, "weight-growth": growth }));
  const training = field(
    mapping(
      { batch: size, loss },
      { workers: size, "worker-gradients": field(fc.constantFrom("sum", "average")), "accumulation-steps": size, optimizer, horizon },
    ),
  );
  const planFields = {
    activations: format,
    weights: format,
    gradients: format,
    "optimizer-states": format,
    "master-weights": field(fc.constantFrom(...FORMAT_NAMES, "none")),
    accumulate: format,
    "loss-scale": positive,
    overflow: field(fc.constantFrom("saturate", "infinity-or-nan")),
    "flush-subnormals": bool,
    scaling: field(fc.constantFrom("none", "tensor", "block")),
  };
  const plan = mapping({}, { name, ...planFields });
  const namedPlan = mapping({ name }, planFields);
  const measured = field(
    mapping(
      {},
      {
        weights: field(fc.oneof(fc.constantFrom("w.safetensors", ...odd("")), fc.array(fc.constantFrom("a.npy", "b/*.npy", ...odd(""))))),
        names: field(fc.dictionary(fc.constantFrom("fc1", "head", "0", ...odd("__proto__")), fc.constantFrom("layers.0.weight", ...odd("")), { noNullPrototype: true })),
        statistics: field(fc.constantFrom("run.csv", ...odd(""))),
      },
    ),
  );

  return mapping(
    { input, training, layers },
    {
      $schema: text,
      name: field(fc.constantFrom("net", ...odd(""))),
      description: text,
      precision: field(fc.oneof(plan, name)),
      plans: field(fc.array(namedPlan, { maxLength: 2 })),
      blocks: field(fc.dictionary(name as fc.Arbitrary<string>, layers, { maxKeys: 2, noNullPrototype: true })),
      measured,
    },
  ) as fc.Arbitrary<Data>;
  }

/** Equal values with the same keys in the same order, all the way down. */
function sameShape(a: unknown, b: unknown): boolean {
  if (!isDeepStrictEqual(a, b)) return false;
  if (typeof a !== "object" || a === null) return true;
  const keysA = Object.keys(a);
  const keysB = Object.keys(b as object);
  return keysA.join("\u0000") === keysB.join("\u0000") && keysA.every((key) => sameShape((a as Data)[key], (b as Data)[key]));
}

function hasProtoKey(value: unknown): boolean {
  if (typeof value !== "object" || value === null) return false;
  return Object.hasOwn(value, "__proto__") || Object.values(value).some(hasProtoKey);
}

/** The property: the fast validator agrees with zod, or leaves the spec to zod because zod refuses it. */
function agrees(data: Data): { fast: boolean; valid: boolean } {
  const fast = validPlainSpec(data);
  const checked = specSchema().safeParse(data, { error: errorMap, reportInput: true });
  if (fast !== undefined) {
    expect(checked.success, "the fast validator took a spec zod refuses").toBe(true);
    expect(sameShape(fast, checked.data), "the fast validator's output differs from zod's").toBe(true);
    expect(JSON.stringify(normalizeSpec(fast, "n.yaml"))).toBe(JSON.stringify(normalizeSpec(checked.data!, "n.yaml")));
  } else if (checked.success) {
    // the one kind of valid spec left to zod on purpose: a record key "__proto__", which a copy by assignment would lose
    expect(hasProtoKey(data), `the fast validator refused a spec zod takes: ${JSON.stringify(data)}`).toBe(true);
  }
  return { fast: fast !== undefined, valid: checked.success };
}

describe("the fast validator agrees with the zod schema", () => {
  it("on every example spec (all valid, all taken)", () => {
    const folder = new URL("../../specs/", import.meta.url);
    const names = readdirSync(folder).filter((file) => file.endsWith(".yaml"));
    expect(names.length).toBeGreaterThan(5);
    for (const file of names) {
      const data = parseDocument(readFileSync(new URL(file, folder), "utf8"), { merge: true }).toJS() as Data;
      const withoutOwnKeys = Object.fromEntries(Object.entries(data).filter(([key]) => !key.startsWith("x-")));
      expect(agrees(withoutOwnKeys), file).toEqual({ fast: true, valid: true });
    }
  });

  it("on generated specs, valid and invalid, with enough of each", () => {
    let valid = 0;
    let invalid = 0;
    fc.assert(
      fc.property(fc.oneof(specs(0), specs(6), specs(40)), (data) => {
        const outcome = agrees(data);
        if (outcome.valid) valid += 1;
        else invalid += 1;
      }),
      { numRuns: 1000 },
    );
    // the generator must exercise both sides, or the property says little
    expect(valid).toBeGreaterThan(150);
    expect(invalid).toBeGreaterThan(150);
  });

  it("on nested layer lists and record keys that zod treats specially", () => {
    const base = { input: { features: 4 }, training: { batch: 2, loss: { kind: "cross-entropy", classes: 4 } }, layers: ["relu"] };
    const cases: Data[] = [
      base,
      { ...base, layers: [{ type: "repeat", times: 2, layers: [{ type: "residual", branch: ["relu", { type: "dense", width: 4 }] }] }] },
      { ...base, blocks: { "0": ["relu"], b: ["tanh"] } },
      { ...base, measured: { names: { "2": "x", a: "y" } } },
      { ...base, layers: [] },
      { ...base, layers: [{ type: "dense", width: 4.5 }] },
      { ...base, training: { ...base.training, optimizer: { kind: "adam", betas: [0.9, 0.999] } } },
      { ...base, training: { ...base.training, optimizer: { kind: "adam", betas: [0.9, 1] } } },
      { ...base, precision: "fp16" },
      { ...base, precision: { activations: "binary16", "master-weights": "none" } },
    ];
    for (const data of cases) agrees(data);
  });
});
