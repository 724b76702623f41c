/**
 * The float64 simulation engine: runs a network's training step forward and backward on random data, with
 * every stored tensor rounded to its planned format, and measures each tensor on the way.
 *
 * One step: weights drawn from their initialisations (rounded to the weights format); random inputs at the
 * spec's input scale (token ids uniform over the vocabulary); forward layer by layer (each output and inner
 * tensor measured, then rounded to the activations format); the loss and its gradient, multiplied by the loss
 * scale and divided by the accumulation steps (as the magnitude engine assumes); backward layer by layer (each
 * gradient measured, then rounded to the gradients format); weight gradients summed over the micro-batches of
 * the accumulation steps and workers (each micro-batch's gradient stored in the gradients format first),
 * averaged over workers when the spec says so, measured and rounded. Products and their sums are rounded in the
 * accumulate format when it is narrower than binary64. Optional optimizer steps follow, with the loss scale
 * removed before the update, master weights and optimizer states in their formats.
 *
 * All randomness comes from one seeded source per draw (createRandom of src/numeric), never from a global one.
 */
import { getFormat, MX_BLOCK, roundTo, type Format, type RoundOptions } from "../formats/index.js";
import { batchShape, buildGraph, sampleElements, type Graph, type GraphLayer, type GraphWeight } from "../graph/index.js";
import type { PlanSlot, TensorRole } from "../magnitude/types.js";
import { kernelFor, type InnerTensorInfo, type KernelContext, type KernelForward } from "../ops/kernels.js";
import { crossEntropy, meanSquaredError } from "../ops/loss/kernel.js";
import type { NetworkSpec, PrecisionPlan } from "../spec/types.js";
import { didYouMean } from "../spec/issues.js";
import type { RoundFunction } from "../numeric/matmul.js";
import { createRandom, type RandomSource } from "../numeric/random.js";
import { applyScales, roundScaledInPlace, storageScales } from "./scaling.js";
import { checkMemory, shrinkSpec } from "./shrink.js";
import { formatCounts, measureTensor, medianStats, selectElements, tensorMagnitudes } from "./stats.js";
import { SimulationSpecError, type MeasuredTensor, type SimulateOptions, type SimulationLossScaleOrigin, type SimulationResult, type StepRecord, type TensorStats } from "./types.js";

/** Default memory limit: 4 GiB. */
export const DEFAULT_MEMORY_LIMIT = 4 * 2 ** 30;
/** Default cap on micro-batches per step. */
export const DEFAULT_MICRO_BATCHES = 8;

interface TensorMeta {
  id: string;
  layer: string;
  role: TensorRole;
  slot: PlanSlot;
  shape: number[];
  /** the factor the format counts are taken at (MeasuredTensor.countsScaledBy) */
  countsScaledBy?: number;
}

/** Everything that stays fixed over a run: the graph, the formats and how to round. */
interface Setup {
  spec: NetworkSpec;
  graph: Graph;
  plan: PrecisionPlan;
  formats: Record<PlanSlot, Format>;
  master: Format | null;
  roundOptions: RoundOptions;
  round: boolean;
  accumulate: RoundFunction | undefined;
  /** the plan's accumulate format, where check's loss-value rule also judges the scaled loss */
  accumulateFormat: Format;
  lossScale: number;
  /** Adam's ε as the optimizer states' format holds it (the given ε without rounding); 0 for other optimizers */
  epsilon: number;
  microBatches: number;
  wantedMicroBatches: number;
}

/** One draw's weights and optimizer state. */
interface Model {
  /** stored weights (in the weights format), by `<layer>/<weight name>` */
  weights: Map<string, Float64Array>;
  /** master copies (in the master format), when the plan keeps them */
  master: Map<string, Float64Array>;
  first: Map<string, Float64Array>;
  second: Map<string, Float64Array>;
  random: RandomSource;
  step: number;
  /** weights whose every element starts at zero (biases, as initialised; marked when made, so a skipped first step does not hide them): no scale to set an update against */
  zeroStart: Set<string>;
}

/** Collects measurements of one pass. */
class Recorder {
  readonly stats = new Map<string, { meta: TensorMeta; stats: TensorStats }>();
  constructor(
    readonly setup: Setup,
    /** whether this micro-batch is measured (only the first is) */
    public active: boolean,
  ) {}

  /** Measure (when active) and round in place to the slot's format. */
  store(meta: TensorMeta, data: Float64Array, excluded?: Uint8Array): void {
    if (this.active) this.measure(meta, data, excluded);
    this.round(meta.slot, data);
  }

