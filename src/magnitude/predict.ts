/**
 * The magnitude engine: predicts the magnitude profile of every tensor of one training step, forward and
 * backward, at initialisation and at the end of the training horizon (SCIENCE.md §2.10):
 * forward second moments layer by layer (src/ops/<family>/analytic.ts), the loss seed, backward second moments,
 * weight gradients as sums over batch and positions, the finite-width spread, and element maxima.
 */
import { batchShape, positionCount, sameShape, sampleElements } from "../graph/shape.js";
import type { Graph, GraphLayer, GraphWeight, SampleShape } from "../graph/types.js";
import { activationMoments } from "../ops/activation/moments.js";
import { fmt, ruleRecords, initSource, maybeWeight, textOf } from "../ops/common.js";
import { residualBranchSeed, type ResidualStash } from "../ops/residual/analytic.js";
import { ruleFor } from "../ops/registry.js";
import type { BranchResults, Factor, Gradient, InnerGradient, InnerTensor, OpContext, OpHazard, Signal, WeightGradientMoment } from "../ops/types.js";
import type { LayerSpec, NetworkSpec } from "../spec/types.js";
import { lossSeed, MIXED_ROWS } from "./loss.js";
import { medianFactor, plainProfile, profileOf } from "./profile.js";
import { carriedMeanSquare, predictionRangeError } from "./range.js";
import type {
  HazardKind,
  HazardSite,
  LedgerEntry,
  MagnitudeProfile,
  PlanSlot,
  Prediction,
  TensorPrediction,
  TensorRole,
} from "./types.js";

/** Options of predict(). */
export interface PredictOptions {
  /** multiply the loss by this before the backward pass (a loss scale S multiplies every gradient by S); default 1 */
  lossScale?: number;
}

/** A node of the ledger tree: tensors share the factors they have in common; wording is resolved on demand. */
interface LedgerNode {
  layer: string;
  factor: Factor;
  parent: LedgerNode | null;
}

/**
 * What a prediction's ledgers are worked out from: the start pass is run again with its ledger nodes linked when a
 * tensor's ledger is first read (the same operations in the same order, so the same factors as a pass that linked
 * them at once). The graph and spec are the ones predicted, kept by reference: changing them afterwards changes the
 * ledgers read later.
 */
interface LedgerSource {
  graph: Graph;
  spec: NetworkSpec;
  lossScale: number;
  /** whether each tensor has its ledger as an own property (predict), or only through its class (predictForCheck) */
  own: boolean;
  /** every start tensor's node, in emission order, once worked out */
  nodes: (LedgerNode | null)[] | undefined;
}

interface PhaseResult {
  tensors: PredictedTensor[];
  hazards: HazardSite[];
  /** which weight gradient each weight made (check's prediction only: see {@link WeightPairing}) */
  pairing: WeightPairing | undefined;
  /** the last weight profiles made, which the end pass reuses where its weights are the start's (check's prediction only) */
  weights: WeightProfiles | undefined;
  /** the start pass's forward, which the end pass takes as its own where the two are the same (see {@link SameForward}) */
  forward: SameForward | undefined;
}

/**
 * The start pass's forward as the end pass would compute it again: with weight growth 1 every weight has the same
 * variance at both ends (a zero-initialised bias drifts by (growth − 1)·rms = 0; prepareWeights), and the forward rules
 * of these families read nothing else of the phase (a residual block's rule does: none there), so the end pass's
 * forward tensors and sites would get profiles of the very numbers of the start's. Only for check's own prediction
 * ({@link predictForCheck}), whose start and end profiles may be one object, as its weights' already are; {@link
 * predict} gives each its own. The end pass starts from the start's stashes and output at the loss.
 */
interface SameForward {
  /** tensors and sites the forward made (the network's input first), which the end pass leaves at their start profiles */
  tensors: number;
  sites: number;
  output: Signal;
  /** every layer's stash, which the start's backward then leaves in place (its rules read a stash, never write it) */
  stash: unknown[];
}

/** Families whose forward rule is the same at both ends of the horizon when the weights do not grow (see SameForward). */
const SAME_FORWARD: ReadonlySet<string> = new Set(["dense", "activation", "conv2d", "batch-norm", "max-pool", "average-pool", "flatten", "dropout"]);

/** Whether check's prediction of this network can take the start's forward for the end's ({@link SameForward}). */
function sameForward(graph: Graph, spec: NetworkSpec): boolean {
  if (spec.training.horizon.weightGrowth !== 1) return false;
  const layers = graph.layers;
  for (let i = 0; i < layers.length; i++) {
    const layer = layers[i] as GraphLayer;
    if (layer.branch !== undefined || !SAME_FORWARD.has(layer.family)) return false;
  }
  return true;
}

/**
 * The last profile made for the weight at each place in its layer (main weight, bias, ...), with the numbers it was made
 * from. A stack of like layers has like weights (one variance and size per place: 500 dense layers, 2 profiles where
 * each made 1,000 per pass), and the end pass's weights are the start's where they do not grow; a profile is a function
 * of these numbers alone (profileFrom), so reusing it reports the same numbers. Only for check's own prediction
 * ({@link predictForCheck}), which nothing edits: {@link predict} gives every tensor its own profiles, so a caller that
 * edits one in place before judging it moves that tensor only.
 */
interface WeightProfileSlot {
  q: number;
  zero: boolean;
  shape: "constant" | "uniform" | "gaussian";
  elements: number;
  profile: MagnitudeProfile;
}
type WeightProfiles = (WeightProfileSlot | undefined)[];
const WEIGHT_PROFILE_SLOTS = 4;

/**
 * Check's own prediction, start pass: each weight tensor's index in emission order, the index of the last weight gradient
 * made of that weight (−1 for none), and each layer's first weight's place in those lists. The optimizer check pairs every
 * weight with its gradient (src/scale/optimizer.ts weightPairs, by layer name and id suffix); the walk that made both
 * knows the pairs, and {@link knownWeightPairs} gives them without the search.
 */
interface WeightPairing {
  weights: number[];
  gradients: number[];
  first: number[];
}

const SLOT: Record<TensorRole, PlanSlot> = {
  activation: "activations",
  "pre-activation": "activations",
  "activation-gradient": "gradients",
  weight: "weights",
  "weight-gradient": "gradients",
  "optimizer-state": "optimizerStates",
  update: "weights",
  loss: "activations",
};

/** The end pass reports profiles only: its records carry no shape (the start pass's is reported). */
const NO_SHAPE: number[] = [];

function chain(node: LedgerNode | null, layer: string, factors: readonly Factor[], build: boolean): LedgerNode | null {
  if (!build) return null;
  let current = node;
  // indexed loops throughout the walk: a for-of puts every call of its body in a try block (iterator close),
  // which makes each optimising compile of the walk larger
  for (let i = 0; i < factors.length; i++) current = { layer, factor: factors[i] as Factor, parent: current };
  return current;
}

function materialise(node: LedgerNode | null, profile: MagnitudeProfile): LedgerEntry[] {
  const out: LedgerEntry[] = [];
  for (let n = node; n !== null; n = n.parent) {
    const f = n.factor;
    out.push({ layer: n.layer, rule: textOf(f.rule), log2Factor: f.ratio > 0 ? 0.5 * Math.log2(f.ratio) : -Infinity, source: f.source });
  }
  out.reverse();
  // the factors above give √meanSquare; two closing entries bring it to the reported rms
  const meanSquare = profile.meanSquare ?? 0;
  const keep = 1 - profile.zeroFraction;
  if (profile.zeroFraction > 0 && keep > 0 && meanSquare > 0) {
    out.push({
      layer: "(profile)",
      rule: `exact zeros: the nonzero ${Number((keep * 100).toPrecision(3))}% carry the whole second moment`,
      log2Factor: -0.5 * Math.log2(keep),
      source: "definition of rms over nonzero elements",
    });
  }
  const spread = profile.log2Spread;
  if (spread > 0) {
    const variance = (spread * 2 * Math.LN2) ** 2;
    out.push({
      layer: "(profile)",
      rule: `finite width: the median draw sits e^(−V/4) below the mean, V = ${fmt(variance)}`,
      log2Factor: -variance / 4 / Math.LN2,
      source: "Hanin & Nica 2019, log-normal norm",
    });
  }
  return out;
}

