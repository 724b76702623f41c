/**
 * Statistics of one tensor as the simulator sees it: magnitudes of the binary64 values (before storage
 * rounding) and what storing them in a format does, counted with the format model (src/formats countClasses).
 */
import { MX_BLOCK, roundTo, type Format, type RoundOptions } from "../formats/index.js";
import { applyScales, countScaled, type StorageScales } from "./scaling.js";
import type { FormatCounts, TensorStats } from "./types.js";

/** Nonzero magnitudes kept for quantiles; larger tensors are sampled at a fixed stride (deterministic). */
const QUANTILE_SAMPLE = 4096;

/** The elements of `data` not marked in `excluded`, as a new array (or `data` itself when nothing is excluded). */
export function selectElements(data: Float64Array, excluded?: Uint8Array): Float64Array {
  if (excluded === undefined) return data;
  let n = 0;
  for (let i = 0; i < data.length; i++) if (excluded[i] !== 1) n++;
  const out = new Float64Array(n);
  let j = 0;
  for (let i = 0; i < data.length; i++) if (excluded[i] !== 1) out[j++] = data[i]!;
  return out;
}

/** The element at fraction p of a sorted array (nearest rank). */
function quantile(sorted: Float64Array, p: number): number {
  if (sorted.length === 0) return 0;
  const i = Math.min(sorted.length - 1, Math.max(0, Math.ceil(p * sorted.length) - 1));
  return sorted[i]!;
}

/**
 * Measure a tensor: exact zeros, the share infinite or NaN, rms of the finite nonzero elements, largest finite
 * magnitude, quantiles of the finite nonzero magnitudes, and the fractions flushed, subnormal, overflowed and saturated when stored in `format` (after
 * multiplying by the storage scales of 8-bit scaling, when given; with per-block scales, also the share the block
 * conversion's own clamp clipped).
 */
export function measureTensor(data: Float64Array, format: Format, options: RoundOptions, scales: StorageScales = 1): TensorStats {
  return { ...tensorMagnitudes(data), counts: formatCounts(data, format, options, scales) };
}

/** {@link measureTensor} without the format counts: zeros, non-finite share, rms, max and quantiles of the values. */
export function tensorMagnitudes(data: Float64Array): Omit<TensorStats, "counts" | "accumulateCounts"> {
  const n = data.length;
  let zeros = 0;
  let nonFinite = 0;
  let sumSquares = 0;
  let nonzero = 0;
  let max = 0;
  for (let i = 0; i < n; i++) {
    const v = data[i]!;
    if (v === 0) {
      zeros++;
      continue;
    }
    const a = Math.abs(v);
    // an infinite or NaN element (an overflow upstream) has no magnitude to add: counted apart, not as rms 0
    if (!Number.isFinite(a)) {
      nonFinite++;
      continue;
    }
    nonzero++;
    sumSquares += a * a;
    if (a > max) max = a;
  }
  const stride = Math.max(1, Math.ceil(nonzero / QUANTILE_SAMPLE));
  const sample = new Float64Array(Math.ceil(nonzero / stride));
  let seen = 0;
  let k = 0;
  for (let i = 0; i < n && k < sample.length; i++) {
    const a = Math.abs(data[i]!);
    if (a === 0 || !Number.isFinite(a)) continue;
    if (seen++ % stride === 0) sample[k++] = a;
  }
  const sorted = sample.subarray(0, k).sort();
  const total = n > 0 ? n : 1;
  return {
    elements: n,
    zeroFraction: zeros / total,
    nonFiniteFraction: nonFinite / total,
    rms: nonzero > 0 ? Math.sqrt(sumSquares / nonzero) : 0,
    max,
    quantiles: [quantile(sorted, 0.01), quantile(sorted, 0.1), quantile(sorted, 0.5), quantile(sorted, 0.9), quantile(sorted, 0.99)],
  };
}