  measure(meta: TensorMeta, data: Float64Array, excluded?: Uint8Array): void {
    const format = this.setup.formats[meta.slot];
    const values = selectElements(data, excluded);
    const options = roundOptionsFor(this.setup.roundOptions, format);
    const scaling = this.setup.plan.scaling;
    const factor = meta.countsScaledBy;
    if (factor === undefined) {
      // a per-tensor scale is the whole array's, also for the part of it measured here (the right-class elements);
      // per-block scales follow each block's own elements, which the parts measured apart hardly share
      const scales = storageScales(scaling === "tensor" ? data : values, format, scaling);
      this.stats.set(meta.id, { meta, stats: measureTensor(values, format, options, scales) });
      return;
    }
    // what storing is judged on: the values times the factor (the loss times the loss scale), their magnitudes kept
    const stored = values.map((v) => v * factor);
    const stats: TensorStats = { ...tensorMagnitudes(values), counts: formatCounts(stored, format, options, storageScales(stored, format, scaling)) };
    // check judges the scaled loss in the accumulate format too, when it is another (src/risk/hazards.ts lossValue)
    const accumulate = this.setup.accumulateFormat;
    if (accumulate.name !== format.name) {
      const held = roundOptionsFor(this.setup.roundOptions, accumulate);
      stats.accumulateCounts = formatCounts(stored, accumulate, held, storageScales(stored, accumulate, scaling));
    }
    this.stats.set(meta.id, { meta, stats });
  }

  round(slot: PlanSlot, data: Float64Array): void {
    if (this.setup.round) storeIn(this.setup, this.setup.formats[slot], data);
  }
}

/**
 * The plan's overflow mode governs 8-bit conversions; IEEE 16- and 32-bit conversions overflow to infinity (IEEE 754-2019
 * §7.4). bfloat16 flushes its subnormals whatever the plan says, as check judges it (much hardware does: common practice).
 */
function roundOptionsFor(options: RoundOptions, format: Format): RoundOptions {
  const flushSubnormals = options.flushSubnormals === true || format.subnormalsOftenFlushed;
  if (format.bits === 8) return flushSubnormals === options.flushSubnormals ? options : { ...options, flushSubnormals };
  return { ...options, overflow: "infinity-or-nan", flushSubnormals };
}

/**
 * Round in place to a format, through the plan's 8-bit scale factors when it has them (per-block scales clamp inside
 * the element range where E8M0 held the block's scale: src/simulate/scaling.ts).
 */
function storeIn(setup: Setup, format: Format, data: Float64Array): void {
  const scales = storageScales(data, format, setup.plan.scaling);
  applyScales(data, scales);
  roundScaledInPlace(format, data, scales, roundOptionsFor(setup.roundOptions, format));
  applyScales(data, scales, true);
}

function weightKey(layer: GraphLayer, w: GraphWeight | string): string {
  return `${layer.name}/${typeof w === "string" ? w : w.name}`;
}

function weightId(layer: GraphLayer, name: string, role: "weight" | "weight-gradient"): string {
  return `${layer.name}/${role}${name === "weight" ? "" : `:${name}`}`;
}

function layerWeights(model: Model, layer: GraphLayer): Record<string, Float64Array> {
  const out: Record<string, Float64Array> = {};
  for (const w of layer.weights) out[w.name] = model.weights.get(weightKey(layer, w))!;
  return out;
}

function allLayers(layers: readonly GraphLayer[], out: GraphLayer[] = []): GraphLayer[] {
  for (const layer of layers) {
    if (layer.branch !== undefined) allLayers(layer.branch, out);
    out.push(layer);
  }
  return out;
}

/** Draw a weight from its initialisation. Orthogonal initialisations are drawn as Gaussians of the same variance. */
function initialWeight(w: GraphWeight, random: RandomSource): Float64Array {
  const data = new Float64Array(w.elements);
  switch (w.distribution) {
    case "normal": {
      const std = Math.sqrt(w.variance);
      for (let i = 0; i < data.length; i++) data[i] = std * random.normal();
      break;
    }
    case "uniform": {
      // U[−a, a] has variance a²/3 (common practice)
      const a = Math.sqrt(3 * w.variance);
      for (let i = 0; i < data.length; i++) data[i] = a * (2 * random.next() - 1);
      break;
    }
    case "constant":
      data.fill(w.value ?? 0);
      break;
    case "zeros":
      break;
  }
  return data;
}

function createModel(setup: Setup, seed: number, recorder: Recorder): Model {
  const random = createRandom(seed);
  const model: Model = { weights: new Map(), master: new Map(), first: new Map(), second: new Map(), random, step: 0, zeroStart: new Set() };
  for (const layer of allLayers(setup.graph.layers)) {
    for (const w of layer.weights) {
      const data = initialWeight(w, random);
      const key = weightKey(layer, w);
      if (setup.master !== null) {
        const master = Float64Array.from(data);
        if (setup.round) storeIn(setup, setup.master, master);
        model.master.set(key, master);
      }
      recorder.store({ id: weightId(layer, w.name, "weight"), layer: layer.name, role: "weight", slot: "weights", shape: w.shape }, data);
      model.weights.set(key, data);
      if (data.every((x) => x === 0)) model.zeroStart.add(key);
    }
  }
  return model;
}

