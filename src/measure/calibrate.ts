/**
 * Calibration: trained weights from tensor files replace the initialisation the spec describes (the fine-tuning
 * case), so the magnitude engine propagates the real weight scales; recorded statistics from a short real run
 * replace predicted profiles outright. Both mark the tensors they touch as measured.
 *
 * This module only rewrites data: it takes the graph and returns one with measured weight variances (the engine's
 * forward rule q_out = q_in·fan_in·var_w then carries them), and it rewrites a prediction's profiles. Graph and
 * prediction types are imported as types only, so measure keeps no runtime dependency on graph or magnitude.
 */
import { dirname, isAbsolute, join } from "node:path";
import type { Graph, GraphLayer, GraphWeight } from "../graph/types.js";
import type { MagnitudeProfile, Prediction, TensorPrediction } from "../magnitude/types.js";
import { expectedMaxAbsNormal, normalUpperQuantile } from "../numeric/index.js";
import { expandPaths } from "./paths.js";
import { scanFiles, type TensorMeasure } from "./scan.js";
import type { RecordedStatistic } from "./statistics.js";
import type { ScanIssue } from "./types.js";

/** Weight tensors measured from files (no cast targets: only their magnitudes). */
export interface WeightFileData {
  /** the files read, after glob expansion */
  files: string[];
  tensors: TensorMeasure[];
  /** problems reading the files; tensors that could be read are still used */
  issues: ScanIssue[];
}

/**
 * Read and measure every float tensor of the weight files a spec names. Relative paths and globs are taken from the
 * spec's folder (`specSource` is the spec file's path).
 */
export async function readWeightFiles(patterns: readonly string[], specSource: string): Promise<WeightFileData> {
  const base = specSource === "<memory>" ? "." : dirname(specSource);
  const resolved = patterns.map((p) => (isAbsolute(p) ? p : join(base, p)));
  const expanded = await expandPaths(resolved);
  const scan = await scanFiles(expanded.paths, { targets: [], channels: false });
  return {
    files: expanded.paths,
    tensors: scan.files.flatMap((f) => f.tensors),
    issues: [...expanded.issues, ...scan.files.flatMap((f) => f.issues)],
  };
}

/** How a graph weight found its tensor. */
export type MatchRule = "names" | "default";

/** One graph weight replaced by a measured tensor. */
export interface WeightMatch {
  /** graph layer name and weight name, and the prediction tensor id they give */
  layer: string;
  weight: string;
  id: string;
  file: string;
  tensor: string;
  rule: MatchRule;
  elements: number;
  /** rms over all elements (the second moment the engine uses is rms²) */
  rms: number;
  /** e.g. a shape that differs from the spec's but holds the same number of elements */
  note?: string;
}

/** A tensor that matched a weight by name, and both sizes. */
export interface MatchedSizes {
  file: string;
  tensor: string;
  /** the tensor's element count and shape */
  elements: number;
  shape: number[];
  /** the weight's element count and shape */
  weightElements: number;
  weightShape: number[];
}

/**
 * A tensor that matched a weight by name but was not used for it: `elements`, it holds another number of elements
 * than the weight; `used`, another weight (`usedBy`, its id) took it first.
 */
export type RejectedMatch = (MatchedSizes & { reason: "elements" }) | (MatchedSizes & { reason: "used"; usedBy: string });

/** The outcome of matching a graph to weight files. */
export interface WeightCalibration {
  /** the graph with measured variances (and gain values) for matched weights */
  graph: Graph;
  matches: WeightMatch[];
  /**
   * graph weights left with the spec's initialisation: no tensor matched, or (`rejected`) the tensor that matched
   * could not be used
   */
  unmatched: { layer: string; weight: string; id: string; tried: string[]; rejected?: RejectedMatch }[];
  /** tensors of the files that no weight used */
  unused: { file: string; tensor: string }[];
  /** reading problems and rejected matches (wrong element count, a tensor claimed twice) */
  issues: ScanIssue[];
  /** measured tensors by prediction tensor id, for marking the prediction */
  measured: Record<string, TensorMeasure>;
}

