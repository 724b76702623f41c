/**
 * NetworkSpec -> Graph: expands `use` and `repeat`, tracks the per-sample shape through every layer, lists every
 * weight with its fan-in, fan-out and initial variance, and reports shape errors with the spec path of the
 * offending layer.
 *
 * Attention rule (chosen here): the query, key and value projections map the model width D to heads·headWidth
 * and the output projection maps heads·headWidth back to D, so any head count and head width fit any model width;
 * the only width rule is that the layer's input is a features tensor.
 */
import type { LayerSpec, NetworkSpec } from "../spec/types.js";
import { describeShape, featureWidth, initDistribution, initVariance, positionCount, sameShape, sampleElements } from "./shape.js";
import type { ConcreteLayerSpec, Graph, GraphFamily, GraphIssue, GraphLayer, GraphResult, GraphWeight, SampleShape, WeightDistribution } from "./types.js";

/** Tensors larger than this (elements in one step) are questioned as a likely typo. */
export const ABSURD_ELEMENTS = 1e12;
/** Expanded networks with more layers than this are refused (a repeat count typo). */
export const MAX_LAYERS = 1_000_000;

interface Walk {
  spec: NetworkSpec;
  issues: GraphIssue[];
  names: Set<string>;
  next: number;
  /** block names being expanded, to catch a block that uses itself */
  blockStack: string[];
  /** whether a layer has been placed yet (embedding must come first on token input) */
  placedAny: boolean;
  count: number;
  aborted: boolean;
  /** a layer's issue already told, by spec path and message: a block used or repeated again meets it again */
  told: Map<string, { index: number; more: number }>;
}

/**
 * Build the tensor graph of one training step from a validated spec.
 * @returns the graph, or every problem found (each with the spec path of the layer at fault)
 * @example buildGraph(spec) // => { ok: true, graph: { layers: [...], layerCount: 12, ... } }
 */
export function buildGraph(spec: NetworkSpec): GraphResult {
  const walk: Walk = {
    spec,
    issues: [],
    names: new Set(),
    next: 0,
    blockStack: [],
    placedAny: false,
    count: 0,
    aborted: false,
    told: new Map(),
  };
  const input = inputShape(spec, walk);
  if (input === undefined) return { ok: false, issues: walk.issues };
  const layers: GraphLayer[] = [];
  const output = expandList(walk, spec.layers, "", input, 0, layers);
  // a shape error in the first layer also leaves nothing placed: that error is the one to tell. The loss is checked
  // after earlier problems too whenever the walk knows the last layer's shape, so a spec's problems come at once
  if (!walk.aborted) {
    if (layers.length === 0 && walk.issues.length === 0) walk.issues.push({ path: ["layers"], message: "the network has no layers" });
    else if (output !== undefined) checkLoss(walk, output);
  }
  if (walk.issues.length > 0) {
    for (const { index, more } of walk.told.values()) {
      if (more === 0) continue;
      const issue = walk.issues[index] as GraphIssue;
      issue.message += ` (the same in ${more} more repeat${more === 1 ? "" : "s"} or use${more === 1 ? "" : "s"} of this layer)`;
    }
    return { ok: false, issues: walk.issues };
  }
  return {
    ok: true,
    graph: {
      name: spec.name,
      batch: spec.training.batch,
      input,
      output: output as SampleShape,
      layers,
      layerCount: walk.count,
      loss: spec.training.loss,
    },
  };
}

/** Visit every layer of a graph in forward order (a residual layer after its branch). */
export function forwardOrder(graph: Graph): GraphLayer[] {
  const out: GraphLayer[] = [];
  const visit = (list: GraphLayer[]): void => {
    for (const layer of list) {
      if (layer.branch !== undefined) visit(layer.branch);
      out.push(layer);
    }
  };
  visit(graph.layers);
  return out;
}