/** Random inputs: Gaussian features or pixels at the spec's input scale, or token ids uniform over the vocabulary. */
function makeInput(setup: Setup, random: RandomSource): Float64Array {
  const { graph, spec } = setup;
  const n = graph.batch * sampleElements(graph.input);
  const x = new Float64Array(n);
  if (spec.input.kind === "tokens") {
    const first = graph.layers[0];
    const vocabulary = first !== undefined && first.spec.family === "embedding" ? first.spec.vocabulary : 1;
    for (let i = 0; i < n; i++) x[i] = Math.floor(random.next() * vocabulary);
    return x;
  }
  const scale = spec.input.scale;
  for (let i = 0; i < n; i++) x[i] = scale * random.normal();
  return x;
}

interface Saved {
  x: Float64Array;
  forward: KernelForward;
}

/** One micro-batch: forward, loss, backward. Returns the loss and the weight gradients (rounded, scaled). */
function runMicroBatch(setup: Setup, model: Model, recorder: Recorder): { loss: number; gradients: Map<string, Float64Array> } {
  const { graph, spec } = setup;
  const random = model.random;
  const saved = new Map<number, Saved>();
  const gradients = new Map<string, Float64Array>();
  const batch = graph.batch;

  const context = (layer: GraphLayer, direction: "forward" | "backward"): KernelContext => {
    const ctx: KernelContext = {
      batch,
      random: random.next,
      store(info: InnerTensorInfo, data: Float64Array) {
        const role = direction === "forward" ? info.role : "activation-gradient";
        const id = `${layer.name}/${role}:${info.suffix}`;
        recorder.store({ id, layer: layer.name, role, slot: role === "activation-gradient" ? "gradients" : "activations", shape: [data.length] }, data, info.excluded);
      },
    };
    if (setup.accumulate !== undefined) ctx.accumulate = setup.accumulate;
    if (layer.branch !== undefined) {
      const branch = layer.branch;
      if (direction === "forward") ctx.branchForward = (x) => forward(branch, x);
      else ctx.branchBackward = (dy) => backward(branch, dy, false) ?? new Float64Array(dy.length);
    }
    return ctx;
  };

  function forward(layers: readonly GraphLayer[], input: Float64Array): Float64Array {
    let x = input;
    for (const layer of layers) {
      const kernel = kernelFor(layer.family);
      const result = kernel.forward(layer, x, layerWeights(model, layer), context(layer, "forward"));
      const role = kernel.outputRole(layer);
      recorder.store({ id: `${layer.name}/${role}`, layer: layer.name, role, slot: "activations", shape: batchShape(batch, layer.output) }, result.output);
      saved.set(layer.index, { x, forward: result });
      x = result.output;
    }
    return x;
  }

  function backward(layers: readonly GraphLayer[], output: Float64Array, seeded: boolean): Float64Array | undefined {
    let dy: Float64Array | undefined = output;
    for (let i = layers.length - 1; i >= 0 && dy !== undefined; i--) {
      const layer = layers[i]!;
      if (!(seeded && i === layers.length - 1)) {
        recorder.store(
          { id: `${layer.name}/activation-gradient`, layer: layer.name, role: "activation-gradient", slot: "gradients", shape: batchShape(batch, layer.output) },
          dy,
        );
      }
      const kernel = kernelFor(layer.family);
      const s = saved.get(layer.index)!;
      const result = kernel.backward(layer, dy, s.x, s.forward, layerWeights(model, layer), context(layer, "backward"));
      for (const [name, g] of Object.entries(result.weights)) {
        // each micro-batch's weight gradient is stored in the gradients format before it is summed
        recorder.round("gradients", g);
        gradients.set(weightKey(layer, name), g);
      }
      dy = result.input;
    }
    return dy;
  }

  const input = makeInput(setup, random);
  if (spec.input.kind !== "tokens") {
    recorder.store({ id: "input/activation", layer: "input", role: "activation", slot: "activations", shape: batchShape(batch, graph.input) }, input);
  }
  const output = forward(graph.layers, input);
  const last = graph.layers[graph.layers.length - 1]!;
  const loss = spec.training.loss;
  const factor = setup.lossScale / spec.training.accumulationSteps;
  const lastShape = batchShape(batch, last.output);
  let value: number;
  let gradient: Float64Array;
  let targetMask: Uint8Array | undefined;
  if (loss.kind === "cross-entropy") {
    const classes = loss.classes;
    const rows = output.length / classes;
    const targets = new Int32Array(rows);
    for (let r = 0; r < rows; r++) targets[r] = Math.floor(random.next() * classes);
    const r = crossEntropy(output, targets, rows, classes, loss.reduction);
    value = r.loss;
    gradient = r.gradient;
    targetMask = new Uint8Array(gradient.length);
    for (let row = 0; row < rows; row++) targetMask[row * classes + targets[row]!] = 1;
  } else {
    const target = new Float64Array(output.length);
    for (let i = 0; i < target.length; i++) target[i] = loss.targetScale * random.normal();
    const r = meanSquaredError(output, target, loss.reduction);
    value = r.loss;
    gradient = r.gradient;
  }
  for (let i = 0; i < gradient.length; i++) gradient[i] = gradient[i]! * factor;
  if (recorder.active) {
    // the loss is judged as check's loss-value rule judges it: times the loss scale, in the activation format and the
    // accumulate format (src/risk/hazards.ts lossValue); its magnitudes stay the loss's own, which the prediction gives
    recorder.measure({ id: "loss/loss", layer: "loss", role: "loss", slot: "activations", shape: [1], countsScaledBy: setup.lossScale }, Float64Array.of(value));
    const meta = { layer: last.name, role: "activation-gradient" as const, slot: "gradients" as const, shape: lastShape };
    if (targetMask !== undefined) {
      // the analytic seed reports the wrong-class elements and the right-class elements as two tensors
      const right = targetMask.map((v) => 1 - v);
      recorder.measure({ ...meta, id: `${last.name}/activation-gradient` }, gradient, targetMask);
      recorder.measure({ ...meta, id: `${last.name}/activation-gradient:target-class` }, gradient, right);
    } else {
      recorder.measure({ ...meta, id: `${last.name}/activation-gradient` }, gradient);
    }
  }
  recorder.round("gradients", gradient);
  backward(graph.layers, gradient, true);
  return { loss: value, gradients };
}