function sizes(tensor: TensorMeasure, weight: GraphWeight): MatchedSizes {
  return { file: tensor.file, tensor: tensor.name, elements: tensor.elements, shape: tensor.shape, weightElements: weight.elements, weightShape: weight.shape };
}

/** `has 128 elements [8, 16] but fc1/weight needs 64 [4, 16]` */
function elementsDetail(id: string, r: RejectedMatch): string {
  return `has ${r.elements} elements [${r.shape.join(", ")}] but ${id} needs ${r.weightElements} [${r.weightShape.join(", ")}]`;
}

/**
 * The weights whose matched tensor holds another number of elements (so it is not used), one line each, naming the
 * file and the tensor: a problem of the measured data, for the check to report beside the reading problems. A tensor
 * another weight took first is not one: tied weights share a tensor on purpose, and the notes say it.
 */
export function weightMismatchProblems(calibration: Pick<WeightCalibration, "unmatched">): string[] {
  const out: string[] = [];
  for (const u of calibration.unmatched) {
    if (u.rejected?.reason !== "elements") continue;
    out.push(`${u.rejected.file}: tensor ${JSON.stringify(u.rejected.tensor)} ${elementsDetail(u.id, u.rejected)}; not used, so ${u.id} keeps the spec's initialisation`);
  }
  return out;
}

/** The prediction id of a weight, following the engine's naming (`<layer>/weight`, `<layer>/weight:<name>`). */
export function weightTensorId(layer: string, weight: string): string {
  return `${layer}/weight${weight === "weight" ? "" : `:${weight}`}`;
}

/** Tensor-name endings tried for each weight name under a layer's prefix, most specific first. */
const ALIASES: Readonly<Record<string, readonly string[]>> = {
  weight: ["weight"],
  bias: ["bias"],
  table: ["table", "weight"],
  gain: ["gain", "weight", "scale"],
  query: ["query", "query.weight"],
  key: ["key", "key.weight"],
  value: ["value", "value.weight"],
  output: ["output", "output.weight"],
  gate: ["gate", "gate.weight"],
  up: ["up", "up.weight"],
  down: ["down", "down.weight"],
};

/**
 * Match each graph weight to a measured tensor and return the graph with measured variances.
 * Matching rule, in order: `names["<layer>/<weight>"]` names the tensor exactly; `names["<layer>"]` names the tensor
 * of the layer's first weight, or a prefix that replaces the layer name below; otherwise `<layer>.<ending>` for the
 * weight's endings (dense `weight`/`bias`; embedding `table` or `weight`; norm `gain`, `weight` or `scale`;
 * attention `query`, `key`, `value`, `output` with or without `.weight`; gated feed-forward `gate`, `up`, `down`),
 * exactly, or as the unique tensor ending in `.<layer>.<ending>` (a model prefix). A tensor must hold as many
 * elements as the weight.
 */
