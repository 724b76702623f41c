/**
 * `scan`: measure every float tensor of one or more tensor files, and judge a cast of each into target formats.
 * Files are read one after the other; a bad file becomes issues in its result and the scan goes on.
 */
import { binadeOf } from "../formats/index.js";
import { bucketPlan, TensorAccumulator, type TensorTally } from "./accumulate.js";
import { ChannelAccumulator, type ChannelAxis } from "./channels.js";
import { CAST_CLASS, type CastTarget } from "./classes.js";
import { openTensorFile, streamTensors, type TensorSink } from "./read.js";
import type { FloatDtype, ScanIssue, SkippedTensor, TensorLayout } from "./types.js";

/** safe: nothing is lost; lossy: values flush to zero or are clipped; breaks: values become infinite or NaN. */
export type CastVerdict = "safe" | "lossy" | "breaks";

/**
 * The power-of-two scales 2^k that make a tensor fit a format when it is multiplied by 2^k before the cast
 * (what 8-bit formats need; a per-tensor scale of this kind is common practice, Micikevicius et al. 2022).
 */
export interface ScaleRange {
  /** smallest k at which no nonzero value flushes to zero */
  lowest: number;
  /** smallest k at which no value is subnormal either */
  lowestNormal: number;
  /** largest k at which no value saturates or overflows (the largest magnitude stays in range) */
  highest: number;
  /** whether some k keeps every value from flushing and from overflowing: lowest ≤ highest */
  fits: boolean;
  /** at scale 2^highest: nonzero values whose scaled magnitude is below the format's smallest subnormal */
  belowSubnormalAtHighest: number;
  /** at scale 2^highest: nonzero values whose scaled magnitude is below the format's smallest normal */
  belowNormalAtHighest: number;
}

/** What casting one tensor into one format does, counted element by element. */
export interface CastResult {
  format: string;
  overflow: "saturate" | "infinity-or-nan";
  flushSubnormals: boolean;
  /** nonzero values that round to zero (with flushSubnormals, also those that would be subnormal) */
  flushed: number;
  /** nonzero values that round to a subnormal */
  subnormal: number;
  /** finite values clamped to ±largest finite (saturating conversion) */
  saturated: number;
  /** finite values that become ±infinity or NaN (non-saturating conversion) */
  overflowed: number;
  /** NaNs and infinities already in the file, counted in every target (not as overflowed or clipped) */
  nonFiniteInFile: number;
  verdict: CastVerdict;
  /** the power-of-two scales that make the tensor fit; null when it has no nonzero finite value */
  scales: ScaleRange | null;
}

/** Everything measured about one tensor. */
export interface TensorMeasure {
  file: string;
  name: string;
  dtype: FloatDtype;
  shape: number[];
  elements: number;
  zeros: number;
  infinities: number;
  nans: number;
  /** smallest nonzero finite magnitude (null when none) */
  minNonzero: number | null;
  /** largest finite magnitude (null when no element is finite) */
  maxAbs: number | null;
  /** root mean square over the finite elements, zeros included */
  rms: number;
  /** root mean square over the nonzero finite elements */
  rmsNonzero: number;
  /** maxAbs / rms: the outlier measure (null when rms is 0) */
  maxOverRms: number | null;
  /** nonzero finite magnitudes per binade: [k, count] for 2^k ≤ |x| < 2^(k+1) */
  binades: [number, number][];
  /** magnitudes below which shares q of the nonzero finite elements lie (to within 2^-7 relative for 32-bit and narrower inputs) */
  quantiles: { q: number; magnitude: number }[];
  /** one entry per target format, in the order asked */
  casts: CastResult[];
  /** per-channel outlier figures for a vector (each element a channel, as for a norm gain) or a matrix (rows, columns) */
  channels?: ChannelAxis[];
}

/** The result of scanning one file. */
export interface FileScan {
  file: string;
  kind: "safetensors" | "npy" | null;
  /** the file's size in bytes (0 when it could not be opened) */
  size: number;
  tensors: TensorMeasure[];
  skipped: SkippedTensor[];
  /** problems with the file or its tensors; measured tensors are still reported */
  issues: ScanIssue[];
  metadata?: Record<string, string>;
}