function inputShape(spec: NetworkSpec, walk: Walk): SampleShape | undefined {
  const input = spec.input;
  const bad = (key: string, value: number): boolean => {
    if (Number.isInteger(value) && value >= 1) return false;
    walk.issues.push({ path: ["input", key], message: `${key} must be a whole number of at least 1, got ${value}` });
    return true;
  };
  switch (input.kind) {
    case "tokens":
      return bad("positions", input.positions) ? undefined : { layout: "tokens", positions: input.positions };
    case "features":
      if (bad("positions", input.positions) || bad("features", input.features)) return undefined;
      return { layout: "features", positions: input.positions, features: input.features };
    case "image":
      if (bad("channels", input.channels) || bad("height", input.height) || bad("width", input.width)) return undefined;
      return { layout: "image", channels: input.channels, height: input.height, width: input.width };
  }
}

function expandList(
  walk: Walk,
  list: readonly LayerSpec[],
  prefix: string,
  shape: SampleShape,
  depth: number,
  out: GraphLayer[],
): SampleShape | undefined {
  let current: SampleShape | undefined = shape;
  // an indexed loop: a for-of wraps the body in a try block (iterator close), more code to compile
  for (let i = 0; i < list.length; i++) {
    if (current === undefined || walk.aborted) return undefined;
    current = expandOne(walk, list[i] as LayerSpec, prefix, current, depth, out);
  }
  return current;
}

function expandOne(
  walk: Walk,
  layer: LayerSpec,
  prefix: string,
  shape: SampleShape,
  depth: number,
  out: GraphLayer[],
): SampleShape | undefined {
  const name = prefix + layer.name;
  switch (layer.family) {
    case "use": {
      // own keys only: a spec built in code has plain objects, whose inherited members (toString, __proto__) are no blocks
      const blocks = walk.spec.blocks;
      const block = Object.hasOwn(blocks, layer.block) ? blocks[layer.block] : undefined;
      if (block === undefined) {
        const known = Object.keys(walk.spec.blocks);
        walk.issues.push({
          path: layer.path,
          message: `block "${layer.block}" is not defined${known.length > 0 ? ` (blocks: ${known.join(", ")})` : " (the spec has no blocks)"}`,
        });
        return undefined;
      }
      if (walk.blockStack.includes(layer.block)) {
        walk.issues.push({
          path: layer.path,
          message: `block "${layer.block}" uses itself (${[...walk.blockStack, layer.block].join(" -> ")})`,
        });
        return undefined;
      }
      walk.blockStack.push(layer.block);
      const result = expandList(walk, block, `${name}.`, shape, depth, out);
      walk.blockStack.pop();
      return result;
    }
    case "repeat": {
      if (!Number.isInteger(layer.times) || layer.times < 1) {
        walk.issues.push({ path: layer.path, message: `repeat ${name}: times must be a whole number of at least 1, got ${layer.times}` });
        return undefined;
      }
      let current: SampleShape | undefined = shape;
      for (let i = 0; i < layer.times && current !== undefined && !walk.aborted; i++) {
        current = expandList(walk, layer.layers, `${name}.${i}.`, current, depth, out);
      }
      return current;
    }
    default:
      return place(walk, layer, name, shape, depth, out);
  }
}

/**
 * Report a layer's issue; place's error paths call this module function, not a closure, so place allocates no
 * closures and no context per layer.
 */
function failAt(walk: Walk, spec: ConcreteLayerSpec, name: string, message: string): undefined {
  // told once per layer of the spec, named by its first expansion, with a count of the others
  const key = `${JSON.stringify(spec.path)}\n${message}`;
  const told = walk.told.get(key);
  if (told !== undefined) told.more++;
  else {
    walk.told.set(key, { index: walk.issues.length, more: 0 });
    walk.issues.push({ path: spec.path, message: `${name}: ${message}` });
  }
  return undefined;
}

function needFeatures(walk: Walk, spec: ConcreteLayerSpec, name: string, input: SampleShape, kind: string): undefined {
  return failAt(walk, spec, name, `${kind} needs a features input (positions × features), got ${describeShape(input)}; add a flatten first`);
}