export function calibrateGraph(graph: Graph, data: WeightFileData, names: Readonly<Record<string, string>> = {}): WeightCalibration {
  const byName = new Map<string, TensorMeasure[]>();
  for (const t of data.tensors) byName.set(t.name, [...(byName.get(t.name) ?? []), t]);
  // tensor → the weight id that took it
  const used = new Map<TensorMeasure, string>();
  const matches: WeightMatch[] = [];
  const unmatched: WeightCalibration["unmatched"] = [];
  const issues: ScanIssue[] = [...data.issues];
  const measured: Record<string, TensorMeasure> = {};

  const find = (candidate: string, suffix: boolean): TensorMeasure | undefined => {
    const exact = byName.get(candidate);
    if (exact && exact.length > 0) return exact[0];
    if (!suffix) return undefined;
    const ending = `.${candidate}`;
    const found = data.tensors.filter((t) => t.name.endsWith(ending));
    return found.length === 1 ? found[0] : undefined;
  };

  const rewriteLayer = (layer: GraphLayer): GraphLayer => {
    const weights = layer.weights.map((w, index): GraphWeight => {
      const id = weightTensorId(layer.name, w.name);
      const tried: string[] = [];
      let rule: MatchRule = "default";
      let tensor: TensorMeasure | undefined;
      // own keys only: a layer named "toString" or "constructor" must not find Object.prototype's members
      const exactName = Object.hasOwn(names, `${layer.name}/${w.name}`) ? names[`${layer.name}/${w.name}`] : undefined;
      const mapped = Object.hasOwn(names, layer.name) ? names[layer.name] : undefined;
      if (exactName !== undefined) {
        rule = "names";
        tried.push(exactName);
        tensor = find(exactName, false);
      } else {
        if (mapped !== undefined && index === 0) {
          tried.push(mapped);
          tensor = find(mapped, false);
          if (tensor) rule = "names";
        }
        if (!tensor) {
          const prefix = mapped ?? layer.name;
          rule = mapped !== undefined ? "names" : "default";
          for (const ending of ALIASES[w.name] ?? [w.name]) {
            const candidate = `${prefix}.${ending}`;
            tried.push(candidate);
            tensor = find(candidate, mapped === undefined);
            if (tensor) break;
          }
        }
      }
      let rejected: RejectedMatch | undefined;
      const usedBy = tensor && used.get(tensor);
      // a tensor named for this weight in `names` may serve several weights (tied weights, e.g. an embedding table
      // shared with the output layer: the user says so); one found by the default rule is taken once
      const tied = usedBy !== undefined && rule === "names";
      if (tensor && usedBy !== undefined && !tied) {
        rejected = { ...sizes(tensor, w), reason: "used", usedBy };
        issues.push({ file: tensor.file, tensor: tensor.name, message: `already used for ${usedBy}; not used again for ${id}` });
        tensor = undefined;
      }
      if (tensor && tensor.elements !== w.elements) {
        rejected = { ...sizes(tensor, w), reason: "elements" };
        issues.push({ file: tensor.file, tensor: tensor.name, message: `${elementsDetail(id, rejected)}; not used` });
        tensor = undefined;
      }
      if (!tensor) {
        unmatched.push(rejected ? { layer: layer.name, weight: w.name, id, tried, rejected } : { layer: layer.name, weight: w.name, id, tried });
        return w;
      }
      if (!tied) used.set(tensor, id);
      measured[id] = tensor;
      const match: WeightMatch = { layer: layer.name, weight: w.name, id, file: tensor.file, tensor: tensor.name, rule, elements: tensor.elements, rms: tensor.rms };
      const notes: string[] = [];
      if (tied) notes.push(`shared with ${usedBy} (named in measured.names)`);
      if (tensor.shape.join(",") !== w.shape.join(",")) {
        notes.push(`shape [${tensor.shape.join(", ")}] differs from the spec's [${w.shape.join(", ")}] (same element count)`);
      }
      if (notes.length > 0) match.note = notes.join("; ");
      matches.push(match);
      // the engine's variance is the elements' second moment (fan_in·var_w rule), so a measured rms² replaces it
      const secondMoment = tensor.rms * tensor.rms;
      const rewritten: GraphWeight = { ...w, variance: secondMoment };
      if (w.distribution === "constant") rewritten.value = tensor.rms;
      else if (w.distribution === "zeros" && secondMoment > 0) rewritten.distribution = "normal";
      return rewritten;
    });
    const out: GraphLayer = { ...layer, weights };
    if (layer.branch) out.branch = layer.branch.map(rewriteLayer);
    return out;
  };

  const calibrated: Graph = { ...graph, layers: graph.layers.map(rewriteLayer) };
  const unused = data.tensors.filter((t) => !used.has(t)).map((t) => ({ file: t.file, tensor: t.name }));
  return { graph: calibrated, matches, unmatched, unused, issues, measured };
}

// -------------------------------------------------------------------------------------------------
// marking a prediction