class Phase {
  /** the start pass's tensors; the end pass fills in their `end` profiles in the same order */
  readonly tensors: PredictedTensor[];
  /** tensors emitted so far by the end pass */
  private emitted = 0;
  /** the start pass's sites; the end pass completes their `end` in the same order */
  readonly hazards: HazardSite[];
  /** sites completed so far by the end pass */
  private sited = 0;

  /** each layer's stash by layer index (the start's, where the end pass takes its forward: see SameForward) */
  stash: unknown[] = [];
  /** whether the backward walk leaves each stash in place, for an end pass that takes this forward (see SameForward) */
  keepStash = false;
  readonly ctx: OpContext;
  private readonly endVariance = new Map<GraphWeight, number>();
  /**
   * the profile a backward sum made of the gradient at its layer's input, for that gradient's tensor (see backward), and
   * that gradient: two fields, not a pair object per layer
   */
  private madeOf: Gradient | undefined = undefined;
  private madeProfile: MagnitudeProfile | undefined = undefined;
  /** the current layer's weight gradients and their per-micro-batch profiles (see perMicroBatch) */
  private readonly summed = new LayerPairs<WeightGradientMoment, MagnitudeProfile>();
  /**
   * the current layer's weight gradients and their tensor ids (start pass only): a backward sum that makes one names its
   * tensor by the very id string, not a copy of it
   */
  private readonly gradientIds = new LayerPairs<WeightGradientMoment, string>();
  /** each layer's "<layer>/" by layer index, made by the forward walk (start pass only) */
  private readonly prefixes: string[] = [];

  /** whether the start pass links its ledger nodes: only when a ledger is read ({@link LedgerSource}) */
  readonly ledger: boolean;
  /** see {@link WeightProfiles}: the start pass's, carried on into the end pass; none where every tensor keeps its own */
  readonly weightProfiles: WeightProfiles | undefined;
  /** see {@link WeightPairing}: the start pass of check's own prediction only */
  readonly pairing: WeightPairing | undefined;

  constructor(
    readonly graph: Graph,
    readonly spec: NetworkSpec,
    readonly phase: "start" | "end",
    readonly build: boolean,
    readonly lossScale: number,
    startTensors?: PredictedTensor[],
    readonly source: LedgerSource | null = null,
    startHazards?: HazardSite[],
    weightProfiles?: WeightProfiles,
  ) {
    this.tensors = startTensors ?? [];
    this.weightProfiles = weightProfiles ?? (source !== null && !source.own ? [] : undefined);
    this.pairing = phase === "start" && build && source !== null && !source.own ? { weights: [], gradients: [], first: [] } : undefined;
    this.hazards = startHazards ?? [];
    // a pass with a source leaves the ledger to it; a pass without one (the source's own) links the nodes
    this.ledger = build && source === null;
    const growth = phase === "end" ? spec.training.horizon.weightGrowth : 1;
    const growth2 = growth * growth;
    this.ctx = {
      batch: graph.batch,
      phase,
      ledger: build && source === null,
      details: build,
      // only zero-initialised weights have an end variance of their own (prepareWeights), and only at the end: the
      // others skip the look-up (w.variance · 1 is w.variance itself)
      variance: phase === "end" ? (w) => (w.distribution === "zeros" ? (this.endVariance.get(w) ?? w.variance * growth2) : w.variance * growth2) : (w) => w.variance,
      moments: activationMoments,
      // records the rules fill in place of new results, hazards and moments: this walk reads each rule's before its next
      // rule call and keeps none of them
      ruleRecords: ruleRecords(),
    };
  }

  /** Biases start at zero; at the end they are taken to have drifted as far as the layer's weights grew. */
  private prepareWeights(layer: GraphLayer): void {
    const growth = this.spec.training.horizon.weightGrowth;
    const weights = layer.weights;
    // a layer's main weight comes first: the loop starts past it, so it is present whenever the loop runs
    const main = weights[0] as GraphWeight;
    for (let i = 1; i < weights.length; i++) {
      const w = weights[i] as GraphWeight;
      if (w.distribution === "zeros") {
        const mainRms = main.distribution === "constant" ? Math.abs(main.value ?? 0) : Math.sqrt(main.variance);
        this.endVariance.set(w, (Math.max(growth - 1, 0) * mainRms) ** 2);
      }
    }
  }

  #sumDetail: string | undefined;

  /** The gradient-sum hazard's words after the tensor id (the same for every weight of a spec). */
  private sumDetail(): string {
    const training = this.spec.training;
    const W = training.workers;
    this.#sumDetail ??= `: ${counted(training.accumulationSteps, "accumulation step")} × ${counted(W, "worker")} summed${training.workerGradients === "average" ? `, then divided by ${W}` : ""}`;
    return this.#sumDetail;
  }

  #combineRule: string | undefined;

  /** The ledger rule of combining micro-batch and worker gradients (the same for every weight of a spec: made once). */
  private combineRule(): string {
    const training = this.spec.training;
    this.#combineRule ??= `${counted(training.accumulationSteps, "accumulation step")} × ${counted(training.workers, "worker")}, gradients ${training.workerGradients}d`;
    return this.#combineRule;
  }

  /**
   * The start pass creates the tensor; the end pass (same operations, same order) sets its end profile. The fields
   * come one by one: no record object per tensor, and the end pass reads only the three it checks.
   */
  emit(
    id: string,
    layer: string,
    layerIndex: number,
    family: TensorPrediction["family"],
    role: TensorRole,
    slot: PlanSlot,
    shape: number[],
    profile: MagnitudeProfile,
    ledger: LedgerNode | null,
  ): void {
    // a value that left binary64's range would reach the verdict as rms 0 or infinity: an input error instead
    if (!carriedMeanSquare(profile.meanSquare ?? 0)) this.outOfRange(layer, layerIndex, role, profile.meanSquare ?? 0);
    if (this.phase === "start") {
      this.tensors.push(new PredictedTensor(id, layer, layerIndex, family, role, slot, shape, profile, ledger, this.source, this.tensors.length));
      return;
    }
    const a = this.tensors[this.emitted++];
    if (a === undefined || layer !== a.layer || role !== a.role) this.disagree(a, layer);
    // nonzero at the start and exactly zero at the end is an underflow (weight growth is positive, and only a final
    // loss of 0 zeroes the gradients on purpose)
    if (profile.meanSquare === 0 && (a.start.meanSquare ?? 0) > 0 && this.spec.training.horizon.finalLoss !== 0) this.outOfRange(layer, layerIndex, role, 0);
    a.end = profile;
  }

  private outOfRange(layer: string, layerIndex: number, role: TensorRole, q: number): never {
    const path = layer === "input" ? ["input"] : layer === "loss" ? ["training", "loss"] : (layerPath(this.graph.layers, layerIndex) ?? []);
    throw predictionRangeError({ layer, role, path, phase: this.phase, lossScale: this.lossScale }, q);
  }

  private disagree(a: PredictedTensor | undefined, layer: string): never {
    throw new RangeError(`internal: start and end passes disagree at tensor ${a?.id ?? layer}`);
  }

  /**
   * The end pass's forward where it is the start's ({@link SameForward}): the forward tensors keep their start profile
   * as their end, each forward site's end is its start profiles, and the backward starts from the start's stashes.
   */
  takeForward(forward: SameForward): Signal {
    const layers = this.graph.layers;
    for (let i = 0; i < layers.length; i++) this.prepareWeights(layers[i] as GraphLayer);
    // each forward site's end record already holds its start profiles (newSite)
    this.emitted = forward.tensors;
    this.sited = forward.sites;
    this.stash = forward.stash;
    return forward.output;
  }

  /** Throws unless the end pass met every tensor and every site of the start pass. */
  finish(): void {
    if (this.phase !== "end") return;
    if (this.emitted !== this.tensors.length) {
      throw new RangeError(`internal: start and end passes disagree at tensor ${this.tensors[this.emitted]?.id ?? ""}`);
    }
    if (this.sited !== this.hazards.length) disagreeAtSite(this.sited, this.hazards[this.sited], undefined, undefined);
  }

  /**
   * The start pass adds its site; the end pass (same operations, same order) gives the start site at the same place
   * its `end`, with no site of its own.
   */
  site(site: HazardSite): void {
    this.hazards.push(site);
  }

