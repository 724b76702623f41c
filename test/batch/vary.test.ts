import { describe, expect, test, vi } from "vitest";
import { parse } from "yaml";
import { parseKeyPath, parseVaryOption, schemaHasPath, textVarier, variantsOf, varyText, VaryError, yamlScalarText } from "../../src/batch/vary.js";
import { yamlLib } from "../../src/spec/yaml-lib.js";

describe("parseKeyPath", () => {
  test.each([
    ["training.batch", ["training", "batch"]],
    ["layers[2].width", ["layers", 2, "width"]],
    ["blocks.ffn[0].hidden", ["blocks", "ffn", 0, "hidden"]],
    ["layers[1][0]", ["layers", 1, 0]],
    ["precision.loss-scale", ["precision", "loss-scale"]],
  ])("%s", (key, path) => expect(parseKeyPath(key)).toEqual(path));
  test.each(["", "a..b", "a.[1]", "a[x]", "a[1", ".a", "a."])("refuses %j", (key) => {
    expect(() => parseKeyPath(key)).toThrow(VaryError);
  });
});

describe("parseVaryOption", () => {
  test("reads values as YAML 1.2 scalars (YAML 1.2.2 §10.3 core schema)", () => {
    const axis = parseVaryOption("training.batch=8, 16,1e-4,true,bfloat16,'32'");
    expect(axis.key).toBe("training.batch");
    expect(axis.values.map((v) => v.value)).toEqual([8, 16, 0.0001, true, "bfloat16", "32"]);
    expect(axis.values.map((v) => v.text)).toEqual(["8", "16", "1e-4", "true", "bfloat16", "'32'"]);
  });
  test("a quoted value may hold a comma (YAML 1.2.2 §7.3.1-2 quoted scalars: \\\" and '' escape the quote)", () => {
    const axis = parseVaryOption(`name="tide, north",'it''s, south', "say \\"hi\\", twice",plain`);
    expect(axis.values.map((v) => v.value)).toEqual(["tide, north", "it's, south", 'say "hi", twice', "plain"]);
    expect(axis.values.map((v) => v.text)).toEqual(['"tide, north"', "'it''s, south'", '"say \\"hi\\", twice"', "plain"]);
    // a quote inside a plain value starts no quoted scalar (YAML 1.2.2 §7.3.3)
    expect(parseVaryOption(`name=it's,x`).values.map((v) => v.value)).toEqual(["it's", "x"]);
  });
  test("a value YAML would read as a comment, an anchor or a tag is refused with how to quote it (YAML 1.2.2 §6.6, §6.9.2)", () => {
    expect(() => parseVaryOption("name=#north")).toThrow(`--vary name: YAML reads "#" in "#north" as a comment; quote the value ('#north')`);
    expect(() => parseVaryOption("name=tide #2")).toThrow(/reads "#" in "tide #2" as a comment; quote the value \('tide #2'\)/);
    expect(() => parseVaryOption("name=&a b")).toThrow(/as an anchor/);
    expect(() => parseVaryOption("name=!t b")).toThrow(/as a tag/);
    // quoted, or with # inside a word, they are the text typed
    expect(parseVaryOption(`name='#north',"tide #2",a#b`).values.map((v) => v.value)).toEqual(["#north", "tide #2", "a#b"]);
  });
  test("refuses a missing =, empty values, duplicates and non-scalars", () => {
    expect(() => parseVaryOption("training.batch")).toThrow(/expected KEY=VALUE1/);
    expect(() => parseVaryOption("training.batch=8,,16")).toThrow(/empty value/);
    expect(() => parseVaryOption("training.batch=8,8")).toThrow(/listed twice/);
    expect(() => parseVaryOption("training.batch=[8]")).toThrow(/not a single value/);
  });
});

describe("variantsOf", () => {
  test("the cross product, first axis slowest, named key=value,...", () => {
    const variants = variantsOf([parseVaryOption("training.batch=8,16"), parseVaryOption("precision.activations=binary16,bfloat16,e4m3")]);
    expect(variants.map((v) => v.name)).toEqual([
      "training.batch=8,precision.activations=binary16",
      "training.batch=8,precision.activations=bfloat16",
      "training.batch=8,precision.activations=e4m3",
      "training.batch=16,precision.activations=binary16",
      "training.batch=16,precision.activations=bfloat16",
      "training.batch=16,precision.activations=e4m3",
    ]);
  });
  test("no axes, no variants; the same key twice is refused", () => {
    expect(variantsOf([])).toEqual([]);
    expect(() => variantsOf([parseVaryOption("a.b=1"), parseVaryOption("a.b=2")])).toThrow(/varied twice/);
  });
});

const SPEC = `name: tiny
training:
  batch: 32
  loss: { kind: cross-entropy, classes: 10 }
precision:
  activations: binary16
layers:
  - dense: 64
  - relu
  - { type: dense, width: 10 }
`;