/** What {@link applyMeasurements} did to a prediction. */
export interface MeasurementReport {
  /** tensor ids whose profiles are measured */
  measured: string[];
  /** the recorded rows no tensor of the prediction took, each with the tensors it could mean when several fit */
  unusedStatistics: UnusedStatistic[];
}

/** A recorded row no tensor took: its tensor and role as written, where it was read, the tensors it could mean. */
export interface UnusedStatistic {
  tensor: string;
  role: RecordedStatistic["role"];
  /** where it was read: the CSV line, or the JSON path */
  at: string;
  /** the tensors of that layer with that role when there are several (the row must name one by its id); empty when none fits */
  candidates: string[];
  /** the row in words: `stage (activation-gradient, line 3) fits 2 tensors (a, b): name one by its id` */
  sentence: string;
}

/** A tail this much heavier than a Gaussian's expected maximum is modelled as log-normal. */
const HEAVY_TAIL = 1.25;

/**
 * The magnitude profile of a measured tensor: zero mass and rms of the nonzero elements as measured; shape
 * "bounded" (up to the measured max) for norm gains, otherwise Gaussian, or log-normal when the measured maximum
 * lies well above a Gaussian's expected maximum over as many elements (SCIENCE.md §4, expected maximum of n draws).
 */
export function measuredProfile(measure: Pick<TensorMeasure, "elements" | "zeros" | "rmsNonzero" | "maxAbs">, gain = false): MagnitudeProfile {
  const nonzero = measure.elements - measure.zeros;
  const zeroFraction = measure.elements > 0 ? measure.zeros / measure.elements : 1;
  const rms = measure.rmsNonzero;
  const profile: MagnitudeProfile = { elements: measure.elements, zeroFraction, shape: "gaussian", rms, log2Spread: 0 };
  const max = measure.maxAbs ?? 0;
  if (gain && max > 0) return { ...profile, shape: "bounded", bound: max };
  return withTail(profile, max, nonzero);
}

/**
 * Gaussian, or log-normal with the element spread that puts the expected maximum of `count` draws at `max`:
 * for log2|x| ~ N(m, s²) with rms fixed, m = log2(rms) − s²·ln2, and log2(max) ≈ m + s·z with z the Gaussian
 * quantile at 1 − 1/count; the smaller root of ln2·s² − z·s + log2(max/rms) = 0 (moments of the log-normal).
 */
function withTail(profile: MagnitudeProfile, max: number, count: number): MagnitudeProfile {
  if (!(max > 0) || !(profile.rms > 0) || count < 2) return profile;
  const gaussianMax = profile.rms * expectedMaxAbsNormal(count);
  if (max <= HEAVY_TAIL * gaussianMax) return profile;
  const z = normalUpperQuantile(1 / count);
  const excess = Math.log2(max / profile.rms);
  const discriminant = z * z - 4 * Math.LN2 * excess;
  const spread = discriminant >= 0 ? (z - Math.sqrt(discriminant)) / (2 * Math.LN2) : z / (2 * Math.LN2);
  return { ...profile, shape: "log-normal", elementLog2Spread: spread };
}

/**
 * Replace the profiles of measured tensors in a prediction and mark them `source: "measured"`.
 * - weights matched by {@link calibrateGraph}: the start profile becomes the measured one (the graph already carried the
 *   measured variance through the engine, so every downstream tensor reflects it); the end profile keeps the
 *   engine's growth over the horizon, applied to the measured scale.
 * - recorded statistics: the named tensor's start profile becomes the recorded one, and its end profile is scaled by
 *   the same ratio; tensors downstream keep their predictions.
 */