  /**
   * The end pass's profiles of the next start site (see {@link site}), which must be of the same kind and layer: a
   * rule that sited differently in the two passes would otherwise give a site another's end. Written into the end record
   * made with the site (newSite).
   */
  siteEnd(kind: HazardKind, layer: string, input: MagnitudeProfile, output: MagnitudeProfile | undefined, backward = false): void {
    const index = this.sited++;
    const site = this.hazards[index];
    // a backward sum is told from its layer's forward sums of the same kind, which it would otherwise pass for
    if (site === undefined || site.kind !== kind || site.layer !== layer || (site.gradient === true) !== backward) disagreeAtSite(index, site, kind, layer, backward);
    const end = site.end as { input: MagnitudeProfile; output?: MagnitudeProfile };
    end.input = input;
    end.output = output;
  }

  /**
   * A layer's batch-first output shape (none in the end pass, whose records report no shape). In check's own prediction
   * (which nothing edits: see {@link WeightProfiles}) a run of tensors of one shape shares the last array made, as its
   * weights share their graph weight's: a stack of like layers (2,000 arrays per 1,000-layer prediction, kept with it)
   */
  outputShape(layer: GraphLayer): number[] {
    if (!this.build) return NO_SHAPE;
    if (this.weightProfiles === undefined) return batchShape(this.graph.batch, layer.output);
    // (the batch is the graph's, one for every layer: like sample shapes give like arrays)
    const last = this.lastSample;
    if (last !== undefined && sameShape(last, layer.output)) return this.lastShape;
    this.lastSample = layer.output;
    this.lastShape = batchShape(this.graph.batch, layer.output);
    return this.lastShape;
  }
  private lastSample: SampleShape | undefined = undefined;
  private lastShape: number[] = NO_SHAPE;

  /** `output`, `profile`, `elements`: a tensor's moments and the profile already made of them, for a site that shares them. */
  hazard(layer: GraphLayer, h: OpHazard, output?: Signal, profile?: MagnitudeProfile, elements?: number): void {
    const outputElements = h.outputElements ?? h.inputElements;
    const input = profileOf(h.input, h.inputElements);
    const out = h.output === undefined ? undefined : h.output === output && outputElements === elements ? profile : profileOf(h.output, outputElements);
    if (this.phase === "end") return this.siteEnd(h.kind, layer.name, input, out);
    this.opSite(layer, h, input, out, undefined, undefined);
  }

  // a layer's sum as a site
  private opSite(layer: GraphLayer, h: OpHazard, input: MagnitudeProfile, output: MagnitudeProfile | undefined, tensor: string | undefined, gradient: true | undefined): void {
    this.site(newSite(h.kind, layer.name, input, h.terms, h.guarded, this.build ? textOf(h.detail) : "", output, tensor, gradient, h.statistics));
  }

  weightRecords(layer: GraphLayer, prefix: string): void {
    const weights = layer.weights;
    const pairing = this.pairing;
    if (pairing !== undefined) pairing.first[layer.index] = pairing.weights.length;
    for (let i = 0; i < weights.length; i++) {
      this.weightRecord(layer, prefix, weights[i] as GraphWeight, i);
      if (pairing !== undefined) {
        pairing.weights.push(this.tensors.length - 1);
        pairing.gradients.push(-1);
      }
    }
  }

  private weightRecord(layer: GraphLayer, prefix: string, w: GraphWeight, place: number): void {
    const variance = this.ctx.variance(w);
    const constant = w.distribution === "constant";
    let q = variance;
    let zero = variance === 0;
    if (constant) {
      const growth = this.phase === "end" ? this.spec.training.horizon.weightGrowth : 1;
      const value = Math.abs(w.value ?? 0) * growth;
      q = value * value;
      zero = value === 0;
    }
    const shape = constant ? "constant" : w.distribution === "uniform" ? "uniform" : "gaussian";
    const elements = w.elements;
    const made = this.weightProfiles;
    const slot = made !== undefined && place < WEIGHT_PROFILE_SLOTS ? made[place] : undefined;
    let profile: MagnitudeProfile;
    if (slot !== undefined && slot.q === q && slot.zero === zero && slot.shape === shape && slot.elements === elements) profile = slot.profile;
    else {
      profile = plainProfile(q, zero ? 1 : 0, shape, 0, elements);
      if (made !== undefined && place < WEIGHT_PROFILE_SLOTS) made[place] = { q, zero, shape, elements, profile };
    }
    let node: LedgerNode | null = null;
    let id = "";
    if (this.build) {
      id = w.name === "weight" ? `${prefix}weight` : `${prefix}weight:${w.name}`;
      if (this.ledger && profile.rms > 0) node = weightNode(layer.name, w, variance, profile.rms);
    }
    this.emit(id, layer.name, layer.index, layer.family, "weight", "weights", w.shape, profile, node);
  }

  forward(layers: readonly GraphLayer[], input: Signal, node: LedgerNode | null): { output: Signal; node: LedgerNode | null; resets: boolean } {
    let signal = input;
    let current = node;
    let resets = false;
    for (let li = 0; li < layers.length; li++) {
      const layer = layers[li] as GraphLayer;
      // "<layer>/", the start of every id of the layer (made once, for the backward walk too; the end pass makes no ids)
      let prefix = "";
      if (this.build) this.prefixes[layer.index] = prefix = `${layer.name}/`;
      if (this.phase === "end") this.prepareWeights(layer);
      let branchResults: BranchResults = NO_BRANCH;
      if (layer.branch !== undefined) {
        const inner = this.forward(layer.branch, signal, current);
        const stashes: unknown[] = [];
        for (let b = 0; b < layer.branch.length; b++) stashes.push(this.stash[(layer.branch[b] as GraphLayer).index]);
        branchResults = { branchOutput: inner.output, branchResets: inner.resets, branchStashes: stashes };
      }
      const result = ruleFor(layer.family).forward(this.ctx, layer, signal, branchResults);
      this.stash[layer.index] = result.stash;
      this.weightRecords(layer, prefix);
      const inner = result.inner;
      for (let i = 0; i < inner.length; i++) this.innerTensor(layer, prefix, inner[i] as InnerTensor, current);
      current = chain(current, layer.name, result.factors, this.ledger);
      signal = result.output;
      // two features' covariance is carried through dense layers, activations, layer and RMS norms, dropout, residual
      // blocks and attention only
      if (signal.featureCovariance !== undefined && !CARRIES_COVARIANCE.has(layer.family)) {
        signal = { ...signal };
        delete signal.featureCovariance;
      }
      if ((signal.sequenceExcess !== undefined && !CARRIES_SEQUENCE.has(layer.family)) || (signal.sequenceLinear !== undefined && layer.family !== "gated-feed-forward")) {
        signal = { ...signal };
        if (!CARRIES_SEQUENCE.has(layer.family)) delete signal.sequenceExcess;
        if (layer.family !== "gated-feed-forward") delete signal.sequenceLinear;
      }
      // the spread of two samples' cosines is followed through dense layers, activations, norms and residual sums only
      if ((signal.correlationSquare !== undefined || signal.sharedLogVar !== undefined) && !CARRIES_COSINE.has(layer.family)) {
        signal = { ...signal };
        delete signal.correlationSquare;
        delete signal.sharedLogVar;
      }
      if (RESETS.has(layer.family) || (layer.family === "activation" && signal.shape === "log-normal")) resets = true;
      const elements = this.graph.batch * sampleElements(layer.output);
      const profile = profileOf(signal, elements);
      // a site whose output is the layer's own (a dense layer's sums) shares its profile: the same moments and count
      const hazards = result.hazards;
      for (let i = 0; i < hazards.length; i++) this.hazard(layer, hazards[i] as OpHazard, signal === result.output ? signal : undefined, profile, elements);
      this.emit(
        this.build ? prefix + result.role : "",
        layer.name,
        layer.index,
        layer.family,
        result.role,
        "activations",
        this.outputShape(layer),
        profile,
        current,
      );
    }
    return { output: signal, node: current, resets };
  }

  private innerTensor(layer: GraphLayer, prefix: string, inner: InnerTensor, node: LedgerNode | null): void {
    this.emit(
      this.build ? `${prefix}${inner.role}:${inner.suffix}` : "",
      layer.name,
      layer.index,
      layer.family,
      inner.role,
      "activations",
      inner.shape,
      profileOf(inner.signal, inner.elements),
      chain(node, layer.name, inner.factors, this.ledger),
    );
  }