/** One step: every micro-batch, then the combined weight gradients (measured and rounded). */
function runStep(setup: Setup, model: Model, measure: boolean): { loss: number; recorder: Recorder; gradients: Map<string, Float64Array> } {
  const recorder = new Recorder(setup, measure);
  const sums = new Map<string, Float64Array>();
  // Σ over the micro-batches run of each gradient's squared norm, for the sum of those not run: only missingScale's
  // estimate of the noise reads it, when some micro-batches are left out and at least two run
  const squares = new Map<string, number>();
  const spread = setup.microBatches >= 2 && setup.microBatches < setup.wantedMicroBatches;
  let loss = 0;
  for (let m = 0; m < setup.microBatches; m++) {
    recorder.active = measure && m === 0;
    const r = runMicroBatch(setup, model, recorder);
    if (m === 0) loss = r.loss;
    for (const [key, g] of r.gradients) {
      if (spread) {
        let square = 0;
        for (let i = 0; i < g.length; i++) square += g[i]! * g[i]!;
        squares.set(key, (squares.get(key) ?? 0) + square);
      }
      const sum = sums.get(key);
      // the first micro-batch's gradient is a fresh array from its kernel, used nowhere else: it becomes the sum
      if (sum === undefined) sums.set(key, g);
      else for (let i = 0; i < g.length; i++) sum[i] = sum[i]! + g[i]!;
    }
  }
  recorder.active = measure;
  const training = setup.spec.training;
  const average = training.workerGradients === "average" ? 1 / training.workers : 1;
  for (const layer of allLayers(setup.graph.layers)) {
    for (const w of layer.weights) {
      const key = weightKey(layer, w);
      const sum = sums.get(key);
      if (sum === undefined) continue;
      const k = missingScale(sum, squares.get(key) ?? 0, setup.microBatches, setup.wantedMicroBatches) * average;
      if (k !== 1) for (let i = 0; i < sum.length; i++) sum[i] = sum[i]! * k;
      recorder.store({ id: weightId(layer, w.name, "weight-gradient"), layer: layer.name, role: "weight-gradient", slot: "gradients", shape: w.shape }, sum);
    }
  }
  return { loss, recorder, gradients: sums };
}

/**
 * The factor that takes the sum of the m micro-batch gradients run to the size of the sum of all N wanted. The
 * gradients share an expected part μ and differ by noise of variance σ² per micro-batch: E‖S_N‖² = N²‖μ‖² + N·tr σ²,
 * with tr σ² ≈ (Σ‖g_i‖² − ‖S_m‖²/m)/(m − 1) and ‖μ‖² ≈ (‖S_m‖² − m·tr σ²)/m² from the ones run (the sample variance
 * and mean; common practice); the sum run is scaled to that norm. One micro-batch run cannot tell μ from the noise:
 * its sum is taken as independent parts, √(N/m) (common practice for independent sums).
 */