export function applyMeasurements(
  prediction: Prediction,
  calibration?: Pick<WeightCalibration, "measured"> & Partial<WeightCalibration>,
  statistics: readonly RecordedStatistic[] = [],
  statisticsFile?: string,
): { prediction: Prediction; report: MeasurementReport } {
  const replaced = new Map<string, { start: MagnitudeProfile }>();
  if (calibration) {
    for (const tensor of prediction.tensors) {
      const measure = calibration.measured[tensor.id];
      if (measure) replaced.set(tensor.id, { start: measuredProfile(measure, tensor.family.endsWith("norm") && tensor.id.endsWith(":gain")) });
    }
  }
  const unusedStatistics: UnusedStatistic[] = [];
  for (const statistic of statistics) {
    const found = findTensor(prediction.tensors, statistic);
    if (Array.isArray(found)) {
      const candidates = found;
      const head = `${statistic.tensor} (${statistic.role}, ${statistic.at})`;
      const sentence = candidates.length === 0 ? `${head} matches no tensor` : `${head} fits ${candidates.length} tensors (${candidates.join(", ")}): name one by its id`;
      unusedStatistics.push({ tensor: statistic.tensor, role: statistic.role, at: statistic.at, candidates, sentence });
      continue;
    }
    replaced.set(found.id, { start: recordedProfile(statistic, found) });
  }
  const tensors = prediction.tensors.map((tensor): TensorPrediction => {
    const change = replaced.get(tensor.id);
    if (!change) return tensor;
    const ratio = tensor.start.rms > 0 ? change.start.rms / tensor.start.rms : 1;
    const end: MagnitudeProfile = { ...tensor.end, rms: tensor.end.rms * ratio };
    return {
      id: tensor.id,
      layer: tensor.layer,
      layerIndex: tensor.layerIndex,
      family: tensor.family,
      role: tensor.role,
      slot: tensor.slot,
      shape: tensor.shape,
      start: change.start,
      end,
      ledger: tensor.ledger,
      source: "measured",
    };
  });
  const report: MeasurementReport = { measured: [...replaced.keys()], unusedStatistics };
  const notes = measurementNotes(calibration, statistics, statisticsFile, report);
  return { prediction: { ...prediction, tensors, assumptions: [...prediction.assumptions, ...notes] }, report };
}

/** Up to `limit` names, then "and N more". */
function listed(names: readonly string[], limit = 8): string {
  const shown = names.slice(0, limit).join(", ");
  return names.length > limit ? `${shown} and ${names.length - limit} more` : shown;
}

/** `fc1.weight has 128 elements [8, 16], it needs 64 [4, 16]`, or `fc1.weight is already used for fc0/weight` */
function rejectedWords(r: RejectedMatch): string {
  return r.reason === "used"
    ? `${r.tensor} is already used for ${r.usedBy}`
    : `${r.tensor} has ${r.elements} elements [${r.shape.join(", ")}], it needs ${r.weightElements} [${r.weightShape.join(", ")}]`;
}

/** Sentences for the check's assumptions: what was matched and measured, what stayed predicted. */
function measurementNotes(
  calibration: Partial<WeightCalibration> | undefined,
  statistics: readonly RecordedStatistic[],
  statisticsFile: string | undefined,
  report: MeasurementReport,
): string[] {
  const notes: string[] = [];
  if (calibration?.matches) {
    const unmatched = calibration.unmatched ?? [];
    const total = calibration.matches.length + unmatched.length;
    const files = new Set(calibration.matches.map((m) => m.file));
    notes.push(
      calibration.matches.length === 0
        ? `No weight of the network is measured (0 of ${total} weights found a usable tensor in the weight files); every weight keeps the spec's initialisation.`
        : `Weights measured from ${listed([...files], 3)} (${calibration.matches.length} of ${total} weight${total === 1 ? "" : "s"}): ${listed(calibration.matches.map(matchWords))}.`,
    );
    const rejected = unmatched.filter((u) => u.rejected !== undefined);
    if (rejected.length > 0) {
      const one = rejected.length === 1;
      notes.push(
        `${rejected.length} weight${one ? " keeps" : "s keep"} the spec's initialisation because the tensor ${one ? "it" : "they"} matched cannot be used: ${listed(rejected.map((u) => `${u.id} (${rejectedWords(u.rejected!)})`))}.`,
      );
    }
    const missing = unmatched.filter((u) => u.rejected === undefined);
    if (missing.length > 0) {
      notes.push(`${missing.length} weight${missing.length === 1 ? " keeps" : "s keep"} the spec's initialisation (no tensor matched): ${listed(missing.map((u) => u.id))}.`);
    }
    // a tensor rejected above is said there, not again
    const explained = new Set(rejected.map((u) => `${u.rejected!.file}\0${u.rejected!.tensor}`));
    const unused = (calibration.unused ?? []).filter((u) => !explained.has(`${u.file}\0${u.tensor}`));
    if (unused.length > 0) {
      notes.push(`${unused.length} tensor${unused.length === 1 ? " of the weight files is" : "s of the weight files are"} not used: ${listed(unused.map((u) => u.tensor))}.`);
    }
  }
  if (statistics.length > 0) {
    const matched = statistics.length - report.unusedStatistics.length;
    notes.push(
      `Recorded statistics${statisticsFile ? ` from ${statisticsFile}` : ""} replace ${matched} profile${matched === 1 ? "" : "s"}; tensors downstream of them keep their predictions.`,
    );
    if (report.unusedStatistics.length > 0) {
      notes.push(`${report.unusedStatistics.length} recorded row${report.unusedStatistics.length === 1 ? " is" : "s are"} not used: ${listed(report.unusedStatistics.map((u) => u.sentence))}.`);
    }
  }
  if (report.measured.length > 0) {
    notes.push(`Measured profiles: ${listed(report.measured)}; every other profile is predicted.`);
  }
  return notes;
}

