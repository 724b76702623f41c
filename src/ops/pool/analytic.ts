/**
 * Average and max pooling over windows of k elements (size² pixels of an image, or `size` positions).
 * Average: the part the window's elements share (their position correlation) passes, the rest shrinks by 1/k. Max: order statistics of k independent Gaussian elements
 * (Gumbel 1958 for the large-k limit; computed here by quadrature for the exact k).
 * Backward: average spreads each gradient over its k inputs (÷k²), the same value to every pixel of a window, so
 * the input gradient is fully correlated within windows; max routes it to the arg-max only, so the input gradient is
 * exactly zero elsewhere.
 */
import { positionCount, sampleElements } from "../../graph/shape.js";
import type { GraphLayer } from "../../graph/types.js";
import type { PoolLayer } from "../../spec/types.js";
import { NO_FACTORS, eulerShare, factor, fmt, gradientCopy, gradientSum, positionCorrelationOf, sampleCorrelationOf, sharedOf } from "../common.js";
import { normalCdf, normalPdf } from "../../numeric/normal.js";
import type { Text, AnalyticRule, BackwardResult, ChannelSpread, ForwardResult, Gradient, OpContext, Signal, WindowGate } from "../types.js";
import { copiedUnit } from "../unit-pairs.js";

const AVERAGE_SOURCE = "mean of k elements: the part they share passes, the rest ÷ k (variance of a mean; common practice)";
const MAX_SOURCE = "maximum of k independent Gaussian elements (order statistics, computed by quadrature)";
const OFFSET_SOURCE = "maximum of k Gaussian elements about a mean their channel shares (order statistics, by quadrature)";

/** Window length in elements. */
export function windowElements(layer: GraphLayer): number {
  const size = (layer.spec as PoolLayer).size;
  return layer.input.layout === "image" ? size * size : size;
}

/**
 * The grid both quadratures below share: x on [−10, 10] in 4,000 steps, φ(x), Φ(x) and Simpson's weights. Φ by cumulative
 * Simpson would drift; the running trapezoid of φ (capped at 1) is accurate to ~1e-9 at this step.
 */
interface NormalGrid {
  steps: number;
  h: number;
  xs: Float64Array;
  pdf: Float64Array;
  cdf: Float64Array;
  weight: Float64Array;
}

let normalGridCache: NormalGrid | undefined;

function normalGrid(): NormalGrid {
  if (normalGridCache !== undefined) return normalGridCache;
  const steps = 4000;
  const h = 20 / steps;
  const xs = new Float64Array(steps + 1);
  const pdf = new Float64Array(steps + 1);
  const cdf = new Float64Array(steps + 1);
  const weight = new Float64Array(steps + 1);
  for (let i = 0; i <= steps; i++) {
    xs[i] = -10 + i * h;
    pdf[i] = Math.exp(-0.5 * xs[i]! * xs[i]!) / Math.sqrt(2 * Math.PI);
    if (i > 0) cdf[i] = Math.min(cdf[i - 1]! + 0.5 * h * (pdf[i]! + pdf[i - 1]!), 1);
    weight[i] = ((i === 0 || i === steps ? 1 : i % 2 === 1 ? 4 : 2) * h) / 3;
  }
  normalGridCache = { steps, h, xs, pdf, cdf, weight };
  return normalGridCache;
}

const orderCache = new Map<number, { m1: number; m2: number; m1Positive: number; m2Positive: number }>();

/**
 * Moments of M = max of k standard normals: E[M], E[M²], and E[max(M, 0)] and E[max(M, 0)²] (the maximum of k ReLU
 * outputs), from the density k·φ(x)·Φ(x)^(k−1), Simpson's rule on the shared grid. maxOfShared(k, k) is the same
 * integral, but its products run in another order: 67 of these 256 moments for k ≤ 64 differ in the last bits (≤ 1.8e-15).
 */
export function maxOfNormals(k: number): { m1: number; m2: number; m1Positive: number; m2Positive: number } {
  const hit = orderCache.get(k);
  if (hit !== undefined) return hit;
  const { steps, xs, pdf, cdf, weight } = normalGrid();
  let m1 = 0;
  let m2 = 0;
  let m1Positive = 0;
  let m2Positive = 0;
  for (let i = 0; i <= steps; i++) {
    const x = xs[i]!;
    const density = k * pdf[i]! * Math.pow(cdf[i]!, k - 1);
    m1 += weight[i]! * x * density;
    m2 += weight[i]! * x * x * density;
    if (x > 0) {
      m1Positive += weight[i]! * x * density;
      m2Positive += weight[i]! * x * x * density;
    }
  }
  const result = { m1, m2, m1Positive, m2Positive };
  orderCache.set(k, result);
  return result;
}