  /** Walk layers backward from the gradient at their output; `seeded`: the last layer's output gradient is already reported. */
  backward(layers: readonly GraphLayer[], output: Gradient, node: LedgerNode | null, seeded: boolean, bottom: boolean): Gradient | undefined {
    let gradient: Gradient | undefined = output;
    let current = node;
    // the profile the layer above made of this gradient for its backward sum's result (the same moments and count give
    // the same profile: one object for the site and the tensor), taken only by the next layer's tensor
    this.madeOf = undefined;
    this.madeProfile = undefined;
    for (let i = layers.length - 1; i >= 0 && gradient !== undefined; i--) {
      const layer = layers[i] as GraphLayer;
      const prefix = this.build ? (this.prefixes[layer.index] ?? `${layer.name}/`) : "";
      const madeOf = this.madeOf as Gradient | undefined;
      const madeProfile = this.madeProfile as MagnitudeProfile | undefined;
      this.madeOf = undefined;
      this.madeProfile = undefined;
      if (!(seeded && i === layers.length - 1)) {
        const elements = this.graph.batch * sampleElements(layer.output);
        this.emit(
          this.build ? `${prefix}activation-gradient` : "",
          layer.name,
          layer.index,
          layer.family,
          "activation-gradient",
          "gradients",
          this.outputShape(layer),
          madeProfile !== undefined && madeOf === gradient && madeProfile.elements === elements ? madeProfile : profileOf(gradient, elements),
          current,
        );
      }
      const branchResults = layer.branch === undefined ? NO_BRANCH : this.branchBackward(layer, gradient, current, bottom && i === 0);
      // what the branch's lowest layer made is the branch's own input gradient, not this layer's
      this.madeOf = undefined;
      this.madeProfile = undefined;
      const result = ruleFor(layer.family).backward(this.ctx, layer, this.stash[layer.index], gradient, branchResults);
      // nothing reads a layer's stash after its backward rule: let it go, so a collection during the pass copies less
      if (!this.keepStash) this.stash[layer.index] = undefined;
      const input = result.input;
      if (input !== undefined) tidyGradient(layer, input, gradient);
      const inner = result.inner;
      // a gated product's inner gradients lie below its down projection: they carry the row scale too
      const innerRows = layer.family === "gated-feed-forward" ? rowsBelow(layer, gradient) : undefined;
      for (let k = 0; k < inner.length; k++) {
        const one = inner[k] as InnerGradient;
        if (innerRows !== undefined) {
          one.gradient.rows = innerRows;
          one.gradient.rowCount = gradient.rowCount;
        }
        this.innerGradient(layer, prefix, one, current);
      }
      const weightGradients = result.weightGradients;
      this.summed.clear();
      this.gradientIds.clear();
      for (let k = 0; k < weightGradients.length; k++) this.weightGradient(layer, prefix, weightGradients[k] as WeightGradientMoment, current, gradient.q);
      const hazards = result.hazards;
      if (hazards !== undefined) {
        for (let k = 0; k < hazards.length; k++) this.backwardHazard(layer, prefix, hazards[k] as OpHazard, weightGradients, bottom && i === 0, input);
      }
      current = chain(current, layer.name, result.factors, this.ledger);
      gradient = input;
    }
    return gradient;
  }

  /** A residual layer's branch, walked backward from its seed: the branch's input gradient for the rule. */
  private branchBackward(layer: GraphLayer, gradient: Gradient, node: LedgerNode | null, bottom: boolean): BranchResults {
    const seed = residualBranchSeed(layer, gradient, this.build, this.stash[layer.index] as ResidualStash);
    // (present only with a value: a delete of an absent key is skipped, for speed)
    if (seed.gradient.windowMaximum !== undefined) delete seed.gradient.windowMaximum;
    if (seed.gradient.reluGated !== undefined) delete seed.gradient.reluGated;
    if (seed.gradient.eulerSum !== undefined) delete seed.gradient.eulerSum;
    const branchGradient = this.backward(layer.branch as GraphLayer[], seed.gradient, chain(node, layer.name, [seed.factor], this.ledger), false, bottom);
    return { branchGradient: branchGradient ?? { q: 0, zeroFraction: 1, shape: "gaussian", logVar: 0 } };
  }

  private innerGradient(layer: GraphLayer, prefix: string, inner: InnerGradient, node: LedgerNode | null): void {
    this.emit(
      this.build ? `${prefix}activation-gradient:${inner.suffix}` : "",
      layer.name,
      layer.index,
      layer.family,
      "activation-gradient",
      "gradients",
      inner.shape,
      profileOf(inner.gradient, inner.elements),
      chain(node, layer.name, inner.factors, this.ledger),
    );
  }

  /**
   * A weight gradient's profile in one micro-batch of one worker, made once per layer's backward rule for the sites that
   * take it (the gradient sum's terms, the sum over batch × positions' result).
   */
  private perMicroBatch(wg: WeightGradientMoment, weight: GraphWeight): MagnitudeProfile {
    const made = this.summed.get(wg);
    if (made !== undefined) return made;
    const profile = plainProfile(wg.q, wg.zeroFraction, "gaussian", wg.logVar, weight.elements);
    this.summed.add(wg, profile);
    return profile;
  }

  /**
   * A weight gradient after accumulation and the cross-worker reduction: the accumulated micro-batch gradients
   * (each already divided by the accumulation steps A through the loss) add up incoherently, A·q; the workers'
   * gradients add up the same way, W·q, and averaging divides by W (q/W²). What is the same in every micro-batch
   * (the curvature's aligned part) and what two of them share (their samples' common part) add up coherently.
   */
  weightGradient(layer: GraphLayer, prefix: string, wg: WeightGradientMoment, node: LedgerNode | null, outputQ: number): void {
    const weight = maybeWeight(layer, wg.weight);
    if (weight === undefined) return;
    const training = this.spec.training;
    const A = training.accumulationSteps;
    const W = training.workers;
    const averaged = training.workerGradients === "average";
    // micro-batch sums add incoherently, but the part that is the same in each of them (alignedQ) coherently, and
    // two of them share what two samples of one share (betweenQ for each of the K(K − 1) ordered pairs; common practice)
    const aligned = wg.alignedQ ?? 0;
    const K = A * W;
    const summedQ = (wg.q - aligned) * K + aligned * K * K + (wg.betweenQ ?? 0) * K * (K - 1);
    const finalQ = averaged ? summedQ / (W * W) : summedQ;
    const coherent = wg.coherentQ * A * A * W * W / (averaged ? W * W : 1);
    // an element of the combined gradient is zero only when it is zero in every micro-batch, taken as independent (exact
    // for the rows an embedding leaves untouched; a lower bound for a ReLU unit, whose off-state persists across them)
    const profile = plainProfile(finalQ, Math.pow(wg.zeroFraction, A * W), "gaussian", wg.logVar, weight.elements);
    const keep = 1 - profile.zeroFraction;
    profile.coherentRms = keep > 0 ? Math.sqrt(coherent / keep) * medianFactor(Math.max(wg.logVar, 0)) : 0;
    let id = "";
    let ledger: LedgerNode | null = null;
    if (this.build) {
      id = wg.weight === "weight" ? `${prefix}weight-gradient` : `${prefix}weight-gradient:${wg.weight}`;
      this.gradientIds.add(wg, id);
      if (this.ledger) ledger = this.weightGradientNode(layer, wg, node, outputQ, A * W > 1 ? finalQ : undefined);
    }
    this.emit(id, layer.name, layer.index, layer.family, "weight-gradient", "gradients", weight.shape, profile, ledger);
    const pairing = this.pairing;
    if (pairing !== undefined) {
      // the weight's place in its layer (a layer has a few), after the layer's first in the weight list
      const first = pairing.first[layer.index];
      const place = layer.weights.indexOf(weight);
      if (first !== undefined && place >= 0) pairing.gradients[first + place] = this.tensors.length - 1;
    }
    if (A * W > 1) this.gradientSumHazard(layer, wg, weight, summedQ, A * W, id);
  }