export function missingScale(sum: Float64Array, squares: number, run: number, wanted: number): number {
  if (wanted <= run) return 1;
  if (run < 2) return Math.sqrt(wanted / run);
  let norm = 0;
  for (let i = 0; i < sum.length; i++) norm += sum[i]! * sum[i]!;
  if (!(norm > 0)) return Math.sqrt(wanted / run);
  const noise = Math.max(0, (squares - norm / run) / (run - 1));
  const mean = Math.max(0, (norm - run * noise) / (run * run));
  return Math.sqrt((wanted * wanted * mean + wanted * noise) / norm);
}

/** Learning rate at step t (1-based): linear warm-up to the peak, then linear decay to the end value over the horizon (common practice). */
export function learningRate(spec: NetworkSpec, t: number): number {
  const { learningRate: lr, warmupSteps } = spec.training.optimizer;
  if (warmupSteps > 0 && t <= warmupSteps) return (lr.peak * t) / warmupSteps;
  const total = Math.max(spec.training.horizon.steps - warmupSteps, 1);
  const progress = Math.min(Math.max(t - warmupSteps, 0) / total, 1);
  return lr.peak + (lr.end - lr.peak) * progress;
}

/** Apply one optimizer update from the (scaled) combined gradients; returns the step's record. */
function optimizerStep(setup: Setup, model: Model, gradients: Map<string, Float64Array>, loss: number): StepRecord {
  const { spec } = setup;
  const opt = spec.training.optimizer;
  model.step++;
  const t = model.step;
  const lr = learningRate(spec, t);
  const record: StepRecord = { step: t, loss, learningRate: lr, skipped: false, swamped: {}, updateRatio: {}, nonFiniteUpdates: {}, secondMomentsFlushed: {} };
  // remove the loss scale (Micikevicius et al. 2018 §3.2: unscale before clipping and weight decay)
  const unscaled = new Map<string, Float64Array>();
  let finite = true;
  let norm2 = 0;
  for (const [key, g] of gradients) {
    const u = new Float64Array(g.length);
    for (let i = 0; i < g.length; i++) {
      const v = g[i]! / setup.lossScale;
      if (!Number.isFinite(v)) finite = false;
      u[i] = v;
      norm2 += v * v;
    }
    unscaled.set(key, u);
  }
  if (!finite) {
    // an overflowed gradient skips the update, as loss-scaling implementations do (Micikevicius et al. 2018 §3.2)
    record.skipped = true;
    return record;
  }
  const clip = opt.clipNorm !== undefined && Math.sqrt(norm2) > opt.clipNorm ? opt.clipNorm / Math.sqrt(norm2) : 1;
  const states = setup.formats.optimizerStates;
  for (const [key, g] of unscaled) {
    const stored = model.weights.get(key)!;
    const master = model.master.get(key);
    const current = master ?? stored;
    const update = new Float64Array(g.length);
    const decoupled = opt.kind === "adamw";
    for (let i = 0; i < g.length; i++) {
      let gi = g[i]! * clip;
      if (!decoupled && opt.weightDecay > 0) gi += opt.weightDecay * current[i]!;
      g[i] = gi;
    }
    if (opt.kind === "sgd") {
      for (let i = 0; i < g.length; i++) update[i] = lr * g[i]!;
    } else if (opt.kind === "momentum") {
      let buf = model.first.get(key);
      if (buf === undefined) model.first.set(key, (buf = new Float64Array(g.length)));
      for (let i = 0; i < g.length; i++) buf[i] = opt.momentum * buf[i]! + g[i]!;
      if (setup.round) storeIn(setup, states, buf);
      for (let i = 0; i < g.length; i++) update[i] = lr * buf[i]!;
    } else {
      // Adam (Kingma & Ba 2015, Algorithm 1); AdamW's decoupled decay (Loshchilov & Hutter 2019)
      const [b1, b2] = opt.betas;
      let m = model.first.get(key);
      let v = model.second.get(key);
      if (m === undefined) model.first.set(key, (m = new Float64Array(g.length)));
      if (v === undefined) model.second.set(key, (v = new Float64Array(g.length)));
      let nonzero = 0;
      for (let i = 0; i < g.length; i++) {
        m[i] = b1 * m[i]! + (1 - b1) * g[i]!;
        v[i] = b2 * v[i]! + (1 - b2) * g[i]! * g[i]!;
        if (v[i] !== 0) nonzero++;
      }
      let kept = nonzero;
      if (setup.round) {
        storeIn(setup, states, m);
        storeIn(setup, states, v);
        kept = 0;
        for (let i = 0; i < g.length; i++) if (v[i] !== 0) kept++;
      }
      record.secondMomentsFlushed[key] = nonzero > 0 ? (nonzero - kept) / nonzero : 0;
      const c1 = 1 - b1 ** t;
      const c2 = 1 - b2 ** t;
      for (let i = 0; i < g.length; i++) {
        // ε as the states' format holds it: where it and a flushed second moment are both 0 the update divides by
        // zero (Kingma & Ba 2015, Algorithm 1), as check's optimizer epsilon rule says
        update[i] = (lr * (m[i]! / c1)) / (Math.sqrt(v[i]! / c2) + setup.epsilon);
        if (decoupled) update[i] = update[i]! + lr * opt.weightDecay * current[i]!;
      }
    }
    let swamped = 0;
    let changed = 0;
    let u2 = 0;
    let w2 = 0;
    let nonFinite = 0;
    for (let i = 0; i < g.length; i++) {
      w2 += stored[i]! * stored[i]!;
      // a non-finite element is counted apart: the ratio is of the finite part of the update
      if (!Number.isFinite(update[i]!)) nonFinite++;
      else u2 += update[i]! * update[i]!;
    }
    record.nonFiniteUpdates[key] = g.length > 0 ? nonFinite / g.length : 0;
    const target = master ?? stored;
    const before = Float64Array.from(target);
    for (let i = 0; i < g.length; i++) target[i] = target[i]! - update[i]!;
    if (setup.round) storeIn(setup, master !== undefined ? setup.master! : setup.formats.weights, target);
    if (master !== undefined) {
      stored.set(master);
      if (setup.round) storeIn(setup, setup.formats.weights, stored);
    }
    for (let i = 0; i < g.length; i++) {
      if (update[i] === 0) continue;
      changed++;
      if (target[i] === before[i]) swamped++;
    }
    record.swamped[key] = changed > 0 ? swamped / changed : 0;
    // a weight that starts at zero (a bias) has no size of its own to set its first updates against: its ratio would
    // be infinite, then ~1 for any learning rate, and say nothing of the update's size
    if (!model.zeroStart.has(key)) record.updateRatio[key] = w2 > 0 ? Math.sqrt(u2 / w2) : 0;
  }
  return record;
}