/** What max-pool's backward needs: its output's moments. */
export interface PoolStash {
  output: Signal;
  /** where the channels' means set them: the chance a window's maximum is on a rectifier's off side, and pairs on */
  gate: WindowGate | undefined;
}

export const poolRule: AnalyticRule<PoolStash | null> = {
  forward(ctx: OpContext, layer: GraphLayer, input: Signal): ForwardResult<PoolStash | null> {
    const k = windowElements(layer);
    const variance = Math.max(input.q - input.mean * input.mean, 0);
    let q: number;
    let mean = input.mean;
    let zeroFraction = 0;
    let rule: string;
    let source: string;
    if (layer.family === "average-pool") {
      // what the pixels of a window share passes; only the rest averages down (variance of a mean; common practice)
      const shared = Math.min(positionCorrelationOf(input) * input.q, input.q);
      q = (input.q - shared) / k + shared;
      zeroFraction = Math.pow(input.zeroFraction, k);
      // the printed ratio is q_out/q_in, not the variance's ÷ k: say what passes whole
      rule = `average of ${k}: shared part kept, rest ÷ ${k}`;
      source = AVERAGE_SOURCE;
    } else {
      const order = maxOfNormals(k);
      const leaky = input.rectifier;
      if (leaky !== undefined) {
        // max φ(x) = φ(max x) for an increasing φ: the max of k pre-activations, its positive side kept and its negative
        // side times the slope a (own algebra on the order statistic above)
        const a = leaky.slope;
        q = leaky.preQ * (order.m2Positive + a * a * (order.m2 - order.m2Positive));
        mean = Math.sqrt(leaky.preQ) * (order.m1Positive + a * (order.m1 - order.m1Positive));
      } else if (input.shape === "half-gaussian" && input.zeroFraction >= 0.5) {
        // the max of k ReLU outputs is the ReLU of the max of the k pre-activations
        const preVariance = input.q / (1 - input.zeroFraction);
        q = preVariance * order.m2Positive;
        mean = Math.sqrt(preVariance) * order.m1;
        zeroFraction = Math.pow(input.zeroFraction, k);
      } else {
        const sigma = Math.sqrt(variance);
        q = input.mean * input.mean + 2 * input.mean * sigma * order.m1 + variance * order.m2;
        mean = input.mean + sigma * order.m1;
      }
      rule =
        leaky !== undefined
          ? `max of ${k} leaky-ReLU outputs: E[φ(M)²]/E[x²]`
          : input.shape === "half-gaussian" && input.zeroFraction >= 0.5
            ? `max of ${k} ReLU outputs: E[M²]/E[x²]`
            : `max of ${k} Gaussians: E[M²]/E[x²]`;
      source = MAX_SOURCE;
    }
    // a rectifier whose channels' means differ: its windows' maxima, their zeros and pairs with those means
    const spread = layer.family === "max-pool" ? input.channelSpread : undefined;
    const offset = spread !== undefined && spread.q === input.q && spread.within > 0 && (spread.between > 0 || spread.position > 0) ? maxOfOffsetWindows(k, spread) : undefined;
    let shared = layer.family === "average-pool" ? Math.min(sharedOf(input), q) : mean * mean;
    if (offset !== undefined) {
      q = offset.q;
      mean = offset.mean;
      zeroFraction = spread!.slope === 0 ? offset.off : 0;
      shared = Math.min(offset.sampleShared, q);
      rule = `max of ${k} ${spread!.slope === 0 ? "ReLU" : "leaky-ReLU"} outputs, channel means apart: E[φ(M)²]/E[x²]`;
      source = OFFSET_SOURCE;
    }
    let logVar = input.logVar;
    if (offset !== undefined && spread!.unit !== undefined) {
      // the rectifier's channel sums spread by κ per channel mostly through the channel's mean; the window maxima
      // spread by the share offsetChannelKappas gives of it (own algebra)
      const kappas = offsetChannelKappas(k, spread!);
      if (kappas.rectifier > 0) logVar = Math.max(logVar + ((kappas.maxima / kappas.rectifier - 1) * spread!.unit.kappa) / spread!.unit.width, 0);
    }
    const output: Signal = {
      q,
      mean,
      shared,
      zeroFraction,
      shape: "gaussian",
      logVar,
      gaussian: false,
    };
    if (layer.family === "max-pool" && q > 0) {
      // overlapping windows share inputs, so their maxima co-vary beyond the mean: the pairs of output pixels average
      // mean² plus each overlapping pair's covariance (own algebra; the covariance by quadrature, maxOfShared)
      // a leaky ReLU's windows: φ of the pre-activations' maxima, φ(m) = max(m, 0) + a·min(m, 0) (as the order statistic)
      const leaky = input.rectifier;
      const rectified = leaky !== undefined || (input.shape === "half-gaussian" && input.zeroFraction >= 0.5);
      const scale = leaky !== undefined ? leaky.preQ : rectified ? input.q / (1 - input.zeroFraction) : variance;
      const pixels = positionCount(layer.output);
      const covariances = overlapSum(layer, (overlap) => {
        const m = maxOfShared(k, overlap, rectified, leaky?.slope ?? 0);
        return m.cross - m.mean * m.mean;
      });
      if (offset !== undefined) {
        // two windows of one sample share the channel's mean and the sample's part; overlapping ones also their common
        // pixels, whose covariance about that is taken at the part the pixels do not share (own algebra, to first order)
        const apart = spread!.within * (1 - spread!.position);
        if (pixels > 1) output.positionCorrelation = Math.min(Math.max(offset.positionShared + (apart * Math.max(covariances, 0)) / (pixels * (pixels - 1)), 0) / q, 1);
      } else if (pixels > 1 && covariances > 0) output.positionCorrelation = Math.min((mean * mean + (scale * covariances) / (pixels * (pixels - 1))) / q, 1);
    }
    return {
      output,
      factors: ctx.ledger ? [factor(input.q > 0 ? q / input.q : 0, () => `${rule} = ${fmt(input.q > 0 ? q / input.q : 0)}`, source)] : NO_FACTORS,
      role: "activation",
      inner: [],
      hazards: [],
      stash: { output, gate: offset === undefined ? undefined : { off: offset.off, bothOnSamples: offset.sampleOn, bothOnPositions: offset.positionOn } },
    };
  },
  backward(ctx: OpContext, layer: GraphLayer, stash: PoolStash | null, output: Gradient): BackwardResult {
    const k = windowElements(layer);
    const share = sampleElements(layer.output) / sampleElements(layer.input);
    if (layer.family === "average-pool") {
      const ratio = share / k;
      // a pair of input pixels shares all of one output gradient when in one window (k − 1 partners of P − 1), else what
      // two output pixels share: the mean pairwise correlation of the copied gradient
      const pixels = positionCount(layer.input);
      const within = Math.min(k, pixels) - 1;
      const positionCorrelation = pixels > 1 ? (within + (pixels - 1 - within) * positionCorrelationOf(output)) / (pixels - 1) : positionCorrelationOf(output);
      const input = gradientCopy(output);
      input.q = output.q * ratio;
      input.shared = (output.shared ?? 0) * ratio;
      input.positionCorrelation = positionCorrelation;
      // two samples' pixels in one window share one output pixel of two samples; in two windows, two output pixels
      if (output.crossCorrelation !== undefined && pixels > 1) {
        input.crossCorrelation = (within * sampleCorrelationOf(output) + (pixels - 1 - within) * output.crossCorrelation) / (pixels - 1);
      }
      input.zeroFraction = share * k >= 1 ? output.zeroFraction : 1 - share * k;
      // a pool's sums over a channel's pixels keep the gradient's (and its shared part's) own draw-to-draw spread:
      // each output gradient goes to its window's pixels whole (routing) or in k equal parts (own algebra)
      if (output.sharedLogVar !== undefined) input.sharedLogVar = output.sharedLogVar;
      // a rectifier below then gates a unit's copies, each by its own pixel: its sum's pairs as copiedUnit says
      const fresh = output.fresh;
      if (fresh !== undefined) input.fresh = { width: fresh.width, kappa: fresh.kappa, unit: copiedUnit(fresh.unit, fresh.kappa, ctx.batch, k, pixels) };
      return {
        input,
        factors: ctx.ledger ? [factor(ratio, () => `average of ${k}: each input gets 1/${k} of ${coveringWords(share * k)}`, AVERAGE_SOURCE)] : NO_FACTORS,
        inner: [],
        weightGradients: [],
      };
    }
    // the gradient reaches the distinct pixels some window picks: fewer than the windows when they overlap
    const spec = layer.spec as PoolLayer;
    const reached = Math.min(spec.stride >= spec.size ? share : pickedPositions(layer) / positionCount(layer.input), 1);
    // routing moves each output gradient to one input, so sums over pixels and batch keep their second moment while
    // the terms multiply by 1/share: the mean pairwise correlations shrink by share (by (P_out − 1)/(P_in − 1) for pixels)
    const pixelsIn = positionCount(layer.input);
    const pixelsOut = positionCount(layer.output);
    const positionCorrelation = pixelsIn > 1 ? (positionCorrelationOf(output) * (pixelsOut - 1)) / (pixelsIn - 1) : positionCorrelationOf(output);
    const input = gradientCopy(output);
    input.q = output.q * share;
    input.shared = (output.shared ?? 0) * share * share;
    input.positionCorrelation = positionCorrelation;
    // routing keeps each sample's sum over pixels: the pairs of two samples sum to what the output's do, P_out·ρ_sample +
    // P_out(P_out − 1)·ρ_cross, of which one position of two samples now holds share·ρ_sample per pixel
    if (output.crossCorrelation !== undefined && pixelsIn > 1) {
      input.crossCorrelation = (sampleCorrelationOf(output) * (1 - share) + (pixelsOut - 1) * output.crossCorrelation) / (pixelsIn - 1);
    }
    // overlapping windows pick one pixel when the maximum of their union lies in the overlap (chance overlap/union for
    // independent inputs): that pixel gets g + g', adding 2·E[g·g'] per such pair to the summed squares; sums over a
    // sample's pixels are unchanged, so the pair correlations shrink to keep them (own algebra: arg-max routing)
    const collisions = overlapCollisions(layer);
    const raw = pixelsOut > 0 ? 1 + (collisions * positionCorrelationOf(output)) / pixelsOut : 1;
    const growth = raw > 1 ? raw : 1;
    if (growth > 1) {
      input.q *= growth;
      if (pixelsIn > 1) input.positionCorrelation = ((1 + (pixelsIn - 1) * positionCorrelation) / growth - 1) / (pixelsIn - 1);
      if (input.crossCorrelation !== undefined) input.crossCorrelation /= growth;
    }
    input.zeroFraction = 1 - reached * (1 - output.zeroFraction);
    input.windowMaximum = k;
    // a window's maximum is off where its channel's mean sits low, more often than k independent inputs would be, and
    // the windows of a channel are on or off together
    input.windowGate = stash?.gate;
    if (output.sharedLogVar !== undefined) input.sharedLogVar = output.sharedLogVar;
    // Σ a·δ_a over the routed pixels is Σ p·g at the output (a pixel picked by two windows gets g + g', a = p = p'):
    // a per-channel sum of batch × pixels products, paired as a weight gradient's terms (own algebra)
    if (stash !== null) input.homogeneousSum = gradientSum(ctx.batch, pixelsOut, output, stash.output) + eulerShare(output, layer);
    return {
      input,
      factors: ctx.ledger
        ? [factor(share * growth, () => (growth > 1 ? `max of ${k}: the gradient goes to the arg-max only, windows picking one pixel add there (×${fmt(growth)})` : `max of ${k}: the gradient goes to the arg-max only`), MAX_SOURCE)]
        : NO_FACTORS,
      inner: [],
      weightGradients: [],
    };
  },
};