  /** The ledger of a weight gradient (start pass only); `finalQ` when micro-batches or workers are combined. */
  private weightGradientNode(layer: GraphLayer, wg: WeightGradientMoment, node: LedgerNode | null, outputQ: number, finalQ: number | undefined): LedgerNode | null {
    // the wording keeps only the rule, not the whole moment, alive until the ledger is read
    const wgRule = wg.rule;
    const aligned = wg.alignedQ ?? 0;
    const factors: Factor[] = [
      {
        ratio: outputQ > 0 ? wg.q / outputQ : 0,
        rule: () =>
          `weight gradient: ${textOf(wgRule)}, E[g²] = N·E[x²]·E[δ²]·(1 + (N − 1)·ρ̄)${aligned > 0 ? " + the part the loss's curvature aligns, N²·E[x²]²·var_w·Σ_j M_ij²" : ""} relative to the gradient at the layer's output, ρ̄ the mean correlation of the summed terms`,
        source: "sum over batch and positions of input × gradient (chain rule); variance of a sum of correlated terms (common practice)",
      },
    ];
    if (finalQ !== undefined) factors.push({ ratio: finalQ / wg.q, rule: this.combineRule(), source: "independent sums add in second moment, the parts they share coherently (common practice)" });
    return chain(node, layer.name, factors, true);
  }

  /**
   * A sum of the backward pass (BackwardResult.hazards), sited as the forward sums are and paired by the end pass in the
   * same order. `atInput`: the layer's input is the network's, where no gradient is computed, so its transposed
   * products are not summed. A weight gradient's sum over batch × positions takes that gradient's per-micro-batch
   * profile as its result.
   */
  private backwardHazard(layer: GraphLayer, prefix: string, h: OpHazard, weightGradients: readonly WeightGradientMoment[], atInput: boolean, made: Gradient | undefined): void {
    const makes = h.makes ?? "input";
    if (atInput && makes === "input") return;
    let output: MagnitudeProfile | undefined;
    // the weight gradient this sum makes, whose tensor id it takes
    let of: WeightGradientMoment | undefined;
    if (h.output !== undefined) {
      output = profileOf(h.output, h.outputElements ?? h.inputElements);
      if (makes === "input" && h.output === made) {
        this.madeOf = made;
        this.madeProfile = output;
      }
    } else if (makes === "weight-gradient" || makes.startsWith("weight-gradient")) {
      // (the common makes first, by one comparison: the builtin's call was ~0.5% of the prediction)
      const name = makes === "weight-gradient" ? "weight" : makes.slice("weight-gradient:".length);
      const weight = maybeWeight(layer, name);
      for (let k = 0; k < weightGradients.length && weight !== undefined; k++) {
        const wg = weightGradients[k] as WeightGradientMoment;
        if (wg.weight === name) {
          output = this.perMicroBatch(wg, weight);
          of = wg;
        }
      }
    }
    const input = profileOf(h.input, h.inputElements);
    if (this.phase === "end") return this.siteEnd(h.kind, layer.name, input, output, true);
    const madeId = of === undefined ? undefined : this.gradientIds.get(of);
    this.opSite(layer, h, input, output, this.build && makes !== "input" ? (madeId ?? prefix + makes) : undefined, true);
  }

  /** The hazard of summing a weight gradient over micro-batches and workers. */
  private gradientSumHazard(layer: GraphLayer, wg: WeightGradientMoment, weight: GraphWeight, summedQ: number, terms: number, id: string): void {
    const input = this.perMicroBatch(wg, weight);
    const output = plainProfile(summedQ, wg.zeroFraction, "gaussian", wg.logVar, weight.elements);
    if (this.phase === "end") return this.siteEnd("gradient-sum", layer.name, input, output);
    this.site(newSite("gradient-sum", layer.name, input, terms, false, !this.build ? "" : id + this.sumDetail(), output, this.build ? id : undefined, undefined, undefined));
  }
}

/**
 * A new site of the start pass. Every site is made by this one literal, whole, in one key order (judge.ts's trainingSites
 * too), so its readers see one layout, and V8 tracks one allocation site for them all: as the prediction's profiles
 * (profile.ts), the sites outlive young collections and V8 then allocates them in the old generation, where no scavenge
 * copies them. Made at a literal of their own, the gradient sums' sites stayed young (1,000 of a 1,000-layer check's
 * 2,499 sites, Dec 2026), each copied by every scavenge of the check. The end record is made here too, holding the
 * start's profiles until the end pass writes its own (siteEnd; an end pass that takes the start's forward leaves them):
 * made beside its site, the judgement finds the two together in memory, where a record the end pass made lay elsewhere.
 */
function newSite(
  kind: HazardKind,
  layer: string,
  input: MagnitudeProfile,
  terms: number,
  guarded: boolean,
  detail: string,
  output: MagnitudeProfile | undefined,
  tensor: string | undefined,
  gradient: true | undefined,
  statistics: HazardSite["statistics"],
): HazardSite {
  return { kind, layer, input, terms, guarded, constant: undefined, detail, output, end: { input, output }, tensor, gradient, statistics };
}

/**
 * A layer's few keys and what was made of them, found by identity: the list keeps its store from layer to layer (emptied
 * by its length, a list let the store go and grew a new one on every layer).
 */
class LayerPairs<K, V> {
  private readonly pairs: (K | V | undefined)[] = [];
  private count = 0;

  clear(): void {
    this.count = 0;
  }

  get(key: K): V | undefined {
    const pairs = this.pairs;
    for (let k = 0; k < this.count; k += 2) if (pairs[k] === key) return pairs[k + 1] as V;
    return undefined;
  }

  add(key: K, value: V): void {
    const pairs = this.pairs;
    const count = this.count;
    if (count < pairs.length) {
      pairs[count] = key;
      pairs[count + 1] = value;
    } else pairs.push(key, value);
    this.count = count + 2;
  }
}

/** The error of an end pass whose site `index` is not the start pass's (kind undefined: it met no site there). */
function disagreeAtSite(index: number, site: HazardSite | undefined, kind: HazardKind | undefined, layer: string | undefined, backward = false): never {
  const start = site === undefined ? "none" : `${site.kind}${site.gradient === true ? " (backward)" : ""} of ${site.layer}`;
  const end = kind === undefined ? "none" : `${kind}${backward ? " (backward)" : ""} of ${layer ?? ""}`;
  throw new RangeError(`internal: start and end passes disagree at hazard site ${index}: ${start} at the start, ${end} at the end`);
}

/** Extra inputs of a layer that is not a residual add (one object for all of them). */
const NO_BRANCH: BranchResults = {};

/** The spec path of the layer with this index, searching residual branches too. */
function layerPath(layers: readonly GraphLayer[], index: number): GraphLayer["path"] | undefined {
  for (const layer of layers) {
    if (layer.index === index) return layer.path;
    const inner = layer.branch === undefined ? undefined : layerPath(layer.branch, index);
    if (inner !== undefined) return inner;
  }
  return undefined;
}

/** Families whose output no longer tracks the scale of their input (norms reset it; an embedding starts it). */
const RESETS = new Set(["layer-norm", "rms-norm", "batch-norm", "embedding"]);

/** The ledger of a weight at initialisation (start pass only). */
function weightNode(layer: string, w: GraphWeight, variance: number, rms: number): LedgerNode {
  const init = w.init;
  const constant = w.distribution === "constant";
  const rule = (): string => `${init === undefined ? (constant ? "constant gain" : "zero-initialised") : `${init.kind} initialisation`}: var = ${fmt(variance)}`;
  return { layer, factor: { ratio: rms * rms, rule, source: initSource(init) }, parent: null };
}

const CARRIES_COSINE: ReadonlySet<string> = new Set(["dense", "activation", "residual", "layer-norm", "rms-norm", "batch-norm"]);
const KEEPS_SHARED_SPREAD: ReadonlySet<string> = new Set(["layer-norm", "rms-norm", "dropout", "residual", "conv2d", "flatten", "max-pool", "average-pool"]);
const CARRIES_COVARIANCE: ReadonlySet<string> = new Set(["dense", "activation", "layer-norm", "rms-norm", "dropout", "residual", "attention"]);
// how a sequence's deviations fill the features (Signal.sequenceExcess) is followed through these only
const CARRIES_SEQUENCE: ReadonlySet<string> = new Set(["dense", "layer-norm", "rms-norm", "residual", "attention", "gated-feed-forward"]);
// a flatten keeps the curvature (restricted to one position's block) but not the covariance of two features
const CARRIES_CURVATURE: ReadonlySet<string> = new Set(["dense", "activation", "layer-norm", "rms-norm", "dropout", "residual", "flatten", "attention"]);

