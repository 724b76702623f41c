/**
 * Shrinking a spec for a faster simulation, and estimating the memory a simulation needs.
 *
 * Shrinking divides widths, batch, positions, classes or image size by factors. Widths shrink every fan-in, so
 * initialisations whose variance follows the fan-in (He, Glorot, LeCun, orthogonal) keep every layer's gain
 * fan_in·var_w by themselves; fixed-scale initialisations (normal std, uniform limit) are multiplied by
 * √(fan-in ratio) so that they keep it too. Everything else the mean-field model depends on (depth, activations,
 * multipliers, norms) is left alone. The shrunk spec is a network in its own right: predictions for it come from
 * the same analytic rules, so comparing them with the simulation still tests the model.
 */
import { buildGraph, forwardOrder, sampleElements, type Graph, type GraphLayer } from "../graph/index.js";
import type { InitSpec, LayerSpec, NetworkSpec } from "../spec/types.js";
import { SimulationTooLarge, type ShrinkFactors, type ShrinkReport } from "./types.js";

/** No shrinking. */
export const NO_SHRINK: ShrinkFactors = { width: 1, batch: 1, positions: 1, classes: 1, image: 1 };

/** Fill in missing factors with 1 and check the given ones (whole numbers ≥ 1). */
export function shrinkFactors(partial: Partial<ShrinkFactors> = {}): ShrinkFactors {
  const out = { ...NO_SHRINK, ...partial };
  for (const [key, value] of Object.entries(out)) {
    if (!Number.isInteger(value) || value < 1) throw new RangeError(`shrink ${key} must be a whole number ≥ 1, got ${String(value)}`);
  }
  return out;
}

const div = (n: number, f: number): number => Math.max(1, Math.round(n / f));

/** The spec node that produces the network's output features (the last dense, walking back from the end). */
function outputLayer(layers: readonly LayerSpec[]): LayerSpec | undefined {
  for (let i = layers.length - 1; i >= 0; i--) {
    const layer = layers[i]!;
    if (layer.family === "dense" || layer.family === "conv2d") return layer;
    if (layer.family === "activation" || layer.family === "dropout" || layer.family === "flatten" || layer.family.endsWith("norm")) continue;
    return undefined;
  }
  return undefined;
}

function usesBatchNorm(spec: NetworkSpec): boolean {
  const has = (list: readonly LayerSpec[]): boolean =>
    list.some((l) => l.family === "batch-norm" || (l.family === "residual" && has(l.branch)) || (l.family === "repeat" && has(l.layers)));
  return has(spec.layers) || Object.values(spec.blocks).some(has);
}

function scaleInit(init: InitSpec, factor: number): InitSpec {
  if (init.kind === "normal") return { ...init, std: init.std * factor };
  if (init.kind === "uniform") return { ...init, limit: init.limit * factor };
  return init;
}

const fixedScale = (init: InitSpec): boolean => init.kind === "normal" || init.kind === "uniform";

/**
 * Shrink a spec by the given factors. Returns the new spec (the input is not modified) and the list of changes
 * in plain sentences.
 */