/**
 * Σ over ordered pairs of distinct output windows that overlap of f(overlap), the pixels (positions) they share; zero
 * without overlap (stride ≥ size).
 */
function overlapSum(layer: GraphLayer, f: (overlap: number) => number): number {
  const spec = layer.spec as PoolLayer;
  const size = spec.size;
  const stride = spec.stride;
  if (stride >= size) return 0;
  const image = layer.output.layout === "image";
  const rows = image ? (layer.output as { height: number }).height : 1;
  const columns = image ? (layer.output as { width: number }).width : positionCount(layer.output);
  const span = (d: number): number => Math.max(size - Math.abs(d) * stride, 0);
  const reach = Math.ceil(size / stride);
  let sum = 0;
  for (let a = image ? -reach : 0; a <= (image ? reach : 0); a++) {
    for (let b = -reach; b <= reach; b++) {
      if (a === 0 && b === 0) continue;
      const overlap = (image ? span(a) : 1) * span(b);
      if (overlap === 0) continue;
      const pairs = Math.max(rows - Math.abs(a), 0) * Math.max(columns - Math.abs(b), 0);
      if (pairs > 0) sum += pairs * f(overlap);
    }
  }
  return sum;
}

/**
 * Σ over ordered pairs of distinct output windows of the chance that both pick the same input pixel: overlap/union of
 * their pixels (the union's maximum, for independent inputs, lies in the overlap with that chance).
 */