/**
 * What a gradient keeps on its way down: only the rectifier right before a max-pool may use the arg-max position,
 * only the layer right below a ReLU its gate; rules that do not say otherwise keep the gradient's cross-sample
 * correlation.
 */
function tidyGradient(layer: GraphLayer, input: Gradient, gradient: Gradient): void {
  if (layer.family !== "max-pool" && input.windowMaximum !== undefined) delete input.windowMaximum;
  if (layer.family !== "activation" && input.reluGated !== undefined) delete input.reluGated;
  if (input.shared === undefined && gradient.shared !== undefined && gradient.q > 0) input.shared = gradient.shared * (input.q / gradient.q);
  // the loss's curvature is carried through linear layers, pointwise activations, layer and RMS norms, dropout, flattens,
  // attention and residual blocks only (see Curvature)
  if (input.curvature !== undefined && !CARRIES_CURVATURE.has(layer.family)) delete input.curvature;
  // Σ z·δ over every unit is the same below a positively homogeneous layer of degree 1 as above it (Euler's theorem)
  if (gradient.eulerSum !== undefined && homogeneous(layer)) input.eulerSum = gradient.eulerSum;
  else if (input.eulerSum !== undefined) delete input.eulerSum;
  // a squared-error head's row scale: a transposed weight map spreads each row's residuals over its features, and every
  // layer but attention keeps the rows apart (attention mixes a sample's positions, each with its own residuals)
  const rows = rowsBelow(layer, gradient);
  if (rows !== undefined) input.rows = rows;
  else if (input.rows !== undefined) delete input.rows;
  if (rows === undefined && gradient.rowsPending !== undefined && layer.family !== "attention") input.rowsPending = gradient.rowsPending;
  else if (input.rowsPending !== undefined) delete input.rowsPending;
  if (input.rows !== undefined || input.rowsPending !== undefined) input.rowCount = gradient.rowCount;
  else if (input.rowCount !== undefined) delete input.rowCount;
  if (layer.family !== "dense" && layer.family !== "activation") {
    // the shared part's own spread is carried on through layer and RMS norms, dropout, residual blocks, convolutions,
    // pools and flattens as well
    if (input.sharedLogVar !== undefined && !KEEPS_SHARED_SPREAD.has(layer.family)) delete input.sharedLogVar;
    if (input.cosineSquare !== undefined) delete input.cosineSquare;
    if (input.coupling !== undefined) delete input.coupling;
  }
}

/** The row scale (Gradient.rows) of the gradient below a layer, from the gradient above it. */
function rowsBelow(layer: GraphLayer, gradient: Gradient): number | undefined {
  const family = layer.family;
  if (family === "attention") return undefined;
  if (gradient.rows !== undefined) return gradient.rows;
  return family === "dense" || family === "conv2d" || family === "gated-feed-forward" ? gradient.rowsPending : undefined;
}

/** Whether a layer's output is positively homogeneous of degree 1 in its input at the start (zero biases: GraphWeight.variance). */
function homogeneous(layer: GraphLayer): boolean {
  switch (layer.family) {
    case "dense":
    case "conv2d":
      return (maybeWeight(layer, "bias")?.variance ?? 0) === 0;
    case "activation": {
      const name = (layer.spec as { activation?: string }).activation;
      return name === "relu" || name === "leaky-relu" || name === "identity";
    }
    case "max-pool":
    case "average-pool":
    case "dropout":
    case "flatten":
      return true;
    default:
      return false;
  }
}

/**
 * The moments of a loss value given at the median draw with ln-variance W over draws: the profile's rms is the
 * median, and its scale spread comes from ln(value²), of variance 4W (mean value² = median²·e^(2W)).
 */
function lossValueMoments(value: number, W: number): { q: number; zeroFraction: number; shape: "constant"; logVar: number } {
  return { q: value * value * Math.exp(2 * W), zeroFraction: 0, shape: "constant", logVar: 4 * W };
}

/** The network's input tensor and the forward walk: the output at the loss. */
function forwardPass(p: Phase, graph: Graph, spec: NetworkSpec, build: boolean): Signal {
  const ledger = p.ledger;
  const input = spec.input;
  let signal: Signal;
  let node: LedgerNode | null = null;
  if (input.kind === "tokens") {
    // token ids carry no magnitude: the embedding's factor is the whole scale
    signal = { q: 1, mean: 0, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true };
  } else {
    const q = input.scale * input.scale;
    signal = { q, mean: 0, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true };
    // two independent isotropic Gaussian samples of d features have E[cos²] = 1/d (common practice); one position each
    const features = input.kind === "features" ? input.features : 0;
    if (input.kind === "features" && input.positions === 1 && features > 0) signal.correlationSquare = 1 / features;
    node = chain(null, "input", [{ ratio: q, rule: `input scale (rms of an input value) = ${input.scale}`, source: "the spec's input scale" }], ledger);
    p.emit(
      build ? "input/activation" : "",
      "input",
      -1,
      "input",
      "activation",
      "activations",
      batchShape(graph.batch, graph.input),
      profileOf(signal, graph.batch * sampleElements(graph.input)),
      node,
    );
  }
  return p.forward(graph.layers, signal, node).output;
}

/** Run one phase: forward, loss, backward. */
function runPhase(
  graph: Graph,
  spec: NetworkSpec,
  phase: "start" | "end",
  build: boolean,
  lossScale: number,
  start?: PhaseResult,
  source: LedgerSource | null = null,
): PhaseResult {
  const p = new Phase(graph, spec, phase, build, lossScale, start?.tensors, source, start?.hazards, start?.weights);
  const ledger = p.ledger;
  const taken = phase === "end" ? start?.forward : undefined;
  let same: SameForward | undefined;
  let output: Signal;
  if (taken !== undefined) output = p.takeForward(taken);
  else {
    p.keepStash = phase === "start" && source !== null && !source.own && sameForward(graph, spec);
    output = forwardPass(p, graph, spec, build);
    if (p.keepStash) same = { tensors: p.tensors.length, sites: p.hazards.length, output, stash: p.stash };
  }

  const training = spec.training;
  const last = graph.layers[graph.layers.length - 1] as GraphLayer;
  const width = graph.output.layout === "features" ? graph.output.features : graph.output.layout === "image" ? graph.output.channels : 1;
  const positions = graph.output.layout === "image" ? sampleElements(graph.output) / width : positionCount(graph.output);
  const seed = lossSeed(
    training.loss,
    output,
    graph.batch,
    positions,
    width,
    lossScale / training.accumulationSteps,
    phase,
    training.horizon.finalLoss,
  );
  p.emit(
    build ? "loss/loss" : "",
    "loss",
    graph.layerCount,
    "loss",
    "loss",
    "activations",
    [1],
    profileOf(lossValueMoments(seed.value, seed.valueLogVar), 1),
    ledger ? chain(null, "loss", [{ ratio: lossValueMoments(seed.value, seed.valueLogVar).q, rule: `loss value ${fmt(seed.value)} at the median draw`, source: lossValueSource(training.loss) }], true) : null,
  );
  if (training.loss.reduction === "sum") {
    const siteInput = profileOf(lossValueMoments(seed.termValue, seed.valueLogVar), seed.terms);
    const siteOutput = profileOf(lossValueMoments(seed.value, seed.valueLogVar), 1);
    if (phase === "end") p.siteEnd("loss-value", "loss", siteInput, siteOutput);
    else {
      p.site(newSite("loss-value", "loss", siteInput, seed.terms, false, `the loss sums ${seed.terms} terms (sum reduction)`, siteOutput, undefined, undefined, undefined));
    }
  }
  const seedNode = chain(null, "loss", [{ ratio: seed.gradient.q, rule: seed.rule, source: seed.source }], ledger);
  p.emit(
    build ? `${last.name}/activation-gradient` : "",
    last.name,
    last.index,
    last.family,
    "activation-gradient",
    "gradients",
    p.outputShape(last),
    profileOf(seed.bulk.gradient, seed.bulk.elements),
    ledger ? chain(null, "loss", [{ ratio: seed.bulk.gradient.q, rule: seed.rule, source: seed.source }], true) : null,
  );
  if (seed.target !== undefined) {
    p.emit(
      build ? `${last.name}/activation-gradient:target-class` : "",
      last.name,
      last.index,
      last.family,
      "activation-gradient",
      "gradients",
      p.outputShape(last),
      profileOf(seed.target.gradient, seed.target.elements),
      ledger ? chain(null, "loss", [{ ratio: seed.target.gradient.q, rule: "right-class element (1 − p_y)", source: seed.source }], true) : null,
    );
    if (build) (p.tensors[p.tensors.length - 1] as PredictedTensor).partOf = `${last.name}/activation-gradient`;
  }
  p.backward(graph.layers, seed.gradient, seedNode, true, true);
  p.finish();
  return { tensors: p.tensors, hazards: p.hazards, pairing: p.pairing, weights: p.weightProfiles, forward: same };
}

