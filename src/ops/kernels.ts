/**
 * The float64 kernels of every layer family, behind one interface the simulator walks a graph with.
 * Each family's arithmetic lives in src/ops/<family>/kernel.ts beside its analytic rules; this file only adapts a
 * graph layer (shapes, options, named weights) to those pure functions. `satisfies Record<GraphFamily, Kernel>`
 * makes a family without kernels a compile error.
 *
 * Tensors are Float64Array in row-major order with the batch first: feature rows [batch, positions, features],
 * images [batch, channels, height, width], token ids [batch, positions] (ids held as float64 integers).
 */
import type { GraphFamily, GraphLayer, SampleShape } from "../graph/types.js";
import type {
  ActivationLayer,
  AttentionLayer,
  Conv2dLayer,
  DropoutLayer,
  EmbeddingLayer,
  GatedFeedForwardLayer,
  NormLayer,
  PoolLayer,
  ResidualLayer,
} from "../spec/types.js";
import type { RoundFunction } from "../numeric/matmul.js";
import {
  activationBackward,
  activationForward,
  softmaxBackward,
  softmaxForward,
  type ElementwiseActivation,
} from "./activation/kernel.js";
import { attentionBackward, attentionForward, type AttentionConfig, type AttentionSaved, type AttentionTensorName } from "./attention/kernel.js";
import { conv2dBackward, conv2dForward, conv2dGeometry, type Conv2dGeometry } from "./conv2d/kernel.js";
import { denseBackward, denseForward } from "./dense/kernel.js";
import { dropoutBackward, dropoutForward, dropoutMask } from "./dropout/kernel.js";
import { embeddingBackward, embeddingForward } from "./embedding/kernel.js";
import { flattenBackward, flattenForward } from "./flatten/kernel.js";
import { gatedBackward, gatedForward, type GatedSaved, type GatedTensorName } from "./gated-feed-forward/kernel.js";
import {
  batchNormBackward,
  batchNormForward,
  layerNormBackward,
  layerNormForward,
  rmsNormBackward,
  rmsNormForward,
  type BatchNormLayout,
} from "./norm/kernel.js";
import {
  averagePoolBackward,
  averagePoolForward,
  maxPoolBackward,
  maxPoolForward,
  poolGeometry,
  positionPoolGeometry,
  type PoolGeometry,
} from "./pool/kernel.js";
import { residualBackwardCombine, residualBackwardToBranch, residualForward } from "./residual/kernel.js";

/** A tensor inside a layer, named as the analytic rules name it: `<layer>/<role>:<suffix>`. */
export interface InnerTensorInfo {
  /** the analytic rules' suffix ("logits", "product", ...); tensors the rules do not predict get their own */
  suffix: string;
  /** forward tensors: their role; backward tensors are activation gradients */
  role: "activation" | "pre-activation" | "activation-gradient";
  /** elements that are not part of the tensor (masked attention logits), marked 1; absent: every element counts */
  excluded?: Uint8Array;
}

/** What a kernel may ask of the engine while it runs. */
export interface KernelContext {
  /** samples in the micro-batch */
  batch: number;
  /** uniform random numbers in [0, 1) (dropout masks) */
  random: () => number;
  /** rounding of every product and partial sum in the accumulate format; absent: binary64 */
  accumulate?: RoundFunction;
  /** called with each inner tensor as soon as it exists: the engine measures it and rounds it in place */
  store(info: InnerTensorInfo, data: Float64Array): void;
  /** residual layers: run the branch forward from the given input, returning its output */
  branchForward?(x: Float64Array): Float64Array;
  /** residual layers: run the branch backward from the gradient at its output, returning the gradient at its input */
  branchBackward?(dy: Float64Array): Float64Array;
}

/** One layer's forward result. */
export interface KernelForward {
  output: Float64Array;
  /** whatever the backward pass needs */
  state: unknown;
}

/** One layer's backward result. */
export interface KernelBackward {
  /** gradient at the layer's input; absent for an embedding (token ids have none) */
  input?: Float64Array;
  /** gradient of each weight, by GraphWeight.name */
  weights: Record<string, Float64Array>;
}

/** The float64 kernels of one layer family. */
export interface Kernel {
  /** the role of the layer's output tensor, as the analytic rules report it */
  outputRole(layer: GraphLayer): "activation" | "pre-activation";
  forward(layer: GraphLayer, x: Float64Array, weights: Record<string, Float64Array>, ctx: KernelContext): KernelForward;
  backward(
    layer: GraphLayer,
    dy: Float64Array,
    x: Float64Array,
    forward: KernelForward,
    weights: Record<string, Float64Array>,
    ctx: KernelContext,
  ): KernelBackward;
}