function overlapCollisions(layer: GraphLayer): number {
  const k = windowElements(layer);
  return overlapSum(layer, (overlap) => overlap / (2 * k - overlap));
}

/** Per input row (or column) of `n`, the offsets i·stride − x of the windows that cover it, grouped: offsets → count. */
function coverClasses(n: number, windows: number, size: number, stride: number): Map<string, { offsets: number[]; count: number }> {
  const classes = new Map<string, { offsets: number[]; count: number }>();
  for (let x = 0; x < n; x++) {
    const offsets: number[] = [];
    for (let i = Math.max(Math.ceil((x - size + 1) / stride), 0); i < windows && i * stride <= x; i++) offsets.push(i * stride - x);
    const key = offsets.join(",");
    const hit = classes.get(key);
    if (hit === undefined) classes.set(key, { offsets, count: 1 });
    else hit.count++;
  }
  return classes;
}

const pickCache = new Map<string, number>();
/** Beyond this many windows over one pixel the unions of the exact sum run to thousands (24,168 for 6 × 6 at stride 1). */
const EXACT_WINDOWS = 16;

/**
 * The chance that some window picks a given pixel, for independent inputs of one continuous distribution: the windows
 * covering it sit at `rows` × `columns` offsets (sizeY × sizeX each). It is the largest of a union of windows with
 * chance 1/|union|, so by inclusion–exclusion P = Σ over nonempty sets S of those windows of (−1)^(|S|+1)/|∪S|; the
 * sets are summed by their union (each a row-wise interval, as every window holds the pixel), a subset recursion.
 */