function assumptions(spec: NetworkSpec, graph: Graph): string[] {
  const t = spec.training;
  const list = [
    "Mean-field estimates at initialisation (Poole et al. 2016; Schoenholz et al. 2017): weights independent and zero-mean, pre-activations Gaussian, gradients independent of the forward pass but for the loss's own curvature (below); these are estimates, so confirm them with a short run.",
    "Weight gradients are sums over batch and positions whose terms are as correlated as the samples and positions are (the correlation map of Poole et al. 2016, for ReLU the arc-cosine kernel of Cho & Saul 2009), N·q·(1 + (N − 1)·ρ̄); the JSON's coherentRms gives the fully aligned upper bracket. Rows and columns of ReLU units off for the whole batch are exact zeros.",
    "At the start, where the labels are independent of the inputs, the loss gradient holds the network's own output through the loss's curvature (Gauss–Newton), carried down through dense layers and pointwise activations: a layer's weight gradient gains N·M·W·E[x xᵀ] in every micro-batch (Stein's lemma) and a unit's gradient its own output; layer and RMS norms, dropout and flattens pass it on too (a norm takes the diagonal's mean out of it; a flatten leaves the layers below their own position's block), norms take it for their gain and gated feed-forward layers for their three weights; batch norm, residual, attention, gated, convolution and pooling layers pass none further down but its mean part in Σ z·δ over a layer's units z, the same below every positively homogeneous layer (Euler's theorem), of which each channel of a rectifier or max pool takes its share for the weights below.",
    "The finite-width spread of each scale is log-normal with variance κ·Σ1/width over the layers traversed (κ = 5 for ReLU; for other activations a heuristic κ = E[φ⁴]/E[φ²]² − 1 forward and 3E[φ'⁴]/E[φ'²]² − 1 backward); a dense layer not followed by an activation (a narrow output) counts 2·D/width instead, D = 1/batch + (1 − 1/batch)·E[c²] for the samples' cosines c, as its batch rms averages what the samples do not share, while the batch mean keeps 2/width; a gradient whose loss seed moves with the output (elasticity e) meets the output's own spread again in the transposed maps below it, 2e times what they add (at most the output's spread); norms reset it and residual skips do not add to it (Hanin & Rolnick 2018).",
    "rms is that of the nonzero elements at the median draw; the JSON's meanSquare is the mean-field second moment over all elements.",
    "Biases start at zero and, by the end of the horizon, are taken to have drifted by (weight growth − 1) × the layer's initial weight rms.",
  ];
  const mixed = mixtureActivations(spec);
  if (mixed.length > 0) {
    // δ·φ'(x) given x is N(0, s²φ'(x)²): a Gaussian scale mixture over |φ'(x)| (gradient independence, Schoenholz et al.
    // 2017; src/numeric/derivative-mixture.ts)
    const crossing = mixed.filter((name) => name === "GELU" || name === "SiLU");
    const fading = mixed.filter((name) => name !== "GELU" && name !== "SiLU");
    // each kind named where both are present
    const both = crossing.length > 0 && fading.length > 0;
    const why = [
      crossing.length > 0 ? `crosses zero${both ? ` (${crossing.join(", ")})` : ""}` : "",
      fading.length > 0 ? `fades in a saturated tail${both ? ` (${fading.join(", ")})` : ""}` : "",
    ].filter((part) => part !== "");
    list.push(
      `Gradients at the input of ${listed(mixed)} layers are taken as Gaussian elements scaled by |φ'(x)| of a Gaussian pre-activation x ` +
        `(a scale mixture): the derivative ${why.join(" or ")}, so they hold more values near zero than a Gaussian of the same rms.`,
    );
  }
  const head = graph.output.layout === "features" ? graph.output.features : graph.output.layout === "image" ? graph.output.channels : 1;
  if (t.loss.kind === "mean-squared-error" && head <= MIXED_ROWS) {
    // a row's k residuals, spread by a transposed weight map: Gaussian given their norm (src/numeric/gated-mixture.ts)
    list.push(
      `Below the squared-error head of ${head} output${head === 1 ? "" : "s"}, each row's gradient (a sample's, or a position's) is taken as Gaussian elements scaled by the row's residual norm, √(χ²_${head}/${head}) over its mean ` +
        "(a scale mixture, cut at the smallest row of a typical step): far more of them lie near zero than in a Gaussian of the same rms; attention layers are taken to average the rows' scales away.",
    );
  }
  if (activationsOf(spec, "gated-feed-forward").size > 0) {
    // δ_up = δ_h·φ(g) and δ_gate = δ_h·u·φ'(g), Gaussian given g and u (gradient independence, Schoenholz et al. 2017;
    // src/numeric/gated-mixture.ts)
    list.push(
      "Gradients at the up and gate projections of gated feed-forward layers are taken as Gaussian elements scaled by |φ(g)| and |u·φ'(g)| of independent Gaussian " +
        "gate and up pre-activations g and u (scale mixtures; a softmax gate's as Gaussian): they hold far more values near zero, and reach further, than a Gaussian of the same rms.",
    );
  }
  // only token input has an embedding table (specs/README: an embedding must be the first layer, on token input)
  if (spec.input.kind === "tokens") {
    list.push("Token ids are taken as used uniformly when spreading embedding gradients over the table's rows; frequent tokens get larger rows, rare ones smaller.");
  }
  if (t.accumulationSteps > 1) list.push(`Each of the ${t.accumulationSteps} accumulation steps divides its loss by ${t.accumulationSteps} (common practice), so every gradient of one backward pass is ${t.accumulationSteps} times smaller.`);
  if (t.workers > 1) list.push(`The ${t.workers} workers' gradients are summed${t.workerGradients === "average" ? " and then divided by the worker count" : ""}; the reported weight gradient is the combined one, and the gradient-sum hazard shows the sum before any division.`);
  if (t.horizon.finalLoss === undefined) list.push("No final loss is given, so gradients are assumed not to shrink by the end of the horizon.");
  else if (t.loss.kind === "cross-entropy") {
    const pRight = Math.exp(-t.horizon.finalLoss);
    // an untrained classifier gives the right class about 1/classes: a final loss not below ln(classes) is no surer
    const effect = pRight > 1 / t.loss.classes ? "which shrinks the output gradient" : `no more than the untrained 1/${t.loss.classes}, so the output gradient does not shrink`;
    list.push(`At the end of the horizon the right-class probability is taken as e^(−final loss) = ${String(Number(pRight.toPrecision(3)))}, ${effect} (own algebra: the mean loss −ln p of the right class, read back as p).`);
  }
  // the residual's mean square goes from the initial loss to the final one: a larger final loss grows the gradient
  else list.push("At the end of the horizon the output residual's rms is √(final loss), which scales the output gradient by √(final loss / initial loss), a shrink when the final loss is the smaller.");
  if (t.horizon.weightGrowth !== 1) list.push(`Every weight's rms is multiplied by ${t.horizon.weightGrowth} at the end of the horizon, and the forward pass is recomputed with it.`);
  return list;
}

// the activations of a family's layers anywhere in the spec (blocks walked once each)
function activationsOf(spec: NetworkSpec, family: "activation" | "gated-feed-forward"): Set<string> {
  const found = new Set<string>();
  const seen = new Set<string>();
  const walk = (layers: readonly LayerSpec[]): void => {
    for (const layer of layers) {
      if (layer.family === family && (layer.family === "activation" || layer.family === "gated-feed-forward")) {
        found.add(layer.activation);
      } else if (layer.family === "residual") walk(layer.branch);
      else if (layer.family === "repeat") walk(layer.layers);
      else if (layer.family === "use" && !seen.has(layer.block)) {
        seen.add(layer.block);
        // own keys only: a block may be named __proto__ (as the graph builder reads them)
        const block = Object.hasOwn(spec.blocks, layer.block) ? spec.blocks[layer.block] : undefined;
        if (block !== undefined) walk(block);
      }
    }
  };
  walk(spec.layers);
  return found;
}