function place(
  walk: Walk,
  spec: ConcreteLayerSpec,
  name: string,
  input: SampleShape,
  depth: number,
  out: GraphLayer[],
): SampleShape | undefined {
  // a name used twice leaves the shapes alone: the walk goes on, so the problems after it are told too
  if (walk.names.has(name)) failAt(walk, spec, name, `the name "${name}" is used twice; give the layers distinct names`);
  walk.names.add(name);
  walk.count++;
  if (walk.count > MAX_LAYERS) {
    walk.aborted = true;
    return failAt(walk, spec, name, `the expanded network has more than ${MAX_LAYERS} layers; is a repeat count too large?`);
  }
  if (!walk.placedAny && input.layout === "tokens" && spec.family !== "embedding") {
    walk.placedAny = true;
    return failAt(walk, spec, name, `token input must go through an embedding first, but the first layer is ${spec.family}`);
  }
  walk.placedAny = true;
  if (input.layout === "tokens" && spec.family !== "embedding") {
    return failAt(walk, spec, name, `${spec.family} cannot take token ids; put an embedding first`);
  }

  const weights: GraphWeight[] = [];
  let output: SampleShape;
  let branch: GraphLayer[] | undefined;
  const width = featureWidth(input);

  switch (spec.family) {
    case "dense": {
      if (input.layout !== "features") {
        // the usual slip is a missing flatten: go on as if it were there, so the layers after it are checked too
        needFeatures(walk, spec, name, input, "dense");
        return positive(spec.width) ? { layout: "features", positions: 1, features: spec.width } : undefined;
      }
      if (!positive(spec.width)) return failAt(walk, spec, name, `width must be a whole number of at least 1, got ${spec.width}`);
      weights.push(matrix("weight", [spec.width, width], width, spec.width, spec.init));
      if (spec.bias) weights.push(zeroBias(spec.width));
      output = { layout: "features", positions: input.positions, features: spec.width };
      break;
    }
    case "conv2d": {
      if (input.layout !== "image") {
        return failAt(walk, spec, name, `conv2d needs an image input (channels × height × width), got ${describeShape(input)}${input.layout === "features" ? (walk.spec.input.kind === "image" ? " (a flatten or dense earlier turned the image into features)" : "; describe the input as an image: channels, height, width") : ""}`);
      }
      if (!positive(spec.channels) || !positive(spec.kernel) || !positive(spec.stride)) {
        return failAt(walk, spec, name, `channels, kernel and stride must be whole numbers of at least 1`);
      }
      const height = convSize(input.height, spec.kernel, spec.stride, spec.padding);
      const widthOut = convSize(input.width, spec.kernel, spec.stride, spec.padding);
      if (height < 1 || widthOut < 1) {
        return failAt(walk, spec, name, `a ${spec.kernel}×${spec.kernel} kernel with stride ${spec.stride} and padding ${String(spec.padding)} leaves no output from a ${input.height}×${input.width} image`);
      }
      const k2 = spec.kernel * spec.kernel;
      weights.push(
        matrix("weight", [spec.channels, input.channels, spec.kernel, spec.kernel], input.channels * k2, spec.channels * k2, spec.init),
      );
      if (spec.bias) weights.push(zeroBias(spec.channels));
      output = { layout: "image", channels: spec.channels, height, width: widthOut };
      break;
    }
    case "embedding": {
      if (input.layout !== "tokens") return failAt(walk, spec, name, `an embedding needs token input and must be the first layer; it gets ${describeShape(input)}`);
      if (!positive(spec.vocabulary) || !positive(spec.width)) return failAt(walk, spec, name, `vocabulary and width must be whole numbers of at least 1`);
      // the usual fan convention for a [vocabulary, width] table: fan-in = width, fan-out = vocabulary (common practice)
      weights.push(matrix("table", [spec.vocabulary, spec.width], spec.width, spec.vocabulary, spec.init));
      output = { layout: "features", positions: input.positions, features: spec.width };
      break;
    }
    case "activation":
    case "dropout":
      output = input;
      break;
    case "layer-norm":
    case "rms-norm":
    case "batch-norm": {
      // a channel's statistics cover batch × positions values; over one value x − mean(x) is exactly 0 (Ioffe & Szegedy
      // 2015, Algorithm 1), which no magnitude prediction describes
      if (spec.family === "batch-norm" && walk.spec.training.batch * positionCount(input) === 1) {
        failAt(walk, spec, name, `batch-norm over one value per channel (batch 1, one ${input.layout === "image" ? "pixel" : "position"}): x − mean(x) is 0, so it outputs exactly 0; use a batch above 1, or a layer-norm`);
      }
      const n = width;
      weights.push(gain(n, spec.gain));
      if (spec.family !== "rms-norm") weights.push(zeroBias(n));
      output = input;
      break;
    }
    case "average-pool":
    case "max-pool": {
      if (!positive(spec.size) || !positive(spec.stride)) return failAt(walk, spec, name, `size and stride must be whole numbers of at least 1`);
      if (input.layout === "image") {
        const height = Math.floor((input.height - spec.size) / spec.stride) + 1;
        const w = Math.floor((input.width - spec.size) / spec.stride) + 1;
        if (height < 1 || w < 1) return failAt(walk, spec, name, `a ${spec.size}×${spec.size} window does not fit a ${input.height}×${input.width} image`);
        output = { layout: "image", channels: input.channels, height, width: w };
      } else {
        if (input.layout !== "features") return needFeatures(walk, spec, name, input, spec.family);
        const positions = Math.floor((input.positions - spec.size) / spec.stride) + 1;
        if (positions < 1) return failAt(walk, spec, name, `a window of ${spec.size} positions does not fit ${input.positions} positions`);
        output = { layout: "features", positions, features: input.features };
      }
      break;
    }
    case "flatten":
      output = { layout: "features", positions: 1, features: sampleElements(input) };
      break;
    case "residual": {
      if (spec.branch.length === 0) return failAt(walk, spec, name, `the residual branch is empty`);
      const inner: GraphLayer[] = [];
      const end = expandList(walk, spec.branch, `${name}.`, input, depth + 1, inner);
      // the skip's shape is what the layers after a residual are written for: the walk goes on with it after a
      // problem inside the branch
      if (end === undefined) return walk.aborted ? undefined : input;
      if (!sameShape(end, input)) {
        failAt(walk, spec, name, `the residual branch turns ${describeShape(input)} into ${describeShape(end)}; a branch must keep the shape so it can be added back`);
        return input;
      }
      branch = inner;
      output = input;
      break;
    }
    case "attention": {
      if (input.layout !== "features") return needFeatures(walk, spec, name, input, "attention");
      if (!positive(spec.heads) || !positive(spec.headWidth)) return failAt(walk, spec, name, `heads and head width must be whole numbers of at least 1`);
      const inner = spec.heads * spec.headWidth;
      weights.push(
        matrix("query", [inner, width], width, inner, spec.init),
        matrix("key", [inner, width], width, inner, spec.init),
        matrix("value", [inner, width], width, inner, spec.init),
        matrix("output", [width, inner], inner, width, spec.outputInit),
      );
      output = input;
      const logits = walk.spec.training.batch * spec.heads * input.positions * input.positions;
      if (logits > ABSURD_ELEMENTS) {
        failAt(walk, spec, name, `its attention logits hold ${logits.toExponential(2)} elements per step (batch × heads × positions²); is a size wrong?`);
      }
      break;
    }
    case "gated-feed-forward": {
      if (input.layout !== "features") return needFeatures(walk, spec, name, input, "gated-feed-forward");
      if (!positive(spec.hidden)) return failAt(walk, spec, name, `hidden must be a whole number of at least 1, got ${spec.hidden}`);
      if (spec.activation === "softmax") return failAt(walk, spec, name, `the gate activation cannot be softmax; use a pointwise activation (silu, gelu, relu, ...)`);
      weights.push(
        matrix("gate", [spec.hidden, width], width, spec.hidden, spec.init),
        matrix("up", [spec.hidden, width], width, spec.hidden, spec.init),
        matrix("down", [width, spec.hidden], spec.hidden, width, spec.outputInit),
      );
      output = input;
      break;
    }
  }

  const elements = walk.spec.training.batch * sampleElements(output);
  if (elements > ABSURD_ELEMENTS) {
    failAt(walk, spec, name, `its output holds ${elements.toExponential(2)} elements per step (batch × ${describeShape(output)}); is a size wrong?`);
  }
  for (let i = 0; i < weights.length; i++) {
    const weight = weights[i] as GraphWeight;
    if (weight.elements > ABSURD_ELEMENTS) failAt(walk, spec, name, `its ${weight.name} holds ${weight.elements.toExponential(2)} elements; is a size wrong?`);
  }

  // every layer gets every key, in one order, and the family as the literal of FAMILIES: the magnitude engine and the
  // operation rules then meet one hidden class and compare families by identity (a family read from YAML is a
  // string of its own, and its first compare against a literal throws optimised code away)
  const main = weights[0];
  const sized = main !== undefined && main.distribution !== "constant";
  const placed: GraphLayer = {
    index: walk.next++,
    name,
    family: FAMILIES[spec.family],
    spec,
    path: spec.path,
    input,
    output,
    fanIn: sized ? main.fanIn : undefined,
    fanOut: sized ? main.fanOut : undefined,
    weights,
    branch,
    depth,
  };
  out.push(placed);
  return output;
}