export function shrinkSpec(spec: NetworkSpec, partial: Partial<ShrinkFactors> = {}): { spec: NetworkSpec; report: ShrinkReport } {
  const f = shrinkFactors(partial);
  const shrunk = Object.values(f).some((v) => v > 1);
  if (!shrunk) return { spec, report: { factors: f, changes: [], warnings: [], shrunk: false } };
  const changes: string[] = [];
  const warnings: string[] = [];
  const out = outputLayer(spec.layers);
  // what each kind of width became, distinct "from → to" pairs in the order met, so the report says it
  const sizes = new Map<string, Map<string, [number, number]>>();
  const record = (kind: string, from: number, to: number): void => {
    const seen = sizes.get(kind) ?? new Map<string, [number, number]>();
    seen.set(`${from}`, [from, to]);
    sizes.set(kind, seen);
  };
  const size = (kind: string, from: number, factor: number): number => {
    const to = div(from, factor);
    if (factor > 1) record(kind, from, to);
    return to;
  };
  // pools whose window covers their whole input image (a global pool) in every use: they keep covering it when the
  // image shrinks, as their window shrinks with it; a local pool keeps its window
  const globalPools = new Set<LayerSpec>();
  // the full-size network, built once: the global pools here, the fan-ins of the initialisations below
  const before = buildGraph(spec);
  if (f.image > 1) {
    if (before.ok) {
      const local = new Set<LayerSpec>();
      for (const layer of forwardOrder(before.graph)) {
        const s = layer.spec;
        if ((s.family !== "average-pool" && s.family !== "max-pool") || layer.input.layout !== "image") continue;
        if (s.size >= layer.input.height && s.size >= layer.input.width) globalPools.add(s);
        else local.add(s);
      }
      for (const s of local) globalPools.delete(s);
    }
  }
  const globalCopies = new Map<LayerSpec, number>();
  const originals = new Map<LayerSpec, LayerSpec>();
  const cloneList = (list: readonly LayerSpec[]): LayerSpec[] => list.map(cloneLayer);
  function cloneLayer(layer: LayerSpec): LayerSpec {
    let copy: LayerSpec;
    switch (layer.family) {
      case "dense": {
        const width = layer !== out ? size("dense widths", layer.width, f.width) : spec.training.loss.kind === "cross-entropy" ? div(layer.width, f.classes) : layer.width;
        copy = { ...layer, width };
        break;
      }
      case "conv2d":
        copy = { ...layer, channels: layer === out ? layer.channels : size("conv channels", layer.channels, f.width) };
        break;
      case "embedding":
        copy = { ...layer, width: size("embedding widths", layer.width, f.width) };
        break;
      case "attention":
        copy = { ...layer, heads: size("attention heads", layer.heads, f.width) };
        break;
      case "gated-feed-forward":
        copy = { ...layer, hidden: size("gated hidden widths", layer.hidden, f.width) };
        break;
      case "residual":
        copy = { ...layer, branch: cloneList(layer.branch) };
        break;
      case "repeat":
        copy = { ...layer, layers: cloneList(layer.layers) };
        break;
      case "average-pool":
      case "max-pool":
        // a global pool takes a window of 1 for now: its size is its input's once the shrunk network is built
        copy = globalPools.has(layer) ? { ...layer, size: 1, stride: 1 } : { ...layer };
        if (copy.size !== layer.size) globalCopies.set(copy, layer.size);
        break;
      default:
        copy = { ...layer };
    }
    originals.set(copy, layer);
    return copy;
  }
  // fromEntries defines own properties: an assignment to a block named __proto__ would set the prototype instead
  const blocks: Record<string, LayerSpec[]> = Object.fromEntries(Object.entries(spec.blocks).map(([name, list]) => [name, cloneList(list)]));
  const training = { ...spec.training, batch: div(spec.training.batch, f.batch) };
  if (training.loss.kind === "cross-entropy" && f.classes > 1) {
    training.loss = { ...training.loss, classes: div(training.loss.classes, f.classes) };
  }
  let input = spec.input;
  if (input.kind === "features") input = { ...input, features: size("input features", input.features, f.width), positions: div(input.positions, f.positions) };
  else if (input.kind === "tokens") input = { ...input, positions: div(input.positions, f.positions) };
  else input = { ...input, height: div(input.height, f.image), width: div(input.width, f.image) };
  const result: NetworkSpec = { ...spec, input, training, blocks, layers: cloneList(spec.layers) };
  if (globalCopies.size > 0) {
    // each global pool covers its shrunk input image whole (the smallest side where a block reuses it), whatever the
    // image factor did to the sizes in between (a factor that does not divide them rounds)
    const trial = buildGraph(result);
    const sides = new Map<LayerSpec, number>();
    if (trial.ok) {
      for (const layer of forwardOrder(trial.graph)) {
        if (!globalCopies.has(layer.spec) || layer.input.layout !== "image") continue;
        const side = Math.min(layer.input.height, layer.input.width);
        sides.set(layer.spec, Math.min(side, sides.get(layer.spec) ?? side));
      }
    }
    for (const [copy, from] of globalCopies) {
      const to = sides.get(copy) ?? div(from, f.image);
      const pool = copy as LayerSpec & { size: number; stride: number };
      pool.size = to;
      pool.stride = to;
      record("global pool windows", from, to);
    }
  }

  // keep fan_in·var_w for fixed-scale initialisations (normal std, uniform limit): multiply by √(fan-in ratio)
  const after = buildGraph(result);
  let rescaled = 0;
  if (before.ok && after.ok) {
    const fanIns = new Map<string, Map<string, number>>();
    for (const layer of forwardOrder(before.graph)) fanIns.set(layer.name, new Map(layer.weights.map((w) => [w.name, w.fanIn])));
    // an init is shared by several weights of a layer (query, key, value) and by every repetition of a block:
    // scale each init field of each spec node once
    const done = new Set<string>();
    const nodeIds = new Map<LayerSpec, number>();
    for (const layer of forwardOrder(after.graph)) {
      if (layer.family === "embedding") continue;
      const old = fanIns.get(layer.name);
      if (old === undefined) continue;
      const node = layer.spec as LayerSpec & { init?: InitSpec; outputInit?: InitSpec };
      if (!nodeIds.has(node)) nodeIds.set(node, nodeIds.size);
      for (const w of layer.weights) {
        const ratio = (old.get(w.name) ?? w.fanIn) / w.fanIn;
        if (ratio === 1 || w.init === undefined || !fixedScale(w.init)) continue;
        const isOutput = (w.name === "output" || w.name === "down") && "outputInit" in node && node.outputInit !== undefined;
        const field = isOutput ? "outputInit" : "init";
        const key = `${nodeIds.get(node)}:${field}`;
        if (done.has(key)) continue;
        done.add(key);
        const current = node[field];
        if (current === undefined) continue;
        (node as unknown as Record<string, unknown>)[field] = scaleInit(current, Math.sqrt(ratio));
        rescaled++;
      }
    }
  }

  if (f.width > 1) {
    // each kind's sizes before → after (÷ rounded to the nearest whole number, at least 1), so an uneven factor shows what it did
    const order = ["input features", "dense widths", "conv channels", "embedding widths", "attention heads", "gated hidden widths"];
    // widths only: the global pools' windows shrink with the image, and the image's line names them
    const sorted = [...sizes].filter(([kind]) => order.includes(kind)).sort(([a], [b]) => order.indexOf(a) - order.indexOf(b));
    const kinds = sorted.map(([kind, seen]) => {
      const pairs = [...seen.values()];
      const listed = pairs.slice(0, 4).map(([from, to]) => `${from} → ${to}`).join(", ");
      return `${kind}${kind === "attention heads" ? " (head width kept)" : ""} ${listed}${pairs.length > 4 ? ` and ${pairs.length - 4} more` : ""}`;
    });
    changes.push(
      `widths ÷${f.width}, rounded to the nearest whole number: ${kinds.length > 0 ? kinds.join("; ") : "no width to shrink"}` +
        (out !== undefined ? `; the output layer "${out.name}" keeps its width${spec.training.loss.kind === "cross-entropy" && f.classes > 1 ? " up to the class shrink" : ""}` : ""),
    );
    const ones = sorted.flatMap(([kind, seen]) => [...seen.values()].filter(([from, to]) => from > 1 && to === 1).map(([from]) => `${kind} ${from} → 1`));
    // one unit, or one head, is a different network from the full-size one: its comparison says little about the original
    if (ones.length > 0) warnings.push(`widths ÷${f.width} leave sizes of 1 (${ones.join(", ")}): a one-unit layer or a single head behaves unlike the full-size network; a smaller factor keeps the comparison meaningful`);
  }
  if (rescaled > 0) changes.push(`fixed-scale initialisations (normal std, uniform limit) of ${rescaled} layer spec${rescaled === 1 ? "" : "s"} multiplied by √(fan-in ratio), so every layer keeps its gain fan_in·var_w`);
  if (training.batch !== spec.training.batch) changes.push(`batch ${spec.training.batch} → ${training.batch}`);
  if (training.batch === 1 && spec.training.batch > 1) {
    warnings.push(`batch ${spec.training.batch} → 1: one sample per step${usesBatchNorm(spec) ? "; batch norm over one sample's features sets them to their mean" : ""}, unlike the full-size run`);
  }
  if (spec.input.kind !== "image" && input.kind !== "image" && input.positions !== spec.input.positions) {
    changes.push(`positions ${spec.input.positions} → ${input.positions}`);
  }
  if (f.classes > 1 && spec.training.loss.kind === "cross-entropy") {
    const classes = (training.loss as { classes: number }).classes;
    // softmax over one class is 1 whatever the score: the loss is 0 and no gradient flows (own algebra: ∂/∂z of −log 1)
    if (classes === 1 && spec.training.loss.classes > 1) {
      throw new RangeError(`shrinking classes ${spec.training.loss.classes} by ${f.classes} leaves 1 class, whose cross-entropy is 0 with no gradient; give a classes factor of at most ${Math.floor(spec.training.loss.classes / 2)}`);
    }
    changes.push(`classes ${spec.training.loss.classes} → ${(training.loss as { classes: number }).classes}`);
  }
  if (f.image > 1 && spec.input.kind === "image" && input.kind === "image") {
    const pools = [...(sizes.get("global pool windows")?.values() ?? [])].map(([from, to]) => `${from} → ${to}`);
    changes.push(`image ${spec.input.height}×${spec.input.width} → ${input.height}×${input.width}` + (pools.length > 0 ? `; windows of the pools that cover the whole image ${pools.join(", ")}` : ""));
  }
  return { spec: result, report: { factors: f, changes, warnings, shrunk: true } };
}