// the activation layers whose input gradient is a scale mixture over |φ'| (src/ops/activation/analytic.ts), as the
// assumptions name them: GELU and SiLU, whose derivative crosses zero, then tanh, sigmoid and softplus, whose derivative
// fades in a saturated tail
function mixtureActivations(spec: NetworkSpec): string[] {
  const found = activationsOf(spec, "activation");
  const names: Record<string, string> = { gelu: "GELU", silu: "SiLU", tanh: "tanh", sigmoid: "sigmoid", softplus: "softplus" };
  return Object.keys(names).filter((name) => found.has(name)).map((name) => names[name] as string);
}

// "a", "a and b", "a, b and c"
function listed(names: readonly string[]): string {
  return names.length < 2 ? names.join("") : `${names.slice(0, -1).join(", ")} and ${names[names.length - 1] as string}`;
}

/**
 * One predicted tensor. The ledger is built on demand: materialising every tensor's chain would cost layers² for
 * deep networks. A prediction {@link predict} returns has it as an own, enumerable accessor (one shared descriptor, so
 * every tensor keeps the same hidden class), so spreads, JSON and structured clones see the entries; one that check
 * keeps to itself ({@link predictForCheck}) reads it through the class's accessor, as defining an own one per tensor
 * took ~0.3 µs each (4,002 on the 1,000-layer spec).
 */
class PredictedTensor {
  id: string;
  layer: string;
  layerIndex: number;
  family: TensorPrediction["family"];
  role: TensorRole;
  slot: PlanSlot;
  shape: number[];
  start: MagnitudeProfile;
  end: MagnitudeProfile;
  source: "predicted" | "measured";
  // set on the few tensors that are part of another's array, so the others keep their shape
  declare partOf?: string;
  #node: LedgerNode | null;
  #source: LedgerSource | null;
  #index: number;
  #cached: LedgerEntry[] | undefined;

  /** `end` starts as the start profile; the end pass replaces it. */
  constructor(
    id: string,
    layer: string,
    layerIndex: number,
    family: TensorPrediction["family"],
    role: TensorRole,
    slot: PlanSlot,
    shape: number[],
    profile: MagnitudeProfile,
    ledger: LedgerNode | null,
    source: LedgerSource | null,
    index: number,
  ) {
    this.id = id;
    this.layer = layer;
    this.layerIndex = layerIndex;
    this.family = family;
    this.role = role;
    this.slot = slot;
    this.shape = shape;
    this.start = profile;
    this.end = profile;
    if (source !== null && source.own) Object.defineProperty(this, "ledger", LEDGER_PROPERTY);
    this.source = "predicted";
    this.#node = ledger;
    this.#source = source;
    this.#index = index;
    this.#cached = undefined;
  }

  get ledger(): LedgerEntry[] {
    if (this.#cached === undefined) {
      const source = this.#source;
      const node = source === null ? this.#node : PredictedTensor.nodeAt(source, this.#index);
      this.#cached = materialise(node, this.start);
    }
    return this.#cached;
  }

  set ledger(value: LedgerEntry[]) {
    this.#cached = value;
  }

  /** The ledger node of the source's tensor at `index`, its start pass run again, once, with the nodes linked. */
  private static nodeAt(source: LedgerSource, index: number): LedgerNode | null {
    if (source.nodes === undefined) {
      const tensors = runPhase(source.graph, source.spec, "start", true, source.lossScale).tensors;
      source.nodes = tensors.map((t) => t.#node);
    }
    const nodes = source.nodes;
    if (nodes.length <= index) throw new RangeError(`internal: the ledger pass has no tensor ${index}`);
    return nodes[index] as LedgerNode | null;
  }
}

/** The class's ledger accessor, as an own enumerable property of each tensor {@link predict} returns. */
const LEDGER_PROPERTY: PropertyDescriptor = { ...Object.getOwnPropertyDescriptor(PredictedTensor.prototype, "ledger"), enumerable: true, configurable: true };

/**
 * Predict the magnitude profile of every tensor of one training step, at initialisation and at the end of the
 * training horizon, with the ledger of per-layer factors and the operation hazards.
 * @example predict(graph, spec).tensors.find((t) => t.role === "activation-gradient")?.start.rms
 */
export function predict(graph: Graph, spec: NetworkSpec, options: PredictOptions = {}): Prediction {
  return predicted(graph, spec, options, true);
}

/**
 * {@link predict} for a caller that keeps the prediction to itself (check judges it and returns none of its tensors):
 * the same tensors and sites, but each tensor's ledger is read through its class, not an own property, so a spread,
 * JSON or structured clone of a tensor leaves the ledger out.
 */
export function predictForCheck(graph: Graph, spec: NetworkSpec, options: PredictOptions = {}): Prediction {
  return predicted(graph, spec, options, false);
}

function predicted(graph: Graph, spec: NetworkSpec, options: PredictOptions, own: boolean): Prediction {
  const lossScale = options.lossScale ?? 1;
  if (!(lossScale > 0) || !Number.isFinite(lossScale)) throw new RangeError(`lossScale must be a finite number > 0, got ${lossScale}`);
  // the ledgers are left to a second start pass, run when one is first read: most callers read none, and linked
  // ledger nodes (with their wording) would outlive the call beside every tensor
  const start = runPhase(graph, spec, "start", true, lossScale, undefined, { graph, spec, lossScale, own, nodes: undefined });
  // both passes visit the same operations in the same order: the end pass completes the start pass's tensors and sites
  runPhase(graph, spec, "end", false, lossScale, start);
  const tensors: TensorPrediction[] = start.tensors;
  if (start.pairing !== undefined) PAIRINGS.set(tensors, { length: tensors.length, pairing: start.pairing });
  return { specName: spec.name, tensors, hazards: start.hazards, assumptions: assumptions(spec, graph) };
}

/** The weight pairings of check's own predictions, by their tensor list (see {@link knownWeightPairs}). */
const PAIRINGS = new WeakMap<readonly TensorPrediction[], { length: number; pairing: WeightPairing }>();

/**
 * Each weight of {@link predictForCheck}'s tensors with its weight gradient, in the tensors' order: what
 * src/scale/optimizer.ts weightPairs finds by layer name and id suffix, taken from the walk that made them (the weight
 * gradient last made of each weight, as that search takes the newest with the weight's suffix). For check's own
 * prediction, which nothing edits (as {@link WeightProfiles}): a tensor put in place of another in the list would keep
 * its old pair. Undefined for any other list (another prediction's, a copy, a list whose length changed, as measured
 * statistics make: src/measure/calibrate.ts) and where a layer's name holds a colon, which the
 * search would read as the start of the id's suffix: the search then answers. test/magnitude/weight-pairs.test.ts holds
 * the two equal on random networks.
 */
export function knownWeightPairs(tensors: readonly TensorPrediction[]): { weight: TensorPrediction; gradient: TensorPrediction }[] | undefined {
  const known = PAIRINGS.get(tensors);
  if (known === undefined || known.length !== tensors.length) return undefined;
  const { weights, gradients } = known.pairing;
  const pairs: { weight: TensorPrediction; gradient: TensorPrediction }[] = [];
  for (let i = 0; i < weights.length; i++) {
    const g = gradients[i] as number;
    if (g < 0) continue;
    const weight = tensors[weights[i] as number] as TensorPrediction;
    if (weight.layer.includes(":")) return undefined;
    pairs.push({ weight, gradient: tensors[g] as TensorPrediction });
  }
  return pairs;
}

/** Where the loss value's rule comes from: the loss's definition (the seed's source is that of its gradient). */
function lossValueSource(loss: NetworkSpec["training"]["loss"]): string {
  return loss.kind === "cross-entropy"
    ? "cross-entropy −ln p_y: the mean log-sum-exp of the logits at the start (definition; Gaussian softmax moments by Laplace-transform quadrature, Cressie et al. 1981)"
    : "mean squared error: the mean square of y − t per term (definition), summed over the terms with reduction sum";
}

/** "1 worker", "16 workers". */
function counted(n: number, noun: string): string {
  return `${n} ${noun}${n === 1 ? "" : "s"}`;
}