function checkLoss(walk: Walk, output: SampleShape): void {
  const loss = walk.spec.training.loss;
  if (loss.kind !== "cross-entropy") return;
  if (!(Number.isInteger(loss.classes) && loss.classes >= 2)) {
    walk.issues.push({ path: ["training", "loss", "classes"], message: `cross-entropy needs at least 2 classes, got ${loss.classes}` });
    return;
  }
  if (output.layout !== "features") {
    walk.issues.push({
      path: ["training", "loss"],
      message: `cross-entropy needs class scores (positions × classes) from the last layer, got ${describeShape(output)}; end with a flatten and a dense of ${loss.classes}`,
    });
  } else if (output.features !== loss.classes) {
    walk.issues.push({
      path: ["training", "loss", "classes"],
      message: `cross-entropy has ${loss.classes} classes but the last layer gives ${output.features} feature${output.features === 1 ? "" : "s"}`,
    });
  }
}

function positive(value: number): boolean {
  return Number.isInteger(value) && value >= 1;
}

/** Output size of a convolution: floor((n + 2p − k)/s) + 1; "same" gives ceil(n/s) (common practice). */
export function convSize(n: number, kernel: number, stride: number, padding: "same" | "valid" | number): number {
  if (padding === "same") return Math.ceil(n / stride);
  const pad = padding === "valid" ? 0 : padding;
  return Math.floor((n + 2 * pad - kernel) / stride) + 1;
}