/** The result of a scan over several files. */
export interface ScanResult {
  targets: { format: string; overflow: "saturate" | "infinity-or-nan"; flushSubnormals: boolean }[];
  tolerance: number;
  files: FileScan[];
}

/** Options of {@link scanFile} and {@link scanFiles}. */
export interface ScanOptions {
  targets: readonly CastTarget[];
  /** share of a tensor's nonzero finite values that may flush or saturate before the verdict is "lossy" (default 0) */
  tolerance?: number;
  /** per-channel outlier figures for vectors and matrices (default true) */
  channels?: boolean;
  /** called as tensor data is read: bytes read so far in this file */
  onProgress?: (bytesRead: number) => void;
}

/** The quantiles reported (and written to recorded-statistics files). */
export const QUANTILES = [0.5, 0.9, 0.99, 0.999] as const;

/** Scan one file: validate its header, read its float tensors in chunks, and judge each cast. Never throws on bad input. */
export async function scanFile(path: string, options: ScanOptions): Promise<FileScan> {
  const tolerance = options.tolerance ?? 0;
  if (!(tolerance >= 0 && tolerance <= 1)) throw new RangeError(`tolerance must be a share between 0 and 1; got ${tolerance}`);
  const opened = await openTensorFile(path);
  if (!opened.ok) return { file: path, kind: null, size: opened.size ?? 0, tensors: [], skipped: [], issues: [opened.issue] };
  const { layout, handle } = opened.file;
  const result: FileScan = {
    file: path,
    kind: layout.kind,
    size: layout.size,
    tensors: [],
    skipped: layout.skipped,
    issues: [...layout.issues],
  };
  if (layout.metadata) result.metadata = layout.metadata;
  const targets = options.targets;
  let current: { accumulator: TensorAccumulator; channels: ChannelAccumulator | undefined } | undefined;
  const sink: TensorSink = {
    begin(tensor) {
      const channels =
        options.channels !== false && (tensor.shape.length === 1 || tensor.shape.length === 2) && tensor.elements > 0
          ? new ChannelAccumulator(tensor.shape, tensor.order)
          : undefined;
      current = { accumulator: new TensorAccumulator(bucketPlan(tensor.dtype === "F64" ? 64 : 32, targets)), channels };
    },
    chunk(_tensor, values, first) {
      current!.accumulator.add(values, current!.channels, first);
    },
    end(tensor) {
      result.tensors.push(measureOf(path, tensor, current!.accumulator.tally(), targets, tolerance, current!.channels?.result()));
      current = undefined;
    },
  };
  try {
    result.issues.push(...(await streamTensors(opened.file, sink, options.onProgress)));
  } catch (error) {
    const message = error instanceof Error ? error.message : String(error);
    result.issues.push({ file: path, message: `cannot read: ${message}` });
  } finally {
    await handle.close();
  }
  return result;
}

/** Scan files one after the other. `onFile` is called after each, e.g. to advance a progress bar. */
export async function scanFiles(paths: readonly string[], options: ScanOptions & { onFile?: (scan: FileScan) => void }): Promise<ScanResult> {
  const files: FileScan[] = [];
  for (const path of paths) {
    const scan = await scanFile(path, options);
    files.push(scan);
    options.onFile?.(scan);
  }
  return {
    targets: options.targets.map((t) => ({ format: t.format, overflow: t.overflow, flushSubnormals: t.flushSubnormals })),
    tolerance: options.tolerance ?? 0,
    files,
  };
}