export function pickChance(rows: readonly number[], columns: readonly number[], sizeY: number, sizeX: number): number {
  if (rows.length === 0 || columns.length === 0) return 0;
  const key = `${sizeY}x${sizeX}:${rows.join(",")}|${columns.join(",")}`;
  const hit = pickCache.get(key);
  if (hit !== undefined) return hit;
  if (rows.length * columns.length > EXACT_WINDOWS) {
    // too many unions: given the pixel's value v, the events "W's other pixels all lie below v" fall as the other
    // pixels rise, so they are positively correlated (Harris's inequality, Harris 1960, from memory) and
    // P(picked | v) ≤ 1 − Π_W (1 − F(v)^(|W|−1)); integrated over u = F(v) by Simpson's rule, an upper bound
    const steps = 400;
    let bound = 0;
    for (let i = 0; i <= steps; i++) {
      const u = i / steps;
      const none = Math.pow(1 - Math.pow(u, sizeY * sizeX - 1), rows.length * columns.length);
      bound += (((i === 0 || i === steps ? 1 : i % 2 === 1 ? 4 : 2) / (3 * steps)) * (1 - none));
    }
    pickCache.set(key, bound);
    return bound;
  }
  // rows of the union relative to the pixel, from the highest window's top; intervals [lo, hi] of columns, empty lo > hi
  const top = Math.min(...rows);
  const height = Math.max(...rows) + sizeY - top;
  let states = new Map<string, { lo: Int32Array; hi: Int32Array; sign: number }>();
  states.set("", { lo: new Int32Array(height).fill(1), hi: new Int32Array(height).fill(0), sign: 1 });
  for (const oy of rows) {
    for (const ox of columns) {
      const next = new Map(states);
      for (const state of states.values()) {
        const lo = state.lo.slice();
        const hi = state.hi.slice();
        for (let r = oy - top; r < oy - top + sizeY; r++) {
          const empty = lo[r]! > hi[r]!;
          lo[r] = empty ? ox : Math.min(lo[r]!, ox);
          hi[r] = empty ? ox + sizeX - 1 : Math.max(hi[r]!, ox + sizeX - 1);
        }
        // lo ≥ −size and hi < size: one character each
        const id = String.fromCharCode(...lo.map((v) => v + 64), ...hi.map((v) => v + 64));
        const entry = next.get(id);
        // a set with W added flips the sign (−1)^|S|
        if (entry === undefined) next.set(id, { lo, hi, sign: -state.sign });
        else next.set(id, { lo, hi, sign: entry.sign - state.sign });
      }
      // a union whose sets cancel adds nothing now or later (what a window adds depends only on the union)
      for (const [id, state] of next) if (state.sign === 0) next.delete(id);
      states = next;
    }
  }
  let chance = 0;
  for (const [id, state] of states) {
    if (id === "" || state.sign === 0) continue;
    let area = 0;
    for (let r = 0; r < height; r++) if (state.lo[r]! <= state.hi[r]!) area += state.hi[r]! - state.lo[r]! + 1;
    chance -= state.sign / area;
  }
  pickCache.set(key, chance);
  return chance;
}

/**
 * The expected number of distinct input pixels (positions) of one plane that some window picks as its maximum, for
 * independent inputs: the windows' count less their shared picks, Σ over pixels of pickChance (own algebra).
 */
