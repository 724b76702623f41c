/**
 * Streaming per-tensor statistics: feed chunks of values, get exact counts at the end.
 *
 * Why buckets: the class of a value under a cast (flushed, subnormal, normal, saturated, overflowed) depends only on
 * its magnitude, and the class boundaries are few. Magnitudes are binned by their top bits (sign dropped: the exponent
 * and the leading fraction bits, 32768 buckets); a bucket whose smallest and largest magnitudes fall in the same class
 * for every target is counted by one increment per element, and its class counts are added once at the end. The
 * elements of the few buckets a class boundary cuts through, and infinities, NaNs and subnormal inputs, take an exact
 * per-element path through the format module's rounding; zeros are the count of bucket 0. The counts are therefore
 * exact, at the price of a histogram increment. The binary32 loops themselves are in fast32.ts.
 */
import { binadeOf } from "../formats/index.js";
import type { ChannelAccumulator } from "./channels.js";
import { CAST_CLASS, CAST_CLASS_COUNT, type CastClass, type CastTarget } from "./classes.js";
import {
  countPass,
  FLAG,
  INFINITY_BITS,
  MAX_PASS,
  MERGE_EVERY,
  MIN_FUSED_RUN,
  MIN_NORMAL_BITS,
  releaseCounters,
  runResult,
  takeCounters,
  valueOfBits,
  WAYS,
  type Counters,
} from "./fast32.js";

const BUCKETS = 32768;
/** binade k counts magnitudes in [2^k, 2^(k+1)); binary64 spans k = −1074 … 1023 */
const BINADE_OFFSET = 1100;
const BINADES = 2200;

/** binary32 elements per counting pass at most (so flagged positions fit a bounded buffer) */
const SLICE = MAX_PASS;
/** positions flagged by the counting pass; shared, since a pass runs to its end before another starts */
let flagged = new Int32Array(0);

const SLOW_IMPURE = 1;
const SLOW_SPECIAL = 2;

/** Bucket tables for one input width (binary32 or binary64 values) and one list of targets. Build once per scan. */
export interface BucketPlan {
  width: 32 | 64;
  targets: readonly CastTarget[];
  /** per bucket: 0 fast, 1 a class boundary cuts it, 2 zero/subnormal/inf/NaN inputs */
  slow: Uint8Array;
  /** per bucket and target: the class every magnitude of a pure bucket has (bucket × targets.length + target) */
  classes: Uint8Array;
  /** per bucket: its binade (for non-special buckets) */
  binade: Int16Array;
  /**
   * per bucket and target, for buckets a boundary cuts: the smallest magnitude whose class differs from `classes`
   * (Infinity when this target has no boundary in the bucket; NaN when it has two, and the rounding decides)
   */
  cuts: Float64Array;
  /** per bucket and target: the class from `cuts` upward */
  above: Uint8Array;
  /** binary32 bucket counters at rest: WAYS per bucket, FLAG for the buckets a boundary cuts, 0 elsewhere */
  base: Int32Array;
}

const plans = new WeakMap<readonly CastTarget[], Map<number, BucketPlan>>();

/** The bucket tables for binary32 (width 32) or binary64 (width 64) inputs, cached per target list. */
export function bucketPlan(width: 32 | 64, targets: readonly CastTarget[]): BucketPlan {
  let byWidth = plans.get(targets);
  if (!byWidth) plans.set(targets, (byWidth = new Map()));
  let plan = byWidth.get(width);
  if (!plan) byWidth.set(width, (plan = buildPlan(width, targets)));
  return plan;
}