/** Resolve the plan a simulation stores tensors in. */
export function resolvePlan(spec: NetworkSpec, name: string | undefined): PrecisionPlan {
  if (name === undefined || name === spec.precision.name) return spec.precision;
  const plan = spec.plans.find((p) => p.name === name);
  if (plan === undefined) {
    const known = [spec.precision.name, ...spec.plans.map((p) => p.name)];
    throw new RangeError(`the spec has no plan named "${name}"${didYouMean(name, known)} (plans: ${known.join(", ")})`);
  }
  return plan;
}

/**
 * The loss scale a run uses: the caller's, else the plan's, else the default's answer for the network as simulated,
 * else 1. The default is asked of the simulated (shrunk) network, as the predictions compared with it are made for it.
 */
function chooseLossScale(
  simulated: NetworkSpec,
  plan: PrecisionPlan,
  options: SimulateOptions,
  shrunk: boolean,
): { value: number; origin: SimulationLossScaleOrigin; reason?: string } {
  if (options.lossScale !== undefined) return { value: options.lossScale, origin: "option" };
  if (plan.lossScale !== undefined) return { value: plan.lossScale, origin: "plan" };
  if (options.defaultLossScale === undefined) return { value: 1, origin: "none" };
  return options.defaultLossScale(simulated, { plan, shrunk });
}

/** A number in a sentence: three significant digits, exponent form outside 1e-4..1e6 (as the text outputs write values, src/report/number.ts formatValue). */
function numberWords(x: number): string {
  if (x === 0) return "0";
  const a = Math.abs(x);
  return a >= 1e-4 && a < 1e6 ? String(Number(x.toPrecision(3))) : x.toExponential(2).replace(/\.?0+e/, "e").replace("e+", "e");
}

/** A rounding function for the accumulate format, or undefined for binary64 (no rounding needed). */
function accumulator(format: Format, options: RoundOptions): RoundFunction | undefined {
  if (format.name === "binary64") return undefined;
  // Math.fround is round-to-nearest-even into binary32 (ECMAScript §21.3.2.17), the same as the format model's rounding
  if (format.name === "binary32" || format.name === "tf32") return Math.fround;
  // one scalar call per rounding, with the options fixed once: the products call this twice per multiply-add
  const scalarOptions = roundOptionsFor(options, format);
  return (x: number) => roundTo(format, x, scalarOptions);
}

/**
 * Simulate one training step (and optional optimizer steps) of a spec, measuring every tensor.
 * Throws RangeError for bad options, SimulationSpecError (a RangeError) when the network does not build and
 * SimulationTooLarge when the run would not fit the memory limit.
 */