// ---------------------------------------------------------------------------------------------------------------
// shape helpers

function rowsOf(shape: SampleShape, batch: number): { rows: number; width: number } {
  switch (shape.layout) {
    case "features":
      return { rows: batch * shape.positions, width: shape.features };
    case "tokens":
      return { rows: batch * shape.positions, width: 1 };
    case "image":
      return { rows: batch, width: shape.channels * shape.height * shape.width };
  }
}

function weight(weights: Record<string, Float64Array>, name: string, layer: GraphLayer): Float64Array {
  const w = weights[name];
  if (w === undefined) throw new RangeError(`layer ${layer.name} has no weight "${name}" to run with`);
  return w;
}

/** [batch, channels, pixels] -> [batch, pixels, channels] (or back, with the two sizes swapped). */
function swapInner(x: Float64Array, batch: number, a: number, b: number): Float64Array {
  const y = new Float64Array(x.length);
  for (let n = 0; n < batch; n++) {
    const o = n * a * b;
    for (let i = 0; i < a; i++) for (let j = 0; j < b; j++) y[o + j * a + i] = x[o + i * b + j]!;
  }
  return y;
}

/** A per-channel vector repeated over each channel's pixels: [channels] -> [channels·pixels]. */
function expandChannels(v: Float64Array, pixels: number): Float64Array {
  const out = new Float64Array(v.length * pixels);
  for (let c = 0; c < v.length; c++) out.fill(v[c]!, c * pixels, (c + 1) * pixels);
  return out;
}

/** The inverse's adjoint: sum each channel's pixels: [channels·pixels] -> [channels]. */
function sumChannels(v: Float64Array, channels: number, pixels: number): Float64Array {
  const out = new Float64Array(channels);
  for (let c = 0; c < channels; c++) {
    let s = 0;
    for (let p = 0; p < pixels; p++) s += v[c * pixels + p]!;
    out[c] = s;
  }
  return out;
}

// ---------------------------------------------------------------------------------------------------------------
// families

const dense: Kernel = {
  outputRole: () => "pre-activation",
  forward(layer, x, weights, ctx) {
    const { rows, width: nIn } = rowsOf(layer.input, ctx.batch);
    const nOut = rowsOf(layer.output, ctx.batch).width;
    const output = denseForward(x, weight(weights, "weight", layer), weights["bias"] ?? null, rows, nIn, nOut, ctx.accumulate);
    return { output, state: null };
  },
  backward(layer, dy, x, _forward, weights, ctx) {
    const { rows, width: nIn } = rowsOf(layer.input, ctx.batch);
    const nOut = rowsOf(layer.output, ctx.batch).width;
    const hasBias = weights["bias"] !== undefined;
    const g = denseBackward(x, weight(weights, "weight", layer), dy, rows, nIn, nOut, hasBias, ctx.accumulate);
    const grads: Record<string, Float64Array> = { weight: g.dw };
    if (g.db !== null) grads["bias"] = g.db;
    return { input: g.dx, weights: grads };
  },
};

function convGeometry(layer: GraphLayer, batch: number): Conv2dGeometry {
  const spec = layer.spec as Conv2dLayer;
  if (layer.input.layout !== "image") throw new RangeError(`conv2d ${layer.name} needs an image input`);
  const { channels, height, width } = layer.input;
  return conv2dGeometry(batch, channels, height, width, spec.channels, spec.kernel, spec.stride, spec.padding);
}

const conv2d: Kernel = {
  outputRole: () => "pre-activation",
  forward(layer, x, weights, ctx) {
    const g = convGeometry(layer, ctx.batch);
    return { output: conv2dForward(x, weight(weights, "weight", layer), weights["bias"] ?? null, g, ctx.accumulate), state: g };
  },
  backward(layer, dy, x, forward, weights, ctx) {
    const g = forward.state as Conv2dGeometry;
    const hasBias = weights["bias"] !== undefined;
    const r = conv2dBackward(x, weight(weights, "weight", layer), dy, g, hasBias, ctx.accumulate);
    const grads: Record<string, Float64Array> = { weight: r.dw };
    if (r.db !== null) grads["bias"] = r.db;
    return { input: r.dx, weights: grads };
  },
};