function buildPlan(width: 32 | 64, targets: readonly CastTarget[]): BucketPlan {
  const slow = new Uint8Array(BUCKETS);
  const T = targets.length;
  const classes = new Uint8Array(BUCKETS * T);
  const binade = new Int16Array(BUCKETS);
  const f32 = new Float32Array(1);
  const u32 = new Uint32Array(f32.buffer);
  const f64 = new Float64Array(1);
  const w64 = new Uint32Array(f64.buffer);
  // binary32 buckets: 8 exponent bits + 7 fraction bits; binary64: 11 exponent bits + 4 fraction bits
  const fractionBits = width === 32 ? 7 : 4;
  const topField = width === 32 ? 255 : 2047;
  const bias = width === 32 ? 127 : 1023;
  /** smallest (or, with `top`, largest) magnitude of bucket b */
  const edge = (b: number, top: boolean): number => {
    if (width === 32) {
      u32[0] = top ? (b << 16) | 0xffff : b << 16;
      return f32[0]!;
    }
    w64[0] = top ? 0xffffffff : 0;
    w64[1] = top ? (b << 16) | 0xffff : b << 16;
    return f64[0]!;
  };
  for (let b = 0; b < BUCKETS; b++) {
    const field = b >> fractionBits;
    if (field === 0 || field === topField) slow[b] = SLOW_SPECIAL;
    else binade[b] = field - bias;
  }
  // the buckets of normal inputs are contiguous, from field 1 to field topField − 1
  const first = 1 << fractionBits;
  const last = (topField << fractionBits) - 1;
  const cutsFor: [number, number][] = [];
  for (let t = 0; t < T; t++) {
    const target = targets[t]!;
    const classAt = (b: number) => target.classify(edge(b, false));
    // each class is an interval of magnitudes: equal classes at both ends of a run of buckets mean one class
    // throughout, so bisection finds the few buckets where the class changes
    const fill = (lo: number, hi: number, classLo: number, classHi: number): void => {
      if (classLo === classHi) {
        for (let b = lo; b <= hi; b++) classes[b * T + t] = classLo;
        return;
      }
      if (hi - lo <= 1) {
        classes[lo * T + t] = classLo;
        classes[hi * T + t] = classHi;
        return;
      }
      const mid = (lo + hi) >> 1;
      const classMid = classAt(mid);
      fill(lo, mid, classLo, classMid);
      fill(mid, hi, classMid, classHi);
    };
    fill(first, last, classAt(first), classAt(last));
    // a bucket is cut by a boundary exactly when its largest magnitude has another class than its smallest
    for (let b = first; b <= last; b++) {
      const next = b < last ? classes[(b + 1) * T + t] : -1;
      if (next !== classes[b * T + t] && target.classify(edge(b, true)) !== classes[b * T + t]) {
        slow[b] = SLOW_IMPURE;
        cutsFor.push([b, t]);
      }
    }
  }
  const cuts = new Float64Array(BUCKETS * T).fill(Infinity);
  const above = Uint8Array.from(classes);
  for (const [b, t] of cutsFor) {
    const target = targets[t]!;
    const below = classes[b * T + t]!;
    // bisect the bit patterns of the bucket (monotone in the magnitude) for the first one of another class
    const span = width === 32 ? 0xffff : 2 ** 48 - 1;
    const valueAt = (offset: number): number => {
      if (width === 32) {
        u32[0] = (b << 16) + offset;
        return f32[0]!;
      }
      w64[1] = (b << 16) + Math.floor(offset / 2 ** 32);
      w64[0] = offset % 2 ** 32;
      return f64[0]!;
    };
    let lo = 0;
    let hi = span;
    while (hi - lo > 1) {
      const mid = Math.floor((lo + hi) / 2);
      if (target.classify(valueAt(mid)) === below) lo = mid;
      else hi = mid;
    }
    const cut = valueAt(hi);
    const cutClass = target.classify(cut);
    // a second boundary inside one bucket (not possible for headroom's formats) falls back to the rounding itself
    const single = target.classify(valueAt(span)) === cutClass;
    cuts[b * T + t] = single ? cut : NaN;
    above[b * T + t] = cutClass;
  }
  const base = new Int32Array(width === 32 ? BUCKETS * WAYS : 0);
  if (width === 32) for (const [b] of cutsFor) base.fill(FLAG, b * WAYS, (b + 1) * WAYS);
  return { width, targets, slow, classes, binade, cuts, above, base };
}

/** Per-target cast counts of one tensor. */
export interface CastCounts {
  flushed: number;
  subnormal: number;
  saturated: number;
  overflowed: number;
  /** NaNs and infinities of the file, in every target (a saturating one included): the file's, not the cast's doing */
  nonFiniteInFile: number;
}

/** The raw statistics of one tensor, before verdicts and scales are derived. */
export interface TensorTally {
  elements: number;
  zeros: number;
  infinities: number;
  nans: number;
  /** smallest nonzero finite magnitude, null when there is none */
  minNonzero: number | null;
  /** largest finite magnitude, null when no element is finite */
  maxAbs: number | null;
  /** sum of squares of the finite elements */
  sumOfSquares: number;
  /** nonzero finite magnitudes per binade: [binade k, count] for 2^k ≤ |x| < 2^(k+1), ascending */
  binades: [number, number][];
  /** approximate quantiles of the nonzero finite magnitudes (bucket resolution: 2^-7 relative for binary32 inputs) */
  quantile(q: number): number | null;
  /** counts per target, in the order of the plan's targets */
  casts: CastCounts[];
}