export function runSimulation(original: NetworkSpec, options: SimulateOptions = {}): SimulationResult {
  const seed = options.seed ?? 1;
  const draws = options.draws ?? 1;
  const steps = options.steps ?? 0;
  if (!Number.isSafeInteger(seed)) throw new RangeError(`seed must be a whole number, got ${String(seed)}`);
  if (!Number.isInteger(draws) || draws < 1 || draws > 1000) throw new RangeError(`draws must be a whole number from 1 to 1000, got ${String(draws)}`);
  if (!Number.isInteger(steps) || steps < 0 || steps > 10000) throw new RangeError(`steps must be a whole number from 0 to 10000, got ${String(steps)}`);
  const { spec, report } = shrinkSpec(original, options.shrink);
  const built = buildGraph(spec);
  if (!built.ok) {
    // a spec that does not build at full size is reported as written, not as its shrunk copy
    const full = report.shrunk ? buildGraph(original) : built;
    throw full.ok ? new SimulationSpecError(built.issues, true) : new SimulationSpecError(full.issues, false);
  }
  const graph = built.graph;
  const plan = resolvePlan(spec, options.plan);
  const scale = chooseLossScale(spec, plan, options, report.shrunk);
  const lossScale = scale.value;
  if (!(lossScale > 0) || !Number.isFinite(lossScale)) throw new RangeError(`loss scale must be a finite number > 0, got ${String(lossScale)}`);
  const limit = options.memoryLimit ?? DEFAULT_MEMORY_LIMIT;
  const estimate = checkMemory(original, graph, steps, limit, report.shrunk);
  const training = spec.training;
  const wanted = training.accumulationSteps * training.workers;
  const cap = options.microBatches ?? DEFAULT_MICRO_BATCHES;
  if (!Number.isInteger(cap) || cap < 1) throw new RangeError(`micro-batches must be a whole number ≥ 1, got ${String(cap)}`);
  const roundOptions: RoundOptions = { overflow: plan.overflow, flushSubnormals: plan.flushSubnormals };
  const accumulateFormat = getFormat(plan.accumulate);
  const setup: Setup = {
    spec,
    graph,
    plan,
    formats: {
      activations: getFormat(plan.activations),
      weights: getFormat(plan.weights),
      gradients: getFormat(plan.gradients),
      optimizerStates: getFormat(plan.optimizerStates),
    },
    master: plan.masterWeights === "none" ? null : getFormat(plan.masterWeights),
    roundOptions,
    round: options.round ?? true,
    accumulate: options.round === false ? undefined : accumulator(accumulateFormat, roundOptions),
    accumulateFormat,
    lossScale,
    epsilon: 0,
    microBatches: Math.min(wanted, cap),
    wantedMicroBatches: wanted,
  };

  const optimizer = training.optimizer;
  const adamLike = optimizer.kind === "adam" || optimizer.kind === "adamw";
  if (adamLike) {
    // held in the states' format, as the states it is added to (and as check's optimizer epsilon rule holds it)
    const states = setup.formats.optimizerStates;
    setup.epsilon = setup.round ? roundTo(states, optimizer.epsilon, roundOptionsFor(roundOptions, states)) : optimizer.epsilon;
  }
  const perTensor = new Map<string, { meta: TensorMeta; draws: TensorStats[]; after: TensorStats[] }>();
  const history: StepRecord[][] = [];
  const initialLoss: number[] = [];
  const seeds: number[] = [];
  for (let d = 0; d < draws; d++) {
    const drawSeed = seed + d;
    seeds.push(drawSeed);
    const initRecorder = new Recorder(setup, true);
    const model = createModel(setup, drawSeed, initRecorder);
    let step = runStep(setup, model, true);
    initialLoss.push(step.loss);
    for (const source of [initRecorder.stats, step.recorder.stats]) {
      for (const [id, entry] of source) {
        const slot = perTensor.get(id) ?? { meta: entry.meta, draws: [], after: [] };
        slot.draws.push(entry.stats);
        perTensor.set(id, slot);
      }
    }
    const records: StepRecord[] = [];
    for (let s = 1; s <= steps; s++) {
      records.push(optimizerStep(setup, model, step.gradients, step.loss));
      const last = s === steps;
      step = runStep(setup, model, last);
      if (last) {
        const weightRecorder = new Recorder(setup, true);
        for (const layer of allLayers(graph.layers)) {
          for (const w of layer.weights) {
            weightRecorder.measure({ id: weightId(layer, w.name, "weight"), layer: layer.name, role: "weight", slot: "weights", shape: w.shape }, model.weights.get(weightKey(layer, w))!);
          }
        }
        for (const source of [weightRecorder.stats, step.recorder.stats]) {
          for (const [id, entry] of source) perTensor.get(id)?.after.push(entry.stats);
        }
      }
    }
    history.push(records);
  }

  const tensors: MeasuredTensor[] = [];
  for (const [id, entry] of perTensor) {
    const t: MeasuredTensor = { id, layer: entry.meta.layer, role: entry.meta.role, slot: entry.meta.slot, shape: entry.meta.shape, median: medianStats(entry.draws), draws: entry.draws };
    if (entry.meta.countsScaledBy !== undefined) t.countsScaledBy = entry.meta.countsScaledBy;
    if (entry.after.length > 0) t.after = medianStats(entry.after);
    tensors.push(t);
  }
  return {
    specName: original.name,
    planName: plan.name,
    formats: {
      activations: plan.activations,
      weights: plan.weights,
      gradients: plan.gradients,
      optimizerStates: plan.optimizerStates,
      accumulate: plan.accumulate,
      masterWeights: plan.masterWeights,
    },
    lossScale,
    lossScaleOrigin: scale.origin,
    ...(scale.reason !== undefined ? { lossScaleReason: scale.reason } : {}),
    seeds,
    steps,
    microBatches: { run: setup.microBatches, wanted },
    rounded: setup.round,
    shrink: report,
    simulatedSpec: spec,
    memory: { estimateBytes: estimate, limitBytes: limit },
    tensors,
    history,
    ...(adamLike ? { epsilon: { value: optimizer.epsilon, stored: setup.epsilon } } : {}),
    initialLoss,
    assumptions: assumptions(setup, report.shrunk, steps),
  };
}