const SCHEMA = {
  type: "object",
  additionalProperties: false,
  properties: {
    name: { type: "string" },
    training: {
      type: "object",
      additionalProperties: false,
      properties: { batch: { type: "integer" }, workers: { type: "integer" }, loss: { $ref: "#/definitions/loss" } },
    },
    precision: {
      anyOf: [
        { type: "object", additionalProperties: false, properties: { activations: { type: "string" }, weights: { type: "string" } } },
        { type: "string" },
      ],
    },
    layers: { type: "array", items: { $ref: "#/definitions/layer" } },
    blocks: { type: "object", additionalProperties: { type: "array", items: { $ref: "#/definitions/layer" } } },
  },
  definitions: {
    loss: { type: "object", properties: { kind: { type: "string" }, classes: { type: "integer" } } },
    layer: { oneOf: [{ type: "string" }, { type: "object", properties: { dense: { type: "integer" }, width: { type: "integer" }, type: { type: "string" } } }] },
  },
};

describe("schemaHasPath", () => {
  test("follows properties, $ref, anyOf/oneOf, items and additionalProperties", () => {
    expect(schemaHasPath(SCHEMA, ["training", "workers"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["training", "loss", "classes"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["precision", "weights"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["layers", 5, "width"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["blocks", "any-name", 0, "dense"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["training", "bacth"])).toBe(false);
    expect(schemaHasPath(SCHEMA, ["precision", "colour"])).toBe(false);
  });
});

describe("varyText", () => {
  const vary = (text: string, ...options: string[]) =>
    variantsOf(options.map(parseVaryOption)).map((v) => varyText(text, v, SCHEMA));
  const js = (...options: string[]) => vary(SPEC, ...options).map((v) => parse(v.text));

  test("replaces existing values where they stand, one text per variant", () => {
    const [a, b] = vary(SPEC, "training.batch=8,16");
    expect(parse(a!.text).training.batch).toBe(8);
    expect(parse(b!.text).training.batch).toBe(16);
    expect(a!.text.split("\n")).toHaveLength(SPEC.split("\n").length);
    expect(a!.text.split("\n")[2]).toBe("  batch: 8");
    expect(a!.originalLine(5)).toBe(5);
  });
  test("sets list items and keys inside flow maps", () => {
    const [v] = js("layers[0].dense=128", "layers[2].width=5");
    expect(v.layers[0]).toEqual({ dense: 128 });
    expect(v.layers[2]).toMatchObject({ width: 5 });
  });
  test("writes strings, infinities and booleans so they read back the same", () => {
    const [v] = js("precision.activations=bfloat16", "name=1e-3x");
    expect(v.precision.activations).toBe("bfloat16");
    expect(v.name).toBe("1e-3x");
    expect(yamlScalarText(Infinity)).toBe(".inf");
    expect(yamlScalarText(true)).toBe("true");
    expect(yamlScalarText("a: b, c")).toBe('"a: b, c"');
    expect(parse(`k: ${yamlScalarText("a: b, c")}`).k).toBe("a: b, c");
  });
  test("adds a key the file leaves to its default, and maps shifted lines back to the file", () => {
    const [varied] = vary(SPEC, "training.workers=4");
    const v = parse(varied!.text);
    expect(v.training).toEqual({ workers: 4, batch: 32, loss: { kind: "cross-entropy", classes: 10 } });
    // the new key sits on line 2; what was on line 5 (precision:) is now on line 6
    expect(varied!.text.split("\n")[5]).toBe("precision:");
    expect(varied!.originalLine(6)).toBe(5);
    expect(varied!.originalLine(2)).toBe(2);
    expect(varied!.originalLine(1)).toBe(1);
  });
  test("adds keys inside flow maps on the same line", () => {
    const [varied] = vary(SPEC, "training.loss.reduction=sum");
    expect(parse(varied!.text).training.loss).toEqual({ kind: "cross-entropy", classes: 10, reduction: "sum" });
    expect(varied!.text.split("\n")).toHaveLength(SPEC.split("\n").length);
  });
  test("creates a missing section, and two keys of it in one variant", () => {
    const text = SPEC.replace("precision:\n  activations: binary16\n", "");
    const [varied] = vary(text, "precision.activations=bfloat16", "precision.weights=binary16");
    expect(parse(varied!.text).precision).toEqual({ activations: "bfloat16", weights: "binary16" });
    expect(varied!.originalLine(2)).toBe(1);
    expect(varied!.originalLine(3)).toBe(2);
  });
  test("replaces a block scalar and keeps the line break the next key needs (YAML 1.2.2 §8.1)", () => {
    const text = "description: |\n  A tide gauge network\n  for harbours.\nname: >-\n  tide\n  gauge\ntraining: { batch: 1 }\n";
    const [varied] = vary(text, "description=short", "name=north");
    expect(parse(varied!.text)).toEqual({ description: "short", name: "north", training: { batch: 1 } });
    // the two lines each scalar lost are mapped back: training was on line 7
    expect(varied!.originalLine(3)).toBe(7);
  });
  test("adds a key to a flow map with a trailing comma or a comment before its brace (YAML 1.2.2 §7.4.1)", () => {
    const text = "training: {\n  batch: 32,\n  loss: { kind: cross-entropy, }, # per token\n}\n";
    const [varied] = vary(text, "training.loss.reduction=sum", "training.workers=3");
    expect(parse(varied!.text)).toEqual({ training: { batch: 32, loss: { kind: "cross-entropy", reduction: "sum" }, workers: 3 } });
    expect(varied!.text.split("\n")).toHaveLength(text.split("\n").length);
  });
  test("fills an empty value", () => {
    const [varied] = vary("name:\ntraining: { batch: 1 }\n", "name=wide");
    expect(parse(varied!.text).name).toBe("wide");
  });
  test("unknown paths are errors naming the key", () => {
    const err = (option: string) => () => vary(SPEC, option);
    expect(err("training.bacth=8")).toThrow("--vary training.bacth: the spec has no key training.bacth");
    expect(err("layers[7].width=5")).toThrow("--vary layers[7].width: layers has 3 items, so there is no layers[7]");
    expect(err("layers[1].width=5")).toThrow(/layers\[1\] is a single value \("relu"\)/);
    expect(err("training=5")).toThrow(/holds a map or list; --vary sets single values$/);
    // a plan is swapped with --plan: the error says so
    expect(err("precision=mixed")).toThrow(
      "--vary precision: precision holds a map or list; --vary sets single values; to judge one of the spec's plans use --plan NAME, or vary precision.activations and the other entries",
    );
    expect(err("training[0]=5")).toThrow(/is a map of keys, not a list/);
  });
  test("a misspelt key gets the nearest key at its level, from the file or the schema, as a whole key", () => {
    const err = (option: string) => () => vary(SPEC, option);
    // the file's key (a prefix slip, as the spec loader's hints take it: src/spec/issues.ts closestWord)
    expect(err("training.batchsize=8")).toThrow('--vary training.batchsize: the spec has no key training.batchsize (did you mean "training.batch"?)');
    // a key only the schema has (the file leaves it to its default): it can be varied, so it is suggested
    expect(err("training.wokers=2")).toThrow('the spec has no key training.wokers (did you mean "training.workers"?)');
    // a misspelt section: the whole key as it would read with the section spelt right
    expect(err("trainig.batch=8")).toThrow('the spec has no key trainig (did you mean "training.batch"?)');
    // nothing close: no guess
    expect(err("training.zzz=8")).toThrow(/the spec has no key training\.zzz$/);
    // without a schema, among the file's keys
    const [variant] = variantsOf([parseVaryOption("training.bacth=2")]);
    expect(() => varyText(SPEC, variant!)).toThrow('training.bacth is not in the spec (training has batch, loss; did you mean "training.batch"?)');
  });
  test("refuses a path through an alias", () => {
    const text = "base: &b { width: 8 }\nlayers:\n  - *b\n";
    const [variant] = variantsOf([parseVaryOption("layers[0].width=4")]);
    expect(() => varyText(text, variant!, SCHEMA)).toThrow(/is an alias \(\*b\)/);
  });
  test("without a schema, only keys in the file can be varied", () => {
    const [variant] = variantsOf([parseVaryOption("training.workers=2")]);
    expect(() => varyText(SPEC, variant!)).toThrow("training.workers is not in the spec (training has batch, loss)");
  });
  test("leaves text that is not YAML alone, for the loader to report", () => {
    const [variant] = variantsOf([parseVaryOption("training.batch=2")]);
    expect(varyText("a: [\n", variant!, SCHEMA).text).toBe("a: [\n");
  });
});

describe("textVarier", () => {
  test("gives varyText's texts and line maps, parsing the file's document once for the first key of every variant", () => {
    const yaml = yamlLib();
    const parseDocument = vi.spyOn(yaml, "parseDocument");
    try {
      const variants = variantsOf(["training.batch=8,16,64", "training.workers=2,4"].map(parseVaryOption));
      const expected = variants.map((v) => varyText(SPEC, v, SCHEMA));
      parseDocument.mockClear();
      const vary = textVarier(SPEC, SCHEMA);
      const got = variants.map(vary);
      expect(got.map((v) => v.text)).toEqual(expected.map((v) => v.text));
      for (let i = 0; i < got.length; i++) {
        for (let line = 1; line <= 12; line++) expect(got[i]!.originalLine(line)).toBe(expected[i]!.originalLine(line));
      }
      // once for the file, then once per variant for the text its first key made (the second key edits that text)
      expect(parseDocument).toHaveBeenCalledTimes(1 + variants.length);
      parseDocument.mockClear();
      const single = textVarier(SPEC, SCHEMA);
      for (const v of variantsOf([parseVaryOption("training.batch=8,16,64")])) single(v);
      expect(parseDocument).toHaveBeenCalledTimes(1);
    } finally {
      parseDocument.mockRestore();
    }
  });
});