/** Accumulates one tensor's statistics over chunks of binary32 or binary64 values. */
export class TensorAccumulator {
  private readonly hist = new Float64Array(BUCKETS);
  private readonly binadeExtra = new Float64Array(BINADES);
  private readonly classCounts: Float64Array;
  private elements = 0;
  private zeros = 0;
  private infinities = 0;
  private nans = 0;
  private sumOfSquares = 0;
  private maxAbs = -1;
  private minNonzero = Infinity;

  /**
   * binary32 bucket counters (WAYS per bucket, from plan.base), merged into `hist` now and then: the counting kernel's
   * while this accumulator holds them, a copy when another took them, null when merged
   */
  private readonly counters: Counters = { counts: null };
  /** elements counted since the last merge, and the extremes of their |bits| (the bucket range to merge) */
  private unmerged = 0;
  private unmergedMax = 0;
  private unmergedMin = 0x7fffffff;

  constructor(private readonly plan: BucketPlan) {
    this.classCounts = new Float64Array(plan.targets.length * CAST_CLASS_COUNT);
  }

  /**
   * Feed the next values (binary32 values for a width-32 plan, binary64 for width 64). With `channels`, the same
   * values (storage index `first` onward) go to its per-channel figures too, in the same pass for binary32.
   */
  add(values: Float32Array | Float64Array, channels?: ChannelAccumulator, first = 0): void {
    if (values instanceof Float32Array) {
      if (this.plan.width !== 32) throw new TypeError("a binary64 bucket plan was given binary32 values");
      for (let start = 0; start < values.length; start += SLICE) {
        const slice = values.length <= SLICE ? values : values.subarray(start, start + SLICE);
        this.elements += slice.length;
        this.add32(slice, channels, first + start);
      }
    } else {
      if (this.plan.width !== 64) throw new TypeError("a binary32 bucket plan was given binary64 values");
      this.elements += values.length;
      this.add64(values);
      channels?.add(values, first);
    }
  }

  /**
   * binary32 values: one counting pass (with the channel squares when the runs are long enough to pay for a call
   * each), then the exact per-element path for the few flagged elements, and for subnormal inputs, infinities and
   * NaNs when the chunk's extremes show any.
   */
  private add32(values: Float32Array, channels: ChannelAccumulator | undefined, first: number): void {
    const n = values.length;
    if (n === 0) return;
    if (this.unmerged + n > MERGE_EVERY) this.merge();
    const counts = takeCounters(this.counters, this.plan.base);
    if (flagged.length < n) flagged = new Int32Array(Math.max(n, 2 * flagged.length));
    const bits = new Int32Array(values.buffer, values.byteOffset, n);
    let sum: number;
    const fused = channels !== undefined && channels.sums.fastSum.length >= MIN_FUSED_RUN;
    if (fused) {
      channels.save(first, n);
      sum = countPass(values, flagged, channels.sums, first);
    } else {
      sum = countPass(values, flagged);
      channels?.add(values, first);
    }
    const chunkMax = runResult[0]!;
    const chunkMin = runResult[1]!;
    const nFlagged = runResult[2]!;
    // an entry stands for the up to four elements from it on (one step of the counting loop); each is looked at once
    const slow = this.plan.slow;
    let next = 0;
    for (let k = 0; k < nFlagged; k++) {
      const entry = flagged[k]!;
      const stop = Math.min(n, entry + 4);
      for (let i = Math.max(entry, next); i < stop; i++) {
        const b = (bits[i]! & 0x7fffffff) >>> 16;
        if (slow[b] === SLOW_IMPURE) this.classifyImpure(Math.abs(values[i]!), b);
      }
      next = stop;
    }
    // infinities or NaNs spoilt the pass's sums: the channel sums are put back and fed again without them, and the
    // sum of squares comes from the exact path below
    const nonFinite = chunkMax >= INFINITY_BITS;
    if (nonFinite && fused) {
      channels.restore();
      channels.add(values, first);
    }
    // chunkMin is the smallest nonzero |bits| less one: below MIN_NORMAL_BITS − 1 means a subnormal input
    const special = nonFinite || chunkMin < MIN_NORMAL_BITS - 1;
    const finiteMax = special ? this.specials32(values, bits, counts) : chunkMax;
    this.sumOfSquares += nonFinite ? this.finiteSum : sum;
    if (finiteMax >= 0 && valueOfBits(finiteMax) > this.maxAbs) this.maxAbs = valueOfBits(finiteMax);
    if (chunkMin + 1 < INFINITY_BITS && valueOfBits(chunkMin + 1) < this.minNonzero) this.minNonzero = valueOfBits(chunkMin + 1);
    this.unmerged += n;
    if (chunkMax > this.unmergedMax) this.unmergedMax = chunkMax;
    if (chunkMin < this.unmergedMin) this.unmergedMin = chunkMin;
  }