/**
 * The tensor a recorded row names (by id, or by layer and role when one tensor fits), else the ids of the tensors that
 * fit: several, or none.
 */
function findTensor(tensors: readonly TensorPrediction[], statistic: RecordedStatistic): TensorPrediction | string[] {
  const byId = tensors.find((t) => t.id === statistic.tensor);
  if (byId) return byId.role === statistic.role ? byId : [];
  const candidates = tensors.filter((t) => t.layer === statistic.tensor && t.role === statistic.role);
  return candidates.length === 1 ? candidates[0]! : candidates.map((t) => t.id);
}

/** The profile a recorded statistic gives: rms over all elements, zero share (default: the prediction's), tail shape. */
export function recordedProfile(statistic: RecordedStatistic, predicted: TensorPrediction): MagnitudeProfile {
  const zeroFraction = statistic.zeroFraction ?? predicted.start.zeroFraction;
  const elements = statistic.elements ?? predicted.start.elements;
  const rmsNonzero = zeroFraction < 1 ? statistic.rms / Math.sqrt(1 - zeroFraction) : 0;
  const base: MagnitudeProfile = { elements, zeroFraction, shape: "gaussian", rms: rmsNonzero, log2Spread: 0 };
  if (statistic.max !== undefined) return withTail(base, statistic.max, Math.round(elements * (1 - zeroFraction)));
  // without a maximum, the spread of the quantiles: |x| Gaussian has q99/q50 = 2.5758/0.6745 = 3.82
  const q50 = statistic.quantiles.find((q) => q.q === 0.5)?.magnitude;
  const q99 = statistic.quantiles.find((q) => q.q === 0.99)?.magnitude;
  if (q50 !== undefined && q99 !== undefined && q50 > 0 && q99 / q50 > HEAVY_TAIL * (2.5758293035489 / 0.6744897501960817)) {
    // log-normal |x|: q_p = 2^(m + s·z_p), so s = log2(q99/q50) / z_0.99 with z_0.99 = 2.3263478740408408
    return { ...base, shape: "log-normal", elementLog2Spread: Math.log2(q99 / q50) / 2.3263478740408408 };
  }
  return base;
}

/** One matched weight in the notes: `fc2/weight ← shared (names; shared with fc1/weight …)`. */
function matchWords(m: WeightMatch): string {
  const said = [...(m.rule === "names" ? ["names"] : []), ...(m.note === undefined ? [] : [m.note])];
  return `${m.id} ← ${m.tensor}${said.length > 0 ? ` (${said.join("; ")})` : ""}`;
}
