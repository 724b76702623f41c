/**
 * The tensor graph of one training step: the network spec with `use` and `repeat` expanded, every layer in
 * forward order with its per-sample input and output shapes, and every weight with its shape, fan-in, fan-out
 * and initial variance. Plain JSON-able data: the magnitude engine and the simulator both walk it.
 */
import type {
  InitSpec,
  LayerFamily,
  LayerSpec,
  LossSpec,
  RepeatLayer,
  SpecPath,
  UseBlockLayer,
} from "../spec/types.js";

/** The layer families that remain once `use` and `repeat` are expanded. */
export type GraphFamily = Exclude<LayerFamily, "use" | "repeat">;

/** A layer spec of a concrete family (no block references, no repeats). */
export type ConcreteLayerSpec = Exclude<LayerSpec, UseBlockLayer | RepeatLayer>;

/**
 * The shape of one sample as it flows between layers (the batch dimension is left out):
 * token ids at `positions`; `features` real values at each of `positions` positions; or a channels-first image.
 */
export type SampleShape =
  | { layout: "tokens"; positions: number }
  | { layout: "features"; positions: number; features: number }
  | { layout: "image"; channels: number; height: number; width: number };

/** How the elements of a weight are drawn at initialisation. */
export type WeightDistribution = "normal" | "uniform" | "constant" | "zeros";

/** One weight tensor of a layer (a dense matrix, a conv kernel, a bias, a norm gain, an attention projection). */
export interface GraphWeight {
  /**
   * which weight of the layer: "weight" and "bias" for dense/conv2d; "table" for embedding; "gain"/"bias" for
   * norms; "query"/"key"/"value"/"output" for attention; "gate"/"up"/"down" for gated feed-forward
   */
  name: string;
  /** full shape, output dimension first (dense [out, in], conv2d [out, in, k, k], embedding [vocabulary, width]) */
  shape: number[];
  elements: number;
  /** inputs summed into one output of this weight (dense in-features; conv in-channels × k²); 1 for biases and gains */
  fanIn: number;
  /** outputs one input feeds (dense out-features; conv out-channels × k²); 1 for biases and gains */
  fanOut: number;
  /** variance of one element at initialisation (InitSpec rules; 0 for zero-initialised biases) */
  variance: number;
  /** for "constant" weights (norm gains): the value of every element */
  value?: number;
  distribution: WeightDistribution;
  /** the spec's initialisation, when the weight has one (biases and gains have none) */
  init?: InitSpec;
}

/** One layer of the expanded network. */
export interface GraphLayer {
  /** position in forward order: a residual layer comes after the layers of its branch (the add happens last) */
  index: number;
  /** dotted unique name: `encoder.3.attention` (repeat `encoder`, iteration 3, layer `attention`) */
  name: string;
  family: GraphFamily;
  /** the spec node the layer came from (shared by every repetition of a block) */
  spec: ConcreteLayerSpec;
  /** where the spec node sits in the YAML document */
  path: SpecPath;
  /** per-sample shapes */
  input: SampleShape;
  output: SampleShape;
  /** the layer's main weight's fan-in and fan-out, when it has weights */
  fanIn?: number;
  fanOut?: number;
  weights: GraphWeight[];
  /** residual layers: the branch, expanded (its input is this layer's input, its output is added to it) */
  branch?: GraphLayer[];
  /** number of residual layers enclosing this one */
  depth: number;
}

/** The expanded network of one spec. */
export interface Graph {
  name: string;
  /** samples per step on one worker */
  batch: number;
  input: SampleShape;
  /** shape of the last layer's output */
  output: SampleShape;
  /** top-level layers in forward order; residual layers hold their branches */
  layers: GraphLayer[];
  /** number of layers including those inside branches */
  layerCount: number;
  loss: LossSpec;
}

/** A problem found while building the graph, with the spec path of the offending node. */
export interface GraphIssue {
  path: SpecPath;
  message: string;
}

/** buildGraph's result: a graph, or the list of problems that prevent one. */
export type GraphResult = { ok: true; graph: Graph } | { ok: false; issues: GraphIssue[] };