  /** sum of the squares of the finite values of the chunk given to the last {@link specials32} */
  private finiteSum = 0;

  /**
   * The exact path for the subnormal inputs, infinities and NaNs of a chunk: each is taken out of the bucket counters
   * and counted apart. Returns the largest finite |bits| of the chunk (−1 when none).
   */
  private specials32(values: Float32Array, bits: Int32Array, counts: Int32Array): number {
    let max = -1;
    let sum = 0;
    for (let i = 0; i < values.length; i++) {
      const u = bits[i]! & 0x7fffffff;
      if (u < INFINITY_BITS) {
        if (u > max) max = u;
        sum += values[i]! * values[i]!;
        if (u === 0 || u >= MIN_NORMAL_BITS) continue;
      }
      // out of its bucket's counters: any counter of the bucket above zero will do, only their sum is read
      let j = (u >>> 16) * WAYS;
      while (counts[j]! <= 0) j++;
      counts[j] = counts[j]! - 1;
      this.countSpecial(values[i]!);
    }
    this.finiteSum = sum;
    return max;
  }

  /** Add the counters to the histogram and reset them; zeros are all that is left in bucket 0. */
  private merge(): void {
    const counts = this.counters.counts;
    if (!counts) return;
    const { hist, plan } = this;
    const base = plan.base;
    for (let k = 0; k < WAYS; k++) {
      this.zeros += counts[k]!;
      counts[k] = 0;
    }
    const low = Math.max(1, (this.unmergedMin + 1) >>> 16);
    const high = Math.min(this.unmergedMax, INFINITY_BITS - 1) >>> 16;
    for (let b = low; b <= high; b++) {
      const j = b * WAYS;
      const c = counts[j]! + counts[j + 1]! + counts[j + 2]! + counts[j + 3]! - WAYS * base[j]!;
      if (c === 0) continue;
      hist[b] = hist[b]! + c;
      const rest = base[j]!;
      counts[j] = rest;
      counts[j + 1] = rest;
      counts[j + 2] = rest;
      counts[j + 3] = rest;
    }
    this.unmerged = 0;
    this.unmergedMax = 0;
    this.unmergedMin = 0x7fffffff;
    releaseCounters(this.counters, base);
  }

  private add64(values: Float64Array): void {
    const bits = new Uint32Array(values.buffer, values.byteOffset, values.length * 2);
    const hist = this.hist;
    const slow = this.plan.slow;
    const n = values.length;
    let zeros = 0;
    let sum = 0;
    let max = this.maxAbs;
    let min = this.minNonzero;
    for (let i = 0; i < n; i++) {
      const x = values[i]!;
      if (x === 0) {
        zeros++;
        continue;
      }
      // little-endian host: the high word (sign, exponent, top fraction bits) is the second
      const b = (bits[2 * i + 1]! & 0x7fffffff) >>> 16;
      if (slow[b] !== 0) {
        this.slowValue(x, b);
        continue;
      }
      hist[b] = hist[b]! + 1;
      const a = Math.abs(x);
      if (a > max) max = a;
      if (a < min) min = a;
      sum += x * x;
    }
    this.zeros += zeros;
    this.sumOfSquares += sum;
    if (max > this.maxAbs) this.maxAbs = max;
    if (min < this.minNonzero) this.minNonzero = min;
  }

  /** The exact path of binary64 values: boundary buckets, subnormal inputs, infinities and NaNs. */
  private slowValue(x: number, bucket: number): void {
    if (this.plan.slow[bucket] === SLOW_IMPURE) {
      this.classifyImpure(Math.abs(x), bucket);
      this.hist[bucket]! += 1;
    } else if (!this.countSpecial(x)) {
      return;
    }
    this.sumOfSquares += x * x;
    const a = Math.abs(x);
    if (a > this.maxAbs) this.maxAbs = a;
    if (a < this.minNonzero) this.minNonzero = a;
  }

  /** Count one magnitude of an impure bucket into the class counts, by the bucket's cut points. */
  private classifyImpure(a: number, b: number): void {
    const { targets, cuts, above, classes } = this.plan;
    const T = targets.length;
    const counts = this.classCounts;
    for (let t = 0; t < T; t++) {
      const k = b * T + t;
      const cut = cuts[k]!;
      const cls = cut !== cut ? targets[t]!.classify(a) : a >= cut ? above[k]! : classes[k]!;
      counts[t * CAST_CLASS_COUNT + cls]! += 1;
    }
  }