const embedding: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, weights, ctx) {
    const spec = layer.spec as EmbeddingLayer;
    const rows = rowsOf(layer.input, ctx.batch).rows;
    return { output: embeddingForward(x, weight(weights, "table", layer), rows, spec.vocabulary, spec.width, spec.multiplier), state: null };
  },
  backward(layer, dy, x, _forward, _weights, ctx) {
    const spec = layer.spec as EmbeddingLayer;
    const rows = rowsOf(layer.input, ctx.batch).rows;
    return { weights: { table: embeddingBackward(x, dy, rows, spec.vocabulary, spec.width, spec.multiplier) } };
  },
};

/** Softmax acts on features, or on the channels of each pixel of an image. */
function softmaxLayout(shape: SampleShape, batch: number): { rows: number; width: number; pixels: number } {
  if (shape.layout === "image") return { rows: batch * shape.height * shape.width, width: shape.channels, pixels: shape.height * shape.width };
  const { rows, width } = rowsOf(shape, batch);
  return { rows, width, pixels: 1 };
}

const activation: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, _weights, ctx) {
    const spec = layer.spec as ActivationLayer;
    if (spec.activation !== "softmax") return { output: activationForward(spec.activation, x, spec.slope), state: null };
    const { rows, width, pixels } = softmaxLayout(layer.input, ctx.batch);
    if (pixels === 1) return { output: softmaxForward(x, rows, width), state: null };
    const inner = softmaxForward(swapInner(x, ctx.batch, width, pixels), rows, width);
    return { output: swapInner(inner, ctx.batch, pixels, width), state: null };
  },
  backward(layer, dy, x, forward, _weights, ctx) {
    const spec = layer.spec as ActivationLayer;
    if (spec.activation !== "softmax") return { input: activationBackward(spec.activation as ElementwiseActivation, x, dy, spec.slope), weights: {} };
    const { rows, width, pixels } = softmaxLayout(layer.input, ctx.batch);
    if (pixels === 1) return { input: softmaxBackward(forward.output, dy, rows, width), weights: {} };
    const y = swapInner(forward.output, ctx.batch, width, pixels);
    const d = softmaxBackward(y, swapInner(dy, ctx.batch, width, pixels), rows, width);
    return { input: swapInner(d, ctx.batch, pixels, width), weights: {} };
  },
};

/**
 * Layer and RMS norms act on the features of each position, or on the whole sample of an image (every channel
 * and pixel, with one gain per channel), as the analytic rules count their terms.
 */
function rowNorm(kind: "layer-norm" | "rms-norm"): Kernel {
  return {
    outputRole: () => "activation",
    forward(layer, x, weights, ctx) {
      const spec = layer.spec as NormLayer;
      const { rows, width } = rowsOf(layer.input, ctx.batch);
      const pixels = layer.input.layout === "image" ? layer.input.height * layer.input.width : 1;
      const gain = expandChannels(weight(weights, "gain", layer), pixels);
      if (kind === "layer-norm") {
        const bias = expandChannels(weight(weights, "bias", layer), pixels);
        const r = layerNormForward(x, gain, bias, rows, width, spec.epsilon);
        return { output: r.y, state: { normalised: r.normalised, inverse: r.inverseStd, gain, pixels } };
      }
      const r = rmsNormForward(x, gain, rows, width, spec.epsilon);
      return { output: r.y, state: { normalised: r.normalised, inverse: r.inverseRms, gain, pixels } };
    },
    backward(layer, dy, _x, forward, _weights, ctx): KernelBackward {
      const { rows, width } = rowsOf(layer.input, ctx.batch);
      const s = forward.state as { normalised: Float64Array; inverse: Float64Array; gain: Float64Array; pixels: number };
      const channels = width / s.pixels;
      if (kind === "layer-norm") {
        const g = layerNormBackward(dy, s.normalised, s.inverse, s.gain, rows, width);
        return { input: g.dx, weights: { gain: sumChannels(g.dgain, channels, s.pixels), bias: sumChannels(g.dbias, channels, s.pixels) } };
      }
      const g = rmsNormBackward(dy, s.normalised, s.inverse, s.gain, rows, width);
      return { input: g.dx, weights: { gain: sumChannels(g.dgain, channels, s.pixels) } };
    },
  };
}

function batchNormLayout(shape: SampleShape, batch: number): BatchNormLayout {
  if (shape.layout === "image") return { outer: batch, channels: shape.channels, inner: shape.height * shape.width };
  const { rows, width } = rowsOf(shape, batch);
  return { outer: rows, channels: width, inner: 1 };
}