/** Elements held by one layer's forward state and its gradients, besides its output. */
function innerElements(layer: GraphLayer, batch: number): number {
  const s = layer.spec;
  const input = layer.input;
  if (s.family === "attention" && input.layout === "features") {
    const P = input.positions;
    const projections = 4 * batch * P * s.heads * s.headWidth;
    const matrices = batch * s.heads * P * P;
    // projections and their gradients; logits, probabilities, their gradients and the mask (1 byte ≈ 1/8)
    return 2 * projections + 4.2 * matrices;
  }
  if (s.family === "gated-feed-forward" && input.layout === "features") return 8 * batch * input.positions * s.hidden;
  if (s.family === "conv2d" && input.layout === "image" && layer.output.layout === "image") {
    // im2col columns of one image, twice (forward and backward)
    return 2 * input.channels * s.kernel * s.kernel * layer.output.height * layer.output.width;
  }
  return 0;
}

/**
 * Bytes a simulation of this graph needs, roughly: every layer's output and its kept state twice (forward values
 * and their gradients), inner tensors, the weights with their gradients, sums and optimizer states, and the loss
 * gradient; 25% on top for temporaries.
 */
export function estimateMemory(graph: Graph, steps: number): number {
  let activations = 0;
  let weights = 0;
  let largest = 0;
  for (const layer of forwardOrder(graph)) {
    const out = graph.batch * sampleElements(layer.output);
    activations += 3 * out + innerElements(layer, graph.batch);
    largest = Math.max(largest, out);
    for (const w of layer.weights) weights += w.elements;
  }
  // weights, their gradient, the gradient sum and one spare; with steps also master weights and two moments
  const weightCopies = steps > 0 ? 7 : 4;
  return 8 * 1.25 * (activations + weightCopies * weights + 4 * largest);
}