function measureOf(
  file: string,
  tensor: TensorLayout,
  tally: TensorTally,
  targets: readonly CastTarget[],
  tolerance: number,
  channels: ChannelAxis[] | undefined,
): TensorMeasure {
  const finite = tally.elements - tally.infinities - tally.nans;
  const nonzeroFinite = finite - tally.zeros;
  const rms = finite > 0 ? Math.sqrt(tally.sumOfSquares / finite) : 0;
  const rmsNonzero = nonzeroFinite > 0 ? Math.sqrt(tally.sumOfSquares / nonzeroFinite) : 0;
  const casts = targets.map((target, t): CastResult => {
    const counts = tally.casts[t]!;
    const lost = counts.flushed + counts.saturated;
    const verdict: CastVerdict =
      counts.overflowed + counts.nonFiniteInFile > 0 ? "breaks" : lost > tolerance * nonzeroFinite ? "lossy" : "safe";
    return {
      format: target.format,
      overflow: target.overflow,
      flushSubnormals: target.flushSubnormals,
      ...counts,
      verdict,
      scales: scaleRange(target, tally),
    };
  });
  const measure: TensorMeasure = {
    file,
    name: tensor.name,
    dtype: tensor.dtype,
    shape: tensor.shape,
    elements: tally.elements,
    zeros: tally.zeros,
    infinities: tally.infinities,
    nans: tally.nans,
    minNonzero: tally.minNonzero,
    maxAbs: tally.maxAbs,
    rms,
    rmsNonzero,
    maxOverRms: rms > 0 && tally.maxAbs !== null ? tally.maxAbs / rms : null,
    binades: tally.binades,
    quantiles: nonzeroFinite > 0 ? QUANTILES.map((q) => ({ q, magnitude: tally.quantile(q)! })) : [],
    casts,
  };
  if (channels) measure.channels = channels;
  return measure;
}

/** x·2^k without an intermediate overflow or underflow of 2^k itself. */
function timesPow2(x: number, k: number): number {
  let y = x;
  let rest = k;
  while (rest > 1000) {
    y *= 2 ** 1000;
    rest -= 1000;
  }
  while (rest < -1000) {
    y *= 2 ** -1000;
    rest += 1000;
  }
  return y * 2 ** rest;
}

/** The scale range of a tensor for one target; every bound is checked with the target's own rounding. */
export function scaleRange(target: CastTarget, tally: Pick<TensorTally, "minNonzero" | "maxAbs" | "binades">): ScaleRange | null {
  const { minNonzero, maxAbs } = tally;
  if (minNonzero === null || maxAbs === null || maxAbs === 0) return null;
  const fitsTop = (k: number) => {
    const c = target.classify(timesPow2(maxAbs, k));
    return c !== CAST_CLASS.saturated && c !== CAST_CLASS.overflowed;
  };
  const keeps = (k: number) => target.classify(timesPow2(minNonzero, k)) !== CAST_CLASS.flushed;
  const normal = (k: number) => target.classify(timesPow2(minNonzero, k)) === CAST_CLASS.normal;
  // start next to the answer, then step: each predicate is monotone in k
  let highest = binadeOf(target.maxFinite) - binadeOf(maxAbs);
  while (!fitsTop(highest)) highest--;
  while (fitsTop(highest + 1)) highest++;
  let lowest = binadeOf(target.minSubnormal) - binadeOf(minNonzero);
  while (!keeps(lowest)) lowest++;
  while (keeps(lowest - 1)) lowest--;
  let lowestNormal = binadeOf(target.minNormal) - binadeOf(minNonzero);
  while (!normal(lowestNormal)) lowestNormal++;
  while (normal(lowestNormal - 1)) lowestNormal--;
  // scaled |x| < 2^m  ⟺  binade(x) < m − highest, exact because 2^highest only shifts the exponent
  const below = (m: number) => {
    let count = 0;
    for (const [k, n] of tally.binades) if (k < m - highest) count += n;
    return count;
  };
  return {
    lowest,
    lowestNormal,
    highest,
    fits: lowest <= highest,
    belowSubnormalAtHighest: below(binadeOf(target.minSubnormal)),
    belowNormalAtHighest: below(binadeOf(target.minNormal)),
  };
}

/**
 * Exit code of a scan (README): 2 when any file or tensor had an error, else 1 when some cast is lossy or breaks,
 * else 0. The strictest applies.
 */
export function scanExitCode(result: ScanResult): 0 | 1 | 2 {
  if (result.files.some((f) => f.issues.length > 0)) return 2;
  if (result.files.some((f) => f.tensors.some((t) => t.casts.some((c) => c.verdict !== "safe")))) return 1;
  return 0;
}