  /**
   * Class counts of a NaN, an infinity or a subnormal input, by the targets' own rounding; counts it as a NaN, an
   * infinity or in its binade. Returns whether it is finite.
   */
  private countSpecial(x: number): boolean {
    const targets = this.plan.targets;
    const counts = this.classCounts;
    if (x !== x) {
      this.nans++;
      for (let t = 0; t < targets.length; t++) counts[t * CAST_CLASS_COUNT + CAST_CLASS.nan]! += 1;
      return false;
    }
    if (x === Infinity || x === -Infinity) {
      // an infinity is the file's, not the cast's: counted apart in every target, a saturating one too (which would
      // clamp it to its largest finite value, hiding a value that was already lost)
      for (let t = 0; t < targets.length; t++) counts[t * CAST_CLASS_COUNT + CAST_CLASS.nan]! += 1;
      this.infinities++;
      return false;
    }
    for (let t = 0; t < targets.length; t++) counts[t * CAST_CLASS_COUNT + targets[t]!.classify(x)]! += 1;
    this.binadeExtra[binadeOf(Math.abs(x)) + BINADE_OFFSET]! += 1;
    return true;
  }

  /** The statistics so far. */
  tally(): TensorTally {
    this.merge();
    const { plan, hist } = this;
    const targets = plan.targets;
    const T = targets.length;
    const counts = Float64Array.from(this.classCounts);
    const binadeCounts = Float64Array.from(this.binadeExtra);
    for (let b = 0; b < BUCKETS; b++) {
      const c = hist[b]!;
      if (c === 0) continue;
      binadeCounts[plan.binade[b]! + BINADE_OFFSET]! += c;
      if (plan.slow[b] !== 0) continue;
      for (let t = 0; t < T; t++) counts[t * CAST_CLASS_COUNT + plan.classes[b * T + t]!]! += c;
    }
    const binades: [number, number][] = [];
    for (let k = 0; k < BINADES; k++) if (binadeCounts[k]! > 0) binades.push([k - BINADE_OFFSET, binadeCounts[k]!]);
    const casts = targets.map((_, t) => {
      const at = (cls: CastClass) => counts[t * CAST_CLASS_COUNT + cls]!;
      return {
        flushed: at(CAST_CLASS.flushed),
        subnormal: at(CAST_CLASS.subnormal),
        saturated: at(CAST_CLASS.saturated),
        overflowed: at(CAST_CLASS.overflowed),
        nonFiniteInFile: at(CAST_CLASS.nan),
      };
    });
    const nonzeroFinite = this.elements - this.zeros - this.infinities - this.nans;
    return {
      elements: this.elements,
      zeros: this.zeros,
      infinities: this.infinities,
      nans: this.nans,
      minNonzero: nonzeroFinite > 0 ? this.minNonzero : null,
      maxAbs: this.elements - this.infinities - this.nans > 0 ? Math.max(this.maxAbs, 0) : null,
      sumOfSquares: this.sumOfSquares,
      binades,
      casts,
      quantile: (q) => this.quantile(q, nonzeroFinite),
    };
  }

  /** Magnitude below which a share q of the nonzero finite elements lie: the upper edge of the bucket that reaches q. */
  private quantile(q: number, total: number): number | null {
    if (total <= 0 || !(q >= 0 && q <= 1)) return null;
    const want = q * total;
    // walk magnitudes upward: subnormal-input binades (kept apart) interleave with the buckets by binade
    const { plan, hist } = this;
    let seen = 0;
    let extraBinade = 0;
    const extraBelow = (binade: number): number | null => {
      for (; extraBinade < BINADES && extraBinade - BINADE_OFFSET < binade; extraBinade++) {
        seen += this.binadeExtra[extraBinade]!;
        if (seen >= want) return 2 ** (extraBinade - BINADE_OFFSET + 1);
      }
      return null;
    };
    for (let b = 0; b < BUCKETS; b++) {
      if (plan.slow[b] === SLOW_SPECIAL || hist[b] === 0) continue;
      const hit = extraBelow(plan.binade[b]!);
      if (hit !== null) return Math.min(hit, this.maxAbs);
      seen += hist[b]!;
      if (seen >= want) return Math.min(bucketTop(plan.width, b), this.maxAbs);
    }
    const hit = extraBelow(BINADES);
    return hit !== null ? Math.min(hit, this.maxAbs) : this.maxAbs;
  }
}

function bucketTop(width: 32 | 64, b: number): number {
  if (width === 32) return new Float32Array(Uint32Array.of(((b + 1) << 16) >>> 0).buffer)[0]!;
  return new Float64Array(Uint32Array.of(0, ((b + 1) << 16) >>> 0).buffer)[0]!;
}