function assumptions(setup: Setup, shrunk: boolean, steps: number): string[] {
  const list = [
    "Inputs are random: Gaussian features or pixels at the spec's input scale, token ids uniform over the vocabulary, class targets uniform, regression targets Gaussian at the target scale.",
    "Each tensor is measured in binary64 just before it is stored, then rounded to its planned format (round to nearest, ties to even) and used in that form.",
    "Orthogonal initialisations are drawn as Gaussians of the same variance.",
    "Dropout is inverted (kept values scaled by 1/(1 − rate)); batch norm runs in training mode.",
  ];
  if (setup.accumulate !== undefined) {
    list.push(
      setup.accumulate === Math.fround
        ? `Products accumulate in binary32${setup.plan.accumulate === "binary32" ? "" : ` (for the plan's ${setup.plan.accumulate})`}: every product and partial sum is rounded, over blocks of 256 terms.`
        : `Products accumulate in ${setup.plan.accumulate}: every product and partial sum is rounded, summed in order.`,
    );
  }
  const eightBit = Object.values(setup.formats).some((f) => f.bits === 8);
  if (eightBit && setup.plan.scaling === "block") {
    // the block conversion's own clamp (OCP MX v1.0 §6 / Rouhani et al. 2023 Alg. 1, from memory; SCIENCE.md §1.4)
    list.push(
      `8-bit tensors are stored with one power-of-two scale per block of ${MX_BLOCK.size} elements (E8M0, 2^${MX_BLOCK.minExponent} to 2^${MX_BLOCK.maxExponent}); each block's conversion clamps its elements to the largest finite value (counted as clipped), so only a block that would need a scale above 2^${MX_BLOCK.maxExponent} overflows or saturates as the plan says.`,
    );
  }
  if (setup.wantedMicroBatches > 1) {
    const { accumulationSteps: A, workers: W } = setup.spec.training;
    list.push(
      `Each step runs ${setup.microBatches} of the ${setup.wantedMicroBatches} micro-batches (${A} accumulation step${A === 1 ? "" : "s"} × ${W} worker${W === 1 ? "" : "s"}); activations and their gradients are measured on the first.` +
        (setup.microBatches < setup.wantedMicroBatches
          ? setup.microBatches > 1
            ? ` The weight-gradient sums are scaled to the size of the sum of all ${setup.wantedMicroBatches}: the part the micro-batches run share adds in proportion to the count, the rest as independent noise (√ of the count).`
            : ` The weight-gradient sums are multiplied by √(${setup.wantedMicroBatches}/${setup.microBatches}), taking the missing micro-batches as independent.`
          : ""),
    );
  }
  const optimizer = setup.spec.training.optimizer;
  if (steps > 0 && (optimizer.kind === "adam" || optimizer.kind === "adamw")) {
    const states = setup.formats.optimizerStates.name;
    const held = setup.round ? `, with ε held in ${states} too (${numberWords(optimizer.epsilon)} → ${numberWords(setup.epsilon)})` : "";
    list.push(
      `Adam's update lr·m̂/(√v̂ + ε) is worked out in binary64 from the moments as stored${setup.round ? ` in ${states}` : ""}${held}` +
        (setup.round && setup.epsilon === 0 ? "; where a second moment flushed to 0 the update divides by zero, and the weight becomes infinite or NaN." : "."),
    );
  }
  if (shrunk) list.push("The network was shrunk for speed; see the list of changes. Predictions compared with it are made for the shrunk network.");
  list.push("A simulation samples a few random draws; it is a second opinion, not a guarantee. Confirm with a short real training run.");
  return list;
}