const batchNorm: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, weights, ctx) {
    const spec = layer.spec as NormLayer;
    const gain = weight(weights, "gain", layer);
    const r = batchNormForward(x, gain, weight(weights, "bias", layer), batchNormLayout(layer.input, ctx.batch), spec.epsilon);
    return { output: r.y, state: r };
  },
  backward(layer, dy, _x, forward, weights, ctx) {
    const s = forward.state as { normalised: Float64Array; inverseStd: Float64Array };
    const g = batchNormBackward(dy, s.normalised, s.inverseStd, weight(weights, "gain", layer), batchNormLayout(layer.input, ctx.batch));
    return { input: g.dx, weights: { gain: g.dgain, bias: g.dbias } };
  },
};

const dropout: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, _weights, ctx) {
    const mask = dropoutMask(x.length, (layer.spec as DropoutLayer).rate, ctx.random);
    return { output: dropoutForward(x, mask), state: mask };
  },
  backward(_layer, dy, _x, forward) {
    return { input: dropoutBackward(dy, forward.state as Float64Array), weights: {} };
  },
};

function poolOf(layer: GraphLayer, batch: number): PoolGeometry {
  const spec = layer.spec as PoolLayer;
  const s = layer.input;
  if (s.layout === "image") return poolGeometry(batch * s.channels, s.height, s.width, spec.size, spec.stride);
  if (s.layout === "features") return positionPoolGeometry(batch, s.positions, s.features, spec.size, spec.stride);
  throw new RangeError(`${layer.family} ${layer.name} cannot pool token ids`);
}

const averagePool: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, _weights, ctx) {
    return { output: averagePoolForward(x, poolOf(layer, ctx.batch)), state: null };
  },
  backward(layer, dy, _x, _forward, _weights, ctx) {
    return { input: averagePoolBackward(dy, poolOf(layer, ctx.batch)), weights: {} };
  },
};

const maxPool: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, _weights, ctx) {
    const r = maxPoolForward(x, poolOf(layer, ctx.batch));
    return { output: r.y, state: r.argmax };
  },
  backward(_layer, dy, x, forward) {
    return { input: maxPoolBackward(dy, forward.state as Int32Array, x.length), weights: {} };
  },
};

const flatten: Kernel = {
  outputRole: () => "activation",
  forward: (_layer, x) => ({ output: flattenForward(x), state: null }),
  backward: (_layer, dy) => ({ input: flattenBackward(dy), weights: {} }),
};

const residual: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, _weights, ctx) {
    if (ctx.branchForward === undefined) throw new RangeError(`residual ${layer.name} needs its branch to run`);
    const branchOutput = ctx.branchForward(x);
    return { output: residualForward(x, branchOutput, (layer.spec as ResidualLayer).multiplier), state: null };
  },
  backward(layer, dy, _x, _forward, _weights, ctx) {
    if (ctx.branchBackward === undefined) throw new RangeError(`residual ${layer.name} needs its branch to run`);
    const toBranch = residualBackwardToBranch(dy, (layer.spec as ResidualLayer).multiplier);
    return { input: residualBackwardCombine(dy, ctx.branchBackward(toBranch)), weights: {} };
  },
};

/** Attention tensors by the analytic rules' suffixes (src/ops/attention/analytic.ts). */
const ATTENTION_TENSORS: Record<AttentionTensorName, InnerTensorInfo> = {
  query: { suffix: "query", role: "pre-activation" },
  key: { suffix: "key", role: "pre-activation" },
  value: { suffix: "value", role: "pre-activation" },
  logits: { suffix: "logits", role: "pre-activation" },
  probabilities: { suffix: "probabilities", role: "activation" },
  context: { suffix: "heads", role: "activation" },
  "context-gradient": { suffix: "heads", role: "activation-gradient" },
  "probabilities-gradient": { suffix: "probabilities", role: "activation-gradient" },
  "logits-gradient": { suffix: "logits", role: "activation-gradient" },
  "query-gradient": { suffix: "query", role: "activation-gradient" },
  "key-gradient": { suffix: "key", role: "activation-gradient" },
  "value-gradient": { suffix: "value", role: "activation-gradient" },
};

function attentionConfig(layer: GraphLayer, batch: number): AttentionConfig {
  const spec = layer.spec as AttentionLayer;
  if (layer.input.layout !== "features") throw new RangeError(`attention ${layer.name} needs a features input`);
  return {
    batch,
    positions: layer.input.positions,
    width: layer.input.features,
    heads: spec.heads,
    headWidth: spec.headWidth,
    causal: spec.causal,
    scaling: spec.scaling,
    subtractMax: spec.subtractMax,
  };
}