export function pickedPositions(layer: GraphLayer): number {
  const spec = layer.spec as PoolLayer;
  const image = layer.input.layout === "image" && layer.output.layout === "image";
  const rowsIn = image ? (layer.input as { height: number }).height : 1;
  const rowsOut = image ? (layer.output as { height: number }).height : 1;
  const columnsIn = image ? (layer.input as { width: number }).width : positionCount(layer.input);
  const columnsOut = image ? (layer.output as { width: number }).width : positionCount(layer.output);
  if (spec.stride >= spec.size) return rowsOut * columnsOut;
  const sizeY = image ? spec.size : 1;
  const strideY = image ? spec.stride : 1;
  const key = `${rowsIn}:${rowsOut}:${columnsIn}:${columnsOut}:${sizeY}:${strideY}:${spec.size}:${spec.stride}`;
  const hit = pickedCache.get(key);
  if (hit !== undefined) return hit;
  let picked = 0;
  for (const row of coverClasses(rowsIn, rowsOut, sizeY, strideY).values()) {
    for (const column of coverClasses(columnsIn, columnsOut, spec.size, spec.stride).values()) {
      picked += row.count * column.count * pickChance(row.offsets, column.offsets, sizeY, spec.size);
    }
  }
  pickedCache.set(key, picked);
  return picked;
}

const pickedCache = new Map<string, number>();

const sharedCache = new Map<string, { mean: number; cross: number }>();

/**
 * For two windows of k independent standard normals sharing `shared` of them: E[M] and E[M_A·M_B] of their maxima (or
 * of the maxima's ReLU, `rectified`, or leaky ReLU of negative `slope` a). With U the shared part's maximum and X, Y the
 * others', M_A = max(U, X), and X, Y independent given U:
 * E[M_A·M_B] = ∫ f_U(u)·E[max(u, X)]² du, E[max(u, X)] = u·F_X(u) + ∫_u^∞ x dF_X(x) (order statistics; Simpson's rule
 * on the grid maxOfNormals uses, normalGrid).
 */
export function maxOfShared(k: number, shared: number, rectified: boolean, slope = 0): { mean: number; cross: number } {
  const key = `${k}:${shared}:${rectified}:${slope}`;
  const hit = sharedCache.get(key);
  if (hit !== undefined) return hit;
  const { steps, h, xs, pdf, cdf, weight: simpson } = normalGrid();
  const others = k - shared;
  // tail[i] = ∫_{x_i}^∞ x dF_X(x), F_X = Φ^others, by the trapezoid from the top
  const tail = new Float64Array(steps + 1);
  const density = (i: number): number => (others > 0 ? others * pdf[i]! * Math.pow(cdf[i]!, others - 1) : 0);
  for (let i = steps - 1; i >= 0; i--) tail[i] = tail[i + 1]! + 0.5 * h * (xs[i]! * density(i) + xs[i + 1]! * density(i + 1));
  const zero = Math.round(10 / h);
  let mean = 0;
  let cross = 0;
  for (let i = 0; i <= steps; i++) {
    const j = rectified && i < zero ? zero : i;
    let g = xs[j]! * Math.pow(cdf[j]!, others) + tail[j]!;
    // φ(m) = max(m, 0) + a·(m − max(m, 0)) is linear in the two, so E[φ(max(u, X))] is too
    if (rectified && slope !== 0) g += slope * (xs[i]! * Math.pow(cdf[i]!, others) + tail[i]! - g);
    const fU = shared * pdf[i]! * Math.pow(cdf[i]!, shared - 1);
    const weight = simpson[i]!;
    mean += weight * fU * g;
    cross += weight * fU * g * g;
  }
  const result = { mean, cross };
  sharedCache.set(key, result);
  return result;
}

// the output gradients an average pool passes back to one input: one where the windows tile the input, else as many
// windows as cover an input on average
function coveringWords(windows: number): string {
  return windows === 1 ? "the one output gradient whose window covers it" : `each of the ${fmt(windows)} output gradients whose windows cover it, on average`;
}

