import { readFileSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { describe, expect, it } from "vitest";
import {
  DEFAULT_OPTIMIZER,
  formatSpecIssue,
  loadSpec,
  parseSpec,
  type LayerSpec,
  type NetworkSpec,
  type SpecResult,
} from "../../src/spec/index.js";

const valid = fileURLToPath(new URL("../fixtures/specs/valid/", import.meta.url));

async function load(name: string): Promise<{ spec: NetworkSpec; result: Extract<SpecResult, { ok: true }> }> {
  const result = await loadSpec(`${valid}${name}`);
  if (!result.ok) throw new Error(result.issues.map(formatSpecIssue).join("\n"));
  return { spec: result.spec, result };
}

/** Drop the `path` of layers, to compare the rest. */
function withoutPaths(layers: readonly LayerSpec[]): unknown[] {
  return layers.map((layer) => {
    const { path: _path, ...rest } = layer;
    if (rest.family === "residual") return { ...rest, branch: withoutPaths(rest.branch) };
    if (rest.family === "repeat") return { ...rest, layers: withoutPaths(rest.layers) };
    return rest;
  });
}

describe("parseSpec(text, source): defaults", () => {
  it("fills in every default of a minimal spec", async () => {
    const { spec, result } = await load("minimal.yaml");
    expect(result.warnings).toEqual([]);
    expect(spec.source).toBe(`${valid}minimal.yaml`);
    expect(spec.name).toBe("minimal");
    expect(spec.description).toBe("");
    expect(spec.input).toEqual({ kind: "features", features: 20, positions: 1, scale: 1 });
    expect(spec.training).toEqual({
      batch: 32,
      loss: { kind: "cross-entropy", classes: 3, reduction: "mean" },
      workers: 1,
      workerGradients: "average",
      accumulationSteps: 1,
      optimizer: DEFAULT_OPTIMIZER,
      horizon: { steps: 1, weightGrowth: 1 },
    });
    // the default optimizer is Adam with the suggested settings (Kingma & Ba 2015, Algorithm 1)
    expect(DEFAULT_OPTIMIZER).toMatchObject({ kind: "adam", learningRate: { peak: 0.001, end: 0.001 }, betas: [0.9, 0.999], epsilon: 1e-8 });
    expect(spec.precision).toEqual({
      name: "planned",
      activations: "binary32",
      weights: "binary32",
      gradients: "binary32",
      optimizerStates: "binary32",
      masterWeights: "none",
      accumulate: "binary32",
      overflow: "saturate",
      flushSubnormals: false,
      scaling: "none",
    });
    expect(spec.plans).toEqual([]);
    expect(spec.blocks).toEqual({});
    expect(spec.measured).toBeUndefined();
    expect(spec.layers).toEqual([
      {
        name: "dense-0",
        path: ["layers", 0],
        family: "dense",
        width: 3,
        bias: true,
        init: { kind: "lecun", distribution: "normal", gain: 1 },
      },
    ]);
  });

  it("names a spec from memory 'network' and keeps the source as given", () => {
    const result = parseSpec("input: { features: 2 }\ntraining: { batch: 1, loss: { kind: mean-squared-error } }\nlayers: [identity]\n", "<memory>");
    expect(result.ok && result.spec.name).toBe("network");
    expect(result.ok && result.spec.source).toBe("<memory>");
  });

  it("derives the plan's other roles from activations, with a binary32 master copy for narrow weights", () => {
    const result = parseSpec(
      "input: { features: 2 }\ntraining: { batch: 1, loss: { kind: mean-squared-error } }\nprecision: { activations: binary16 }\nlayers: [identity]\n",
      "a.yaml",
    );
    expect(result.ok && result.spec.precision).toEqual({
      name: "planned",
      activations: "binary16",
      weights: "binary16",
      gradients: "binary16",
      optimizerStates: "binary32",
      masterWeights: "binary32",
      accumulate: "binary32",
      overflow: "saturate",
      flushSubnormals: false,
      scaling: "none",
    });
  });
});

describe("parseSpec(text, source): shorthands", () => {
  it("expands bare layers, init shorthands, a number as a normal's std, xavier as glorot", async () => {
    const { spec, result } = await load("shorthands.yaml");
    expect(result.warnings).toEqual([]);
    expect(spec.name).toBe("shorthand-tour");
    expect(spec.input).toEqual({ kind: "features", features: 12, positions: 4, scale: 2.5 });
    expect(spec.training.loss).toEqual({ kind: "mean-squared-error", reduction: "mean", targetScale: 1 });
    expect(spec.training.optimizer).toEqual({
      kind: "sgd",
      learningRate: { peak: 0.05, end: 0.05 },
      warmupSteps: 0,
      momentum: 0,
      betas: [0.9, 0.999],
      epsilon: 1e-8,
      weightDecay: 0,
    });
    expect(withoutPaths(spec.layers)).toEqual([
      { name: "dense-0", family: "dense", width: 64, bias: true, init: { kind: "he", distribution: "uniform", gain: 1 } },
      { name: "relu-1", family: "activation", activation: "relu", slope: 0 },
      { name: "dense-2", family: "dense", width: 64, bias: true, init: { kind: "glorot", distribution: "normal", gain: 1 } },
      { name: "leaky-relu-3", family: "activation", activation: "leaky-relu", slope: 0.01 },
      { name: "dense-4", family: "dense", width: 64, bias: true, init: { kind: "normal", std: 0.02, gain: 1 } },
      { name: "leaky-relu-5", family: "activation", activation: "leaky-relu", slope: 0.2 },
      { name: "dense-6", family: "dense", width: 64, bias: true, init: { kind: "glorot", distribution: "uniform", gain: 1.4 } },
      { name: "layer-norm-7", family: "layer-norm", gain: 1, epsilon: 1e-5 },
      { name: "dense-8", family: "dense", width: 64, bias: false, init: { kind: "orthogonal", gain: 1 } },
      { name: "rms-norm-9", family: "rms-norm", gain: 1, epsilon: 1e-6 },
      { name: "dense-10", family: "dense", width: 1, bias: true, init: { kind: "zeros" } },
    ]);
    expect(spec.measured).toEqual({
      weights: ["checkpoints/kiln-*.safetensors"],
      names: { "dense-0": "encoder.first.weight" },
      statistics: "runs/kiln-short.csv",
    });
  });
});

describe("parseSpec(text, source): every layer type", () => {
  it("normalizes every key to camelCase and keeps use and repeat layers", async () => {
    const { spec } = await load("every-layer.yaml");
    expect(spec.input).toEqual({ kind: "tokens", positions: 64 });
    expect(spec.training).toEqual({
      batch: 4,
      loss: { kind: "cross-entropy", classes: 100, reduction: "sum" },
      workers: 2,
      workerGradients: "sum",
      accumulationSteps: 3,
      optimizer: {
        kind: "momentum",
        learningRate: { peak: 0.1, end: 0.001 },
        warmupSteps: 10,
        momentum: 0.8,
        betas: [0.9, 0.999],
        epsilon: 1e-8,
        weightDecay: 0.0001,
        clipNorm: 5,
      },
      horizon: { steps: 1000, finalLoss: 2, weightGrowth: 1.1 },
    });
    expect(withoutPaths(spec.blocks["mixer"]!)).toEqual([
      {
        name: "attend",
        family: "residual",
        multiplier: 0.5,
        branch: [
          { name: "layer-norm-0", family: "layer-norm", gain: 1.5, epsilon: 1e-3 },
          {
            name: "attention-1",
            family: "attention",
            heads: 4,
            headWidth: 16,
            causal: true,
            scaling: "logits",
            subtractMax: false,
            init: { kind: "normal", std: 0.02, gain: 2 },
            outputInit: { kind: "uniform", limit: 0.01, gain: 1 },
          },
        ],
      },
      {
        name: "residual-1",
        family: "residual",
        multiplier: 1,
        branch: [
          { name: "rms-norm-0", family: "rms-norm", gain: 0.9, epsilon: 1e-7 },
          {
            name: "gated-feed-forward-1",
            family: "gated-feed-forward",
            hidden: 128,
            activation: "gelu",
            init: { kind: "lecun", distribution: "uniform", gain: 1 },
            outputInit: { kind: "lecun", distribution: "uniform", gain: 1 },
          },
        ],
      },
    ]);
    const layers = withoutPaths(spec.layers);
    expect(layers.slice(0, 5)).toEqual([
      { name: "table", family: "embedding", vocabulary: 1000, width: 64, init: { kind: "normal", std: 0.02, gain: 1 }, multiplier: 8 },
      { name: "dropout-1", family: "dropout", rate: 0.1 },
      { name: "repeat-2", family: "repeat", times: 2, layers: [{ name: "use-0", family: "use", block: "mixer" }] },
      { name: "batch-norm-3", family: "batch-norm", gain: 1, epsilon: 1e-5 },
      { name: "dense-4", family: "dense", width: 256, bias: false, init: { kind: "he", distribution: "normal", gain: 1 } },
    ]);
    expect(spec.layers.slice(5).map((layer) => (layer.family === "activation" ? layer.activation : layer.family))).toEqual([
      "gelu",
      "silu",
      "tanh",
      "sigmoid",
      "softplus",
      "identity",
      "dense",
      "softmax",
    ]);
  });

  it("records where each layer sits, nested paths included", async () => {
    const { spec } = await load("every-layer.yaml");
    const residual = spec.blocks["mixer"]![0]!;
    expect(residual.path).toEqual(["blocks", "mixer", 0]);
    expect(residual.family === "residual" && residual.branch[1]!.path).toEqual(["blocks", "mixer", 0, "branch", 1]);
    const repeat = spec.layers[2]!;
    expect(repeat.family === "repeat" && repeat.layers[0]!.path).toEqual(["layers", 2, "layers", 0]);
  });

  it("takes a conv2d's padding as same, valid or a number, and a pool's stride from its size", async () => {
    const { spec } = await load("image-layers.yaml");
    expect(spec.input).toEqual({ kind: "image", channels: 1, height: 28, width: 28, scale: 0.3 });
    expect(withoutPaths(spec.layers)).toEqual([
      { name: "conv2d-0", family: "conv2d", channels: 16, kernel: 5, stride: 2, padding: 2, bias: false, init: { kind: "he", distribution: "normal", gain: 1 } },
      { name: "conv2d-1", family: "conv2d", channels: 16, kernel: 3, stride: 1, padding: "valid", bias: true, init: { kind: "lecun", distribution: "normal", gain: 1 } },
      { name: "max-pool-2", family: "max-pool", size: 2, stride: 2 },
      { name: "average-pool-3", family: "average-pool", size: 3, stride: 1 },
      { name: "flatten-4", family: "flatten" },
      { name: "dense-5", family: "dense", width: 5, bias: true, init: { kind: "lecun", distribution: "normal", gain: 1 } },
    ]);
  });
});

describe("parseSpec(text, source): precision plans", () => {
  it("reads JSON, evaluates the plan `precision` names and keeps the others for comparison", async () => {
    const { spec } = await load("precision-by-name.json");
    expect(spec.name).toBe("json-form");
    expect(spec.precision).toEqual({
      name: "narrow",
      activations: "bfloat16",
      weights: "bfloat16",
      gradients: "bfloat16",
      optimizerStates: "binary32",
      masterWeights: "binary32",
      accumulate: "binary32",
      lossScale: 256,
      overflow: "saturate",
      flushSubnormals: true,
      scaling: "none",
    });
    expect(spec.plans.map((plan) => plan.name)).toEqual(["wide", "eight-bit"]);
    // an 8-bit plan gets per-tensor scaling unless it says otherwise
    expect(spec.plans[1]).toMatchObject({ activations: "e4m3", gradients: "e5m2", weights: "e4m3", overflow: "infinity-or-nan", scaling: "tensor", masterWeights: "binary32" });
  });
});

describe("parseSpec(text, source): YAML features", () => {
  it("accepts anchors, merge keys and x- keys, and locates through them", async () => {
    const { spec, result } = await load("anchors-and-merge-keys.yaml");
    expect(withoutPaths(spec.layers).slice(0, 3)).toEqual([
      { name: "dense-0", family: "dense", width: 300, bias: true, init: { kind: "he", distribution: "normal", gain: 1 } },
      { name: "relu-1", family: "activation", activation: "relu", slope: 0 },
      { name: "second", family: "dense", width: 300, bias: true, init: { kind: "he", distribution: "normal", gain: 1 } },
    ]);
    // layers[2].width comes from the anchored template on line 7
    expect(result.locate(["layers", 2, "width"])).toMatchObject({ line: 7, column: 37 });
    expect(result.locate(["layers", 2, "name"])).toMatchObject({ line: 11, column: 24 });
  });

  it("refuses a YAML alias bomb quickly, with one issue and no expansion", () => {
    const text = readFileSync(fileURLToPath(new URL("../fixtures/specs/invalid/alias-bomb.yaml", import.meta.url)), "utf8");
    const result = parseSpec(text, "bomb.yaml");
    expect(result.ok).toBe(false);
    expect(!result.ok && result.issues.map(formatSpecIssue)).toEqual([
      "bomb.yaml: refused: the document expands aliases too many times (more than 100); reuse layers with blocks instead",
    ]);
  });

  it("skips a byte-order mark", async () => {
    const { mkdtempSync, writeFileSync, rmSync } = await import("node:fs");
    const { tmpdir } = await import("node:os");
    const folder = mkdtempSync(`${tmpdir()}/headroom-spec-`);
    try {
      writeFileSync(`${folder}/bom.yaml`, "\ufeffinput: { features: 2 }\ntraining: { batch: 1, loss: { kind: mean-squared-error } }\nlayers: [identity]\n");
      const result = await loadSpec(`${folder}/bom.yaml`);
      expect(result.ok).toBe(true);
    } finally {
      rmSync(folder, { recursive: true, force: true });
    }
  });
});

describe("parseSpec(text, source): warnings", () => {
  it("loads a spec with questionable settings and says what is odd about each", async () => {
    const { result } = await load("with-warnings.yaml");
    expect(result.warnings.map((issue) => formatSpecIssue({ ...issue, file: "w.yaml" }))).toEqual([
      "w.yaml:6:42: training.optimizer.warmup-steps: warm-up (500 steps) is longer than the horizon (100 steps): the peak learning rate is never reached",
      // an untrained classifier's loss is near ln(classes) (uniform predictions)
      "w.yaml:7:38: training.horizon.final-loss: the final loss 2.5 is not below the starting loss ln(10) ≈ 2.30: gradients are taken not to shrink",
      "w.yaml:8:46: precision.scaling: scaling applies to 8-bit formats only, and this plan uses none; it has no effect",
      'w.yaml:12:12: measured.names.dense-1: no layer is named "dense-1" (did you mean "dense-0"?)',
    ]);
  });
});

describe("parseSpec: the final loss is read per sample whatever the reduction", () => {
  it("warns about a summed cross-entropy's final loss above ln(classes), saying the key is per sample", () => {
    // 64 samples at a per-sample loss of 0.31 sum to 20, far above ln(10) = 2.303 (uniform predictions); the model
    // reads final-loss per sample (src/magnitude/loss.ts), so 20 would mean a classifier worse than guessing
    const text = (finalLoss: number) =>
      [
        "input: { features: 4 }",
        "training:",
        "  batch: 64",
        "  loss: { kind: cross-entropy, classes: 10, reduction: sum }",
        `  horizon: { steps: 100, final-loss: ${finalLoss} }`,
        "layers: [{ type: dense, width: 10 }]",
      ].join("\n");
    const summed = parseSpec(text(20), "s.yaml");
    if (!summed.ok) throw new Error("does not parse");
    expect(summed.warnings.map((issue) => formatSpecIssue(issue))).toEqual([
      "s.yaml:5:38: training.horizon.final-loss: the final loss 20 is not below the starting loss ln(10) ≈ 2.30: gradients are taken not to shrink (final-loss is the loss per sample, the mean over samples and positions, also with reduction: sum)",
    ]);
    const perSample = parseSpec(text(0.31), "s.yaml");
    expect(perSample.ok && perSample.warnings).toEqual([]);
  });
});

describe("locate(path)", () => {
  it("turns key paths into line:column of the value, and stops at the deepest node that exists", async () => {
    const { result } = await load("every-layer.yaml");
    expect(result.locate(["layers", 0, "width"])).toEqual({ file: `${valid}every-layer.yaml`, line: 37, column: 62 });
    expect(result.locate(["blocks", "mixer", 0, "branch", 1, "head-width"])).toMatchObject({ line: 26, column: 23 });
    expect(result.locate(["layers", 7])).toMatchObject({ line: 47, column: 5 });
    // a key the file does not have: the mapping that lacks it
    expect(result.locate(["layers", 1, "nothing"])).toMatchObject({ line: 38, column: 5 });
    expect(result.locate([])).toMatchObject({ line: 2, column: 1 });
  });
});

describe("loadSpec(path)", () => {
  it("refuses other extensions, missing files and folders as issues, without throwing", async () => {
    expect(await loadSpec("spec.txt")).toEqual({
      ok: false,
      issues: [{ file: "spec.txt", line: 0, column: 0, path: "", message: 'unsupported extension ".txt": a spec is a .yaml, .yml or .json file' }],
    });
    // a missing path without an extension is most likely a mistyped folder: not "no file extension"
    const typo = await loadSpec(`${valid}no-such-folder`);
    expect(!typo.ok && typo.issues.map(formatSpecIssue)).toEqual([`${valid}no-such-folder: no such file or folder`]);
    const missing = await loadSpec(`${valid}no-such-spec.yaml`);
    expect(!missing.ok && missing.issues.map(formatSpecIssue)).toEqual([`${valid}no-such-spec.yaml: no such file`]);
    const folder = await loadSpec(`${valid}.yaml`);
    expect(folder.ok).toBe(false);
    // a folder is named as one, not as a file without an extension
    const folderMessage = "a folder, not a spec file: a spec is one .yaml, .yml or .json file (headroom batch checks every spec in a folder)";
    for (const path of [valid, valid.replace(/\/$/, "")]) {
      const result = await loadSpec(path);
      expect(!result.ok && result.issues.map((issue) => issue.message)).toEqual([folderMessage]);
    }
  });

  it("refuses a file above the size cap without reading it", async () => {
    const { mkdtempSync, writeFileSync, rmSync } = await import("node:fs");
    const { tmpdir } = await import("node:os");
    const folder = mkdtempSync(`${tmpdir()}/headroom-spec-`);
    try {
      writeFileSync(`${folder}/huge.yaml`, Buffer.alloc(10 * 1024 * 1024 + 1, 0x20));
      const result = await loadSpec(`${folder}/huge.yaml`);
      expect(!result.ok && result.issues[0]!.message).toBe(
        "the file has 10485761 bytes, above the limit of 10485760 bytes (10 MiB) for a spec",
      );
    } finally {
      rmSync(folder, { recursive: true, force: true });
    }
  });
});

describe("parseSpec(text, source): the name __proto__", () => {
  // a spec's names follow NAME_PATTERN (src/spec/limits.ts), which __proto__ matches: it names a layer, a block and
  // a measured-weights entry like any other name, though a JavaScript object would take the key for its prototype
  const spec = (blocks: string, layers: string, measured = ""): string =>
    [
      "input: { features: 16 }",
      "training: { batch: 8, loss: { kind: cross-entropy, classes: 4 } }",
      blocks,
      "layers:",
      layers,
      measured,
    ].join("\n") + "\n";

  it("keeps a block named __proto__ and inserts its layers", () => {
    const result = parseSpec(spec("blocks:\n  __proto__:\n    - { type: dense, name: inner, width: 16 }\n    - relu", "  - { type: use, block: __proto__ }\n  - { type: dense, name: head, width: 4 }"), "p.yaml");
    if (!result.ok) throw new Error(result.issues.map(formatSpecIssue).join("\n"));
    expect(Object.keys(result.spec.blocks)).toEqual(["__proto__"]);
    expect(Object.hasOwn(result.spec.blocks, "__proto__")).toBe(true);
    expect(withoutPaths(result.spec.blocks["__proto__"]!)).toEqual([
      { name: "inner", family: "dense", width: 16, bias: true, init: { kind: "lecun", distribution: "normal", gain: 1 } },
      { name: "relu-1", family: "activation", activation: "relu", slope: 0 },
    ]);
    expect(JSON.parse(JSON.stringify(result.spec.blocks))).toHaveProperty("__proto__");
  });

  it("checks the layers of a block named __proto__ and positions what is wrong there", () => {
    const result = parseSpec(spec("blocks:\n  __proto__:\n    - { type: dense, width: 0 }", "  - { type: use, block: __proto__ }"), "p.yaml");
    expect(result.ok).toBe(false);
    expect(!result.ok && result.issues.map(formatSpecIssue)).toEqual(["p.yaml:5:29: blocks.__proto__[0].width: must be at least 1, got 0"]);
  });

  it("keeps the measured-weights entry of a layer named __proto__", () => {
    const result = parseSpec(
      spec("", "  - { type: dense, name: __proto__, width: 16 }\n  - { type: dense, name: head, width: 4 }", "measured:\n  weights: w.safetensors\n  names: { __proto__: body.weight, head: top.weight }"),
      "p.yaml",
    );
    if (!result.ok) throw new Error(result.issues.map(formatSpecIssue).join("\n"));
    expect(result.warnings).toEqual([]);
    expect(result.spec.layers.map((layer) => layer.name)).toEqual(["__proto__", "head"]);
    expect(Object.entries(result.spec.measured!.names)).toEqual([
      ["__proto__", "body.weight"],
      ["head", "top.weight"],
    ]);
  });

  it("refuses an empty tensor name given to a layer named __proto__, at its position", () => {
    const result = parseSpec(spec("", "  - { type: dense, name: __proto__, width: 4 }", "measured:\n  names: { __proto__: '' }"), "p.yaml");
    expect(result.ok).toBe(false);
    expect(!result.ok && result.issues.map(formatSpecIssue)).toEqual(["p.yaml:7:23: measured.names.__proto__: must not be empty"]);
  });
});

describe("bad arguments (README, Library API: library functions throw TypeError for bad arguments)", () => {
  it("loadSpec refuses a path that is not a string, instead of an issue whose file is a number", async () => {
    await expect(loadSpec(123 as unknown as string)).rejects.toThrow(new TypeError("loadSpec needs the path of a spec file, got number"));
    await expect(loadSpec(undefined as unknown as string)).rejects.toThrow(TypeError);
  });
  it("parseSpec refuses a source that is not a string", () => {
    expect(() => parseSpec("input: { features: 1 }\n", undefined as unknown as string)).toThrow(TypeError);
  });
});

describe("a key written twice does not hide the file's other problems", () => {
  // YAML 1.2.2 §3.2.1.1: mapping keys are unique; specs/README: every problem in a file is reported at once
  it("reports the repeated key and every other problem, each at its position", () => {
    const text = [
      "input: { features: 10 }",
      "training: { batch: 8, loss: { kind: cross-entropy, classes: 3 } }",
      "layers:",
      "  - { type: dense, width: 3, width: 4 }",
      "  - { type: dense, width: 3.5 }",
      "  - { type: dense, widht: 3 }",
    ].join("\n");
    const result = parseSpec(text, "twice.yaml");
    expect(result.ok).toBe(false);
    if (result.ok) return;
    expect(result.issues.map((i) => `${i.line}:${i.column} ${i.path}`)).toEqual([
      "4:30 layers[0].width",
      "5:27 layers[1].width",
      "6:20 layers[2].widht",
    ]);
    expect(result.issues[0]!.message).toContain('the key "width" is written twice in one mapping (first at line 4, column 20)');
  });

  it("reports the repeated key alone when the rest of the spec is valid", () => {
    const text = ["input: { features: 10 }", "training: { batch: 8, batch: 16, loss: { kind: cross-entropy, classes: 3 } }", "layers: [{ type: dense, width: 3 }]"].join("\n");
    const result = parseSpec(text, "twice.yaml");
    expect(!result.ok && result.issues.map((i) => i.path)).toEqual(["training.batch"]);
  });
});