/** Each family as a literal (see place). */
const FAMILIES: Record<GraphFamily, GraphFamily> = {
  dense: "dense",
  conv2d: "conv2d",
  embedding: "embedding",
  activation: "activation",
  dropout: "dropout",
  "layer-norm": "layer-norm",
  "rms-norm": "rms-norm",
  "batch-norm": "batch-norm",
  "average-pool": "average-pool",
  "max-pool": "max-pool",
  flatten: "flatten",
  residual: "residual",
  attention: "attention",
  "gated-feed-forward": "gated-feed-forward",
};

/** Each distribution as a literal, for the same reason. */
const DISTRIBUTIONS: Record<WeightDistribution, WeightDistribution> = { normal: "normal", uniform: "uniform", constant: "constant", zeros: "zeros" };

// weights too get every key in one order (one hidden class)
function matrix(name: string, shape: number[], fanIn: number, fanOut: number, init: GraphWeight["init"] & object): GraphWeight {
  return {
    name,
    shape,
    elements: shape.reduce((a, b) => a * b, 1),
    fanIn,
    fanOut,
    variance: initVariance(init, fanIn, fanOut),
    value: undefined,
    distribution: DISTRIBUTIONS[initDistribution(init)],
    init,
  };
}

function gain(n: number, value: number): GraphWeight {
  return { name: "gain", shape: [n], elements: n, fanIn: 1, fanOut: 1, variance: value * value, value, distribution: "constant", init: undefined };
}

function zeroBias(n: number): GraphWeight {
  // biases start at zero (common practice)
  return { name: "bias", shape: [n], elements: n, fanIn: 1, fanOut: 1, variance: 0, value: undefined, distribution: "zeros", init: undefined };
}