/** {@link measureTensor}'s format counts alone: the shares flushed, subnormal, overflowed, saturated (and clipped) when stored. */
export function formatCounts(data: Float64Array, format: Format, options: RoundOptions, scales: StorageScales = 1): FormatCounts {
  let stored = data;
  if (scales !== 1) {
    stored = Float64Array.from(data);
    applyScales(stored, scales);
  }
  const { counts: c, clipped } = countScaled(format, stored, scales, options);
  const total = data.length > 0 ? data.length : 1;
  const counts: FormatCounts = {
    format: format.name,
    flushed: c.flushed / total,
    subnormal: c.subnormal / total,
    subnormalNoise: subnormalNoise(data, stored, format, options, scales),
    overflowed: c.overflowed / total,
    saturated: c.saturated / total,
    nonFinite: (c.infinities + c.nans) / total,
  };
  if (typeof scales !== "number") counts.clipped = clipped / total;
  return counts;
}

/**
 * Σ over the elements stored as subnormals of (rounded − x)², over Σx² of the finite elements, both in the tensor's own
 * units (`stored` is `data` times its storage scales; a block's error is divided by its scale again).
 */
function subnormalNoise(data: Float64Array, stored: Float64Array, format: Format, options: RoundOptions, scales: StorageScales): number {
  const minNormal = format.minNormal;
  let noise = 0;
  let energy = 0;
  for (let i = 0; i < data.length; i++) {
    const x = data[i]!;
    if (!Number.isFinite(x)) continue;
    energy += x * x;
    const v = stored[i]!;
    if (v === 0 || !(Math.abs(v) < minNormal)) continue;
    const r = roundTo(format, v, options);
    if (r === 0 || !(Math.abs(r) < minNormal)) continue;
    const scale = typeof scales === "number" ? scales : scales.scales[Math.floor(i / MX_BLOCK.size)]!;
    const error = (r - v) / scale;
    noise += error * error;
  }
  return energy > 0 ? noise / energy : 0;
}

/**
 * Whether the magnitudes (rms, max, quantiles) measured anything: not when every nonzero element was infinite or NaN,
 * where their 0 stands for "none finite", not for a tensor of zeros.
 */
export function hasFiniteMagnitudes(stats: Pick<TensorStats, "rms" | "nonFiniteFraction">): boolean {
  return stats.rms > 0 || stats.nonFiniteFraction === 0;
}

/** The median of a non-empty list (the mean of the middle two for an even count). */
export function median(values: readonly number[]): number {
  const s = [...values].sort((a, b) => a - b);
  const m = s.length >> 1;
  return s.length % 2 === 1 ? s[m]! : (s[m - 1]! + s[m]!) / 2;
}

/** Field-wise median of one tensor's statistics over draws. */
export function medianStats(draws: readonly TensorStats[]): TensorStats {
  const first = draws[0];
  if (first === undefined) throw new RangeError("medianStats needs at least one draw");
  if (draws.length === 1) return first;
  const pick = (f: (s: TensorStats) => number): number => median(draws.map(f));
  const stats: TensorStats = {
    elements: first.elements,
    zeroFraction: pick((s) => s.zeroFraction),
    nonFiniteFraction: pick((s) => s.nonFiniteFraction),
    rms: pick((s) => s.rms),
    max: pick((s) => s.max),
    quantiles: [0, 1, 2, 3, 4].map((i) => pick((s) => s.quantiles[i]!)) as TensorStats["quantiles"],
    counts: medianCounts(draws.map((s) => s.counts)),
  };
  if (first.accumulateCounts !== undefined) stats.accumulateCounts = medianCounts(draws.map((s) => s.accumulateCounts!));
  return stats;
}

/** Field-wise median of one format's counts over draws (at least one). */
function medianCounts(draws: readonly FormatCounts[]): FormatCounts {
  const first = draws[0]!;
  const pick = (f: (c: FormatCounts) => number): number => median(draws.map(f));
  const counts: FormatCounts = {
    format: first.format,
    flushed: pick((c) => c.flushed),
    subnormal: pick((c) => c.subnormal),
    subnormalNoise: pick((c) => c.subnormalNoise),
    overflowed: pick((c) => c.overflowed),
    saturated: pick((c) => c.saturated),
    nonFinite: pick((c) => c.nonFinite),
  };
  if (first.clipped !== undefined) counts.clipped = pick((c) => c.clipped ?? 0);
  return counts;
}