/** The memory a spec needs after shrinking by `factors`, or Infinity when the shrunk spec does not build. */
export function memoryAfterShrink(spec: NetworkSpec, factors: Partial<ShrinkFactors>, steps: number): number {
  const shrunk = shrinkSpec(spec, factors).spec;
  const g = buildGraph(shrunk);
  return g.ok ? estimateMemory(g.graph, steps) : Infinity;
}

/** The smallest power-of-two factor f (width, batch and positions all ÷f) whose run fits `limit`, up to 1024. */
export function suggestShrink(spec: NetworkSpec, limit: number, steps: number): number | undefined {
  for (let f = 2; f <= 1024; f *= 2) {
    if (memoryAfterShrink(spec, { width: f, batch: f, positions: f }, steps) <= limit) return f;
  }
  return undefined;
}

/**
 * Two byte counts in GiB, each with one decimal (two below 1 GiB) and more for both until the need reads larger than
 * the limit: a need just above the limit reads "4.04 GiB ... the limit of 4.00 GiB", not "4.0 GiB ... 4.0 GiB". At
 * most 9 more (2^-30 GiB is one byte).
 */
function gibApart(need: number, limit: number): [string, string] {
  const decimals = (bytes: number, extra: number): number => (bytes < 2 ** 30 ? 2 : 1) + extra;
  let extra = 0;
  while (extra < 9 && Number((need / 2 ** 30).toFixed(decimals(need, extra))) <= Number((limit / 2 ** 30).toFixed(decimals(limit, extra)))) extra++;
  return [`${(need / 2 ** 30).toFixed(decimals(need, extra))} GiB`, `${(limit / 2 ** 30).toFixed(decimals(limit, extra))} GiB`];
}

/** Throw SimulationTooLarge when the graph's estimate exceeds the limit, naming the memory and a shrink that fits. */
export function checkMemory(original: NetworkSpec, graph: Graph, steps: number, limit: number, shrunk: boolean): number {
  const need = estimateMemory(graph, steps);
  if (need <= limit) return need;
  const suggestion = suggestShrink(original, limit, steps);
  const gib = (b: number): string => `${(b / 2 ** 30).toFixed(b < 2 ** 30 ? 2 : 1)} GiB`;
  const [needText, limitText] = gibApart(need, limit);
  const advice =
    suggestion !== undefined
      ? `; --shrink ${suggestion} (widths, batch and positions ÷${suggestion}) would need about ${gib(memoryAfterShrink(original, { width: suggestion, batch: suggestion, positions: suggestion }, steps))}`
      : "; even shrinking widths, batch and positions by 1024 does not fit";
  throw new SimulationTooLarge(
    `simulating ${graph.name}${shrunk ? " (as shrunk)" : ""} would need about ${needText} of memory, more than the limit of ${limitText}${advice}`,
    need,
    limit,
    suggestion,
  );
}