/**
 * Moments of a rectifier's window maxima when its input is μ_c + e: μ_c ~ N(0, between) the channel's mean, the same
 * at every pixel and sample of the channel, and e of variance `within`, a share `position` of it common to a sample's
 * pixels. A window's k pre-activations are then S + t·z_i, S ~ N(0, between + position·within) the part they share and
 * t² = (1 − position)·within, and max φ = φ(S + t·max z) for the increasing φ(x) = max(x, 0) + a·min(x, 0). Given
 * m = t·max z, the Gaussian S gives E[(m + S)⁺] = mΦ(m/σ) + σφ(m/σ) and E[((m + S)⁺)²] = (m² + σ²)Φ(m/σ) + mσφ(m/σ)
 * (moments of a truncated normal); max z has density k·φ(z)·Φ(z)^(k−1) (order statistics). Two samples' windows share
 * only μ_c: E_μ[E[φ(M) | μ]²]; two windows of one sample share S: E_S[E[φ(M) | S]²] (without overlap). Simpson's rule in
 * z and in the shared part, each on [−8, 8] (own algebra).
 */
export function maxOfOffsetWindows(k: number, spread: ChannelSpread): OffsetWindows {
  const { between, within, position, slope: a } = spread;
  const key = `${k}:${between}:${within}:${position}:${a}`;
  const hit = offsetCache.get(key);
  if (hit !== undefined) return hit;
  const common = between + position * within;
  const sigma = Math.sqrt(common);
  const t = Math.sqrt(Math.max((1 - position) * within, 0));
  const { z, weight } = offsetGrid(k);
  let q = 0;
  let mean = 0;
  let on = 0;
  for (let i = 0; i < z.length; i++) {
    const m = t * z[i]!;
    const w = weight[i]!;
    q += w * phiSquare(m, common, a);
    if (sigma > 0) {
      mean += w * phiMean(m, sigma, a);
      on += w * normalCdf(m / sigma);
    } else {
      mean += w * (m > 0 ? m : a * m);
      // the step at m = 0 is at z = 0, an even node of the grid: its midpoint value leaves Simpson's two panels exact
      on += w * (m > 0 ? 1 : m < 0 ? 0 : 0.5);
    }
  }
  // E_S[g(S)²] for S ~ N(0, outer), the part a pair shares, given g's value `none` where S is 0 (Simpson's rule in S);
  // X ~ N(0, inner) is the part the pair does not share
  const sharedSquare = (outer: number, none: number, g: (s: number) => number): number => {
    const so = Math.sqrt(outer);
    if (!(so > 0)) return none;
    let value = 0;
    for (let j = 0; j < OUTER.x.length; j++) {
      const given = g(so * OUTER.x[j]!);
      value += OUTER.weight[j]! * given * given;
    }
    return value;
  };
  // E_S[E[φ(S + X + t·max z) | S]²]
  const pair = (outer: number, inner: number): number => {
    const si = Math.sqrt(inner);
    return sharedSquare(outer, mean * mean, (s) => {
      let g = 0;
      for (let i = 0; i < z.length; i++) g += weight[i]! * phiMean(s + t * z[i]!, si, a);
      return g;
    });
  };
  // E_S[P(on | S)²]: given S = s, P(on) = 1 − E_X[Φ(−(s + X)/t)^k] (the maximum's distribution function, order
  // statistics), by Simpson's rule in X, or in max z as E_z[Φ((s + t·z)/si)] where X is the wider
  const bothOn = (outer: number, inner: number): number => {
    const si = Math.sqrt(inner);
    return sharedSquare(outer, (1 - off) * (1 - off), (s) => {
      let p = 0;
      if (!(t > 0) && !(si > 0)) p = s > 0 ? 1 : s < 0 ? 0 : 0.5;
      else if (si <= t) for (let i = 0; i < OUTER.x.length; i++) p += OUTER.weight[i]! * (1 - Math.pow(normalCdf(-(s + si * OUTER.x[i]!) / t), k));
      else for (let i = 0; i < z.length; i++) p += weight[i]! * normalCdf((s + t * z[i]!) / si);
      return p;
    });
  };
  const off = Math.min(Math.max(1 - on, 0), 1);
  const result = {
    q,
    mean,
    off,
    sampleShared: pair(between, position * within),
    positionShared: pair(common, 0),
    sampleOn: bothOn(between, position * within),
    positionOn: bothOn(common, 0),
  };
  // a batch of specs meets many channel statistics: kept to the last 1,024
  if (offsetCache.size >= 1024) offsetCache.clear();
  offsetCache.set(key, result);
  return result;
}

/**
 * E[φ(m + s·X)] for X ~ N(0, 1) and φ(x) = max(x, 0) + a·min(x, 0): E[(m + sX)⁺] = mΦ(m/s) + sφ(m/s) (the mean of a
 * truncated normal), and φ(m) itself at s = 0.
 */
function phiMean(m: number, s: number, a: number): number {
  if (!(s > 0)) return m > 0 ? m : a * m;
  const r = m / s;
  const positive = m * normalCdf(r) + s * normalPdf(r);
  return positive + a * (m - positive);
}