/** Marks the future positions of each row of [batch, heads, P, P] (not part of a causal logits tensor). */
function causalExclusion(cfg: AttentionConfig): Uint8Array {
  const P = cfg.positions;
  const mask = new Uint8Array(cfg.batch * cfg.heads * P * P);
  for (let m = 0; m < cfg.batch * cfg.heads; m++) {
    for (let i = 0; i < P; i++) for (let j = i + 1; j < P; j++) mask[(m * P + i) * P + j] = 1;
  }
  return mask;
}

const attention: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, weights, ctx) {
    const cfg = attentionConfig(layer, ctx.batch);
    const excluded = cfg.causal ? causalExclusion(cfg) : undefined;
    const w = {
      query: weight(weights, "query", layer),
      key: weight(weights, "key", layer),
      value: weight(weights, "value", layer),
      output: weight(weights, "output", layer),
    };
    const r = attentionForward(
      x,
      w,
      cfg,
      (name, data) => {
        const info = ATTENTION_TENSORS[name];
        ctx.store(name === "logits" && excluded !== undefined ? { ...info, excluded } : info, data);
      },
      ctx.accumulate,
    );
    return { output: r.y, state: r.saved };
  },
  backward(layer, dy, _x, forward, weights, ctx) {
    const cfg = attentionConfig(layer, ctx.batch);
    const w = {
      query: weight(weights, "query", layer),
      key: weight(weights, "key", layer),
      value: weight(weights, "value", layer),
      output: weight(weights, "output", layer),
    };
    const r = attentionBackward(dy, w, forward.state as AttentionSaved, cfg, (name, data) => ctx.store(ATTENTION_TENSORS[name], data), ctx.accumulate);
    return { input: r.dx, weights: { ...r.dweights } };
  },
};

/** Gated feed-forward tensors by the analytic rules' suffixes (src/ops/gated-feed-forward/analytic.ts). */
const GATED_TENSORS: Record<GatedTensorName, InnerTensorInfo> = {
  gate: { suffix: "gate", role: "pre-activation" },
  "gate-activation": { suffix: "gate-activation", role: "activation" },
  up: { suffix: "up", role: "pre-activation" },
  product: { suffix: "product", role: "activation" },
  "product-gradient": { suffix: "product", role: "activation-gradient" },
  "gate-activation-gradient": { suffix: "gate-activation", role: "activation-gradient" },
  "up-gradient": { suffix: "up", role: "activation-gradient" },
  "gate-gradient": { suffix: "gate", role: "activation-gradient" },
};

const gatedFeedForward: Kernel = {
  outputRole: () => "activation",
  forward(layer, x, weights, ctx) {
    const spec = layer.spec as GatedFeedForwardLayer;
    const { rows, width } = rowsOf(layer.input, ctx.batch);
    const w = { gate: weight(weights, "gate", layer), up: weight(weights, "up", layer), down: weight(weights, "down", layer) };
    const r = gatedForward(x, w, rows, width, spec.hidden, spec.activation, 0.01, (name, data) => ctx.store(GATED_TENSORS[name], data), ctx.accumulate);
    return { output: r.y, state: r.saved };
  },
  backward(layer, dy, _x, forward, weights, ctx) {
    const spec = layer.spec as GatedFeedForwardLayer;
    const { rows, width } = rowsOf(layer.input, ctx.batch);
    const w = { gate: weight(weights, "gate", layer), up: weight(weights, "up", layer), down: weight(weights, "down", layer) };
    const r = gatedBackward(
      dy,
      w,
      forward.state as GatedSaved,
      rows,
      width,
      spec.hidden,
      spec.activation,
      0.01,
      (name, data) => ctx.store(GATED_TENSORS[name], data),
      ctx.accumulate,
    );
    return { input: r.dx, weights: { ...r.dweights } };
  },
};

/** The float64 kernels by layer family. */
export const kernels = {
  dense,
  conv2d,
  embedding,
  activation,
  "layer-norm": rowNorm("layer-norm"),
  "rms-norm": rowNorm("rms-norm"),
  "batch-norm": batchNorm,
  dropout,
  "average-pool": averagePool,
  "max-pool": maxPool,
  flatten,
  residual,
  attention,
  "gated-feed-forward": gatedFeedForward,
} as const satisfies Record<GraphFamily, Kernel>;

/** The kernels of one family. */
export function kernelFor(family: GraphFamily): Kernel {
  return kernels[family];
}