/**
 * E[φ(m + S)²] for S ~ N(0, variance), φ(x) = max(x, 0) + a·min(x, 0): E[((m + S)⁺)²] = (m² + σ²)Φ(m/σ) + mσφ(m/σ)
 * (moments of a truncated normal), and φ(m)² at σ = 0.
 */
function phiSquare(m: number, variance: number, a: number): number {
  const s = Math.sqrt(Math.max(variance, 0));
  if (!(s > 0)) return m > 0 ? m * m : a * a * m * m;
  const r = m / s;
  const positive = (m * m + variance) * normalCdf(r) + m * s * normalPdf(r);
  return positive + a * a * (m * m + variance - positive);
}

const kappaCache = new Map<string, { rectifier: number; maxima: number }>();

/**
 * Var/E² over the channel's mean μ ~ N(0, between) of a channel's mean square given μ: of the rectifier's outputs,
 * F(μ) = E[φ(μ + e)²] with e ~ N(0, within), and of its window maxima, G(μ) = E[φ(μ + P + t·max z)²] with P ~ N(0,
 * position·within) the part a sample's pixels share and t² = (1 − position)·within (as maxOfOffsetWindows). A channel
 * whose mean sits low has few outputs on, and the maximum of its window picks those: G spreads less than F (own
 * algebra; Simpson's rule in μ and in max z)
 */
export function offsetChannelKappas(k: number, spread: ChannelSpread): { rectifier: number; maxima: number } {
  const { between, within, position, slope: a } = spread;
  const key = `${k}:${between}:${within}:${position}:${a}`;
  const hit = kappaCache.get(key);
  if (hit !== undefined) return hit;
  const { z, weight } = offsetGrid(k);
  const sigma = Math.sqrt(Math.max(between, 0));
  const t = Math.sqrt(Math.max((1 - position) * within, 0));
  let f1 = 0;
  let f2 = 0;
  let g1 = 0;
  let g2 = 0;
  for (let j = 0; j < OUTER.x.length; j++) {
    const mu = sigma * OUTER.x[j]!;
    const w = OUTER.weight[j]!;
    const f = phiSquare(mu, within, a);
    let g = 0;
    for (let i = 0; i < z.length; i++) g += weight[i]! * phiSquare(mu + t * z[i]!, position * within, a);
    f1 += w * f;
    f2 += w * f * f;
    g1 += w * g;
    g2 += w * g * g;
  }
  const result = { rectifier: f1 > 0 ? Math.max(f2 / (f1 * f1) - 1, 0) : 0, maxima: g1 > 0 ? Math.max(g2 / (g1 * g1) - 1, 0) : 0 };
  if (kappaCache.size >= 1024) kappaCache.clear();
  kappaCache.set(key, result);
  return result;
}

/**
 * maxOfOffsetWindows: E[φ(M)²], E[φ(M)], P(M ≤ 0), and E[φ φ'] and P(both on) for two samples' windows and two of one
 * sample's
 */
export interface OffsetWindows {
  q: number;
  mean: number;
  off: number;
  sampleShared: number;
  positionShared: number;
  sampleOn: number;
  positionOn: number;
}

const offsetCache = new Map<string, OffsetWindows>();

/** Simpson's rule on [−8, 8] in `steps` steps, the weights times `density`. */
function simpsonGrid(steps: number, density: (x: number) => number): { x: Float64Array; weight: Float64Array } {
  const h = 16 / steps;
  const x = new Float64Array(steps + 1);
  const weight = new Float64Array(steps + 1);
  for (let i = 0; i <= steps; i++) {
    x[i] = -8 + i * h;
    weight[i] = (((i === 0 || i === steps ? 1 : i % 2 === 1 ? 4 : 2) * h) / 3) * density(x[i]!);
  }
  return { x, weight };
}

/** the shared part's standard normal, 80 steps of 0.2 */
const OUTER = simpsonGrid(80, normalPdf);
const offsetGrids = new Map<number, { z: Float64Array; weight: Float64Array }>();

/** the maximum of k standard normals, density k·φ(z)·Φ(z)^(k−1), 160 steps of 0.1 */
function offsetGrid(k: number): { z: Float64Array; weight: Float64Array } {
  const hit = offsetGrids.get(k);
  if (hit !== undefined) return hit;
  const g = simpsonGrid(160, (z) => k * normalPdf(z) * Math.pow(normalCdf(z), k - 1));
  const grid = { z: g.x, weight: g.weight };
  offsetGrids.set(k, grid);
  return grid;
}
