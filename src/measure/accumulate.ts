/**
 * Streaming per-tensor statistics: feed chunks of values, get exact counts at the end.
 *
 * Why buckets: the class of a value under a cast (flushed, subnormal, normal, saturated, overflowed) depends only on
 * its magnitude, and the class boundaries are few. Magnitudes are binned by their top bits (sign dropped: the exponent
 * and the leading fraction bits, 32768 buckets); a bucket whose smallest and largest magnitudes fall in the same class
 * for every target is counted by one increment per element, and its class counts are added once at the end. The few
 * buckets a class boundary cuts through, plus zeros, infinities, NaNs and subnormal inputs, take an exact per-element
 * path through the format module's rounding. The counts are therefore exact, at the price of a histogram increment.
 */
import { binadeOf } from "../formats/index.js";
import { CAST_CLASS, CAST_CLASS_COUNT, type CastClass, type CastTarget } from "./classes.js";

const BUCKETS = 32768;
/** binade k counts magnitudes in [2^k, 2^(k+1)); binary64 spans k = −1074 … 1023 */
const BINADE_OFFSET = 1100;
const BINADES = 2200;

/** elements per block of the fast path: a block that touches a bucket a boundary cuts is classified again, alone */
const BLOCK = 4096;

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
  /** the buckets a boundary cuts, ascending */
  impure: Int32Array;
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
  const impure = Int32Array.from(new Set(cutsFor.map(([b]) => b))).sort();
  return { width, targets, slow, classes, binade, cuts, above, impure };
}

/** Per-target cast counts of one tensor. */
export interface CastCounts {
  flushed: number;
  subnormal: number;
  saturated: number;
  overflowed: number;
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

  constructor(private readonly plan: BucketPlan) {
    this.classCounts = new Float64Array(plan.targets.length * CAST_CLASS_COUNT);
    this.impureSeen = new Uint32Array(plan.impure.length);
  }

  /** Feed the next values (binary32 values for a width-32 plan, binary64 for width 64). */
  add(values: Float32Array | Float64Array): void {
    this.elements += values.length;
    if (values instanceof Float32Array) {
      if (this.plan.width !== 32) throw new TypeError("a binary64 bucket plan was given binary32 values");
      const blocks = Math.ceil(values.length / BLOCK);
      if (this.pendingBlocks.length < blocks) {
        this.pendingBlocks = new Int32Array(blocks);
        this.pendingBuckets = new Int32Array(blocks);
      }
      this.add32(values);
    } else {
      if (this.plan.width !== 64) throw new TypeError("a binary32 bucket plan was given binary64 values");
      this.add64(values);
    }
  }

  /** per-chunk counts for the fast path; all zero between calls */
  private readonly chunkHist = new Uint32Array(BUCKETS);
  /** counts of the impure buckets at the end of the last block */
  private readonly impureSeen: Uint32Array;
  /** starts of the blocks of the current chunk that touched impure buckets */
  private pendingBlocks = new Int32Array(0);
  /** for each pending block: the one impure bucket it touched, or −2 for several */
  private pendingBuckets = new Int32Array(0);

  /**
   * binary32 values. The fast pass counts buckets, squares and extremes with no per-element branch; the chunk then
   * takes the exact per-element path only if it holds zeros, binary32 subnormals, infinities or NaNs (seen from its
   * extremes), and a short extra pass classifies the elements of buckets a boundary cuts, when any were seen.
   */
  private add32(values: Float32Array): void {
    const n = values.length;
    if (n === 0) return;
    const bits = new Int32Array(values.buffer, values.byteOffset, n);
    const chunk = this.chunkHist;
    const impure = this.plan.impure;
    const seen = this.impureSeen;
    seen.fill(0);
    let pending = 0;
    let sum0 = 0;
    let sum1 = 0;
    let maxU = 0;
    let minU = 0x7fffffff;
    for (let start = 0; start < n; start += BLOCK) {
      const end = Math.min(n, start + BLOCK);
      let i = start;
      for (; i + 1 < end; i += 2) {
        const u0 = bits[i]! & 0x7fffffff;
        const u1 = bits[i + 1]! & 0x7fffffff;
        chunk[u0 >> 16] = chunk[u0 >> 16]! + 1;
        chunk[u1 >> 16] = chunk[u1 >> 16]! + 1;
        maxU = u0 > maxU ? u0 : maxU;
        maxU = u1 > maxU ? u1 : maxU;
        minU = u0 < minU ? u0 : minU;
        minU = u1 < minU ? u1 : minU;
        const x0 = values[i]!;
        const x1 = values[i + 1]!;
        sum0 += x0 * x0;
        sum1 += x1 * x1;
      }
      if (i < end) {
        const u = bits[i]! & 0x7fffffff;
        chunk[u >> 16] = chunk[u >> 16]! + 1;
        maxU = u > maxU ? u : maxU;
        minU = u < minU ? u : minU;
        const x = values[i]!;
        sum0 += x * x;
      }
      // a block that put anything into a bucket a boundary cuts is classified element by element below
      // (-1: none; a bucket; -2: several)
      let hit = -1;
      for (let k = 0; k < impure.length; k++) {
        const c = chunk[impure[k]!]!;
        if (c !== seen[k]) {
          seen[k] = c;
          hit = hit === -1 ? impure[k]! : -2;
        }
      }
      if (hit !== -1) {
        this.pendingBlocks[pending] = start;
        this.pendingBuckets[pending++] = hit;
      }
    }
    const lowBucket = minU >> 16;
    const highBucket = maxU >> 16;
    // zero and binary32 subnormals sit below the smallest normal pattern, infinities and NaNs from 0x7f800000 up
    if (minU < 0x00800000 || maxU >= 0x7f800000) {
      chunk.fill(0, lowBucket, highBucket + 1);
      this.exact32(values, bits);
      return;
    }
    const hist = this.hist;
    for (let b = lowBucket; b <= highBucket; b++) {
      const c = chunk[b]!;
      if (c !== 0) {
        hist[b] = hist[b]! + c;
        chunk[b] = 0;
      }
    }
    for (let p = 0; p < pending; p++) {
      const start = this.pendingBlocks[p]!;
      this.impurePass32(values, bits, start, Math.min(n, start + BLOCK), this.pendingBuckets[p]!);
    }
    this.sumOfSquares += sum0 + sum1;
    const extremes = new Float32Array(Int32Array.of(maxU, minU).buffer);
    if (extremes[0]! > this.maxAbs) this.maxAbs = extremes[0]!;
    if (extremes[1]! < this.minNonzero) this.minNonzero = extremes[1]!;
  }

  /**
   * Classify the elements of values[start, end) that fall in buckets a boundary cuts (already in the histogram);
   * `only` is the one such bucket the block touched, or −2 when it touched several.
   */
  private impurePass32(values: Float32Array, bits: Int32Array, start: number, end: number, only: number): void {
    if (only >= 0) {
      // one bucket: a register comparison per element instead of a table lookup
      for (let i = start; i < end; i++) {
        if ((bits[i]! & 0x7fffffff) >> 16 === only) this.classifyImpure(Math.abs(values[i]!), only);
      }
      return;
    }
    const slow = this.plan.slow;
    for (let i = start; i < end; i++) {
      const b = (bits[i]! & 0x7fffffff) >> 16;
      if (slow[b] === SLOW_IMPURE) this.classifyImpure(Math.abs(values[i]!), b);
    }
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

  /** The exact per-element path for chunks with zeros, subnormal inputs, infinities or NaNs. */
  private exact32(values: Float32Array, bits: Int32Array): void {
    const hist = this.hist;
    const slow = this.plan.slow;
    const n = values.length;
    let zeros = 0;
    let sum = 0;
    let maxU = 0;
    let minU = 0x7fffffff;
    for (let i = 0; i < n; i++) {
      const u = bits[i]! & 0x7fffffff;
      if (u === 0) {
        zeros++;
        continue;
      }
      const b = u >> 16;
      if (slow[b] !== 0) {
        this.slowValue(values[i]!, b);
        continue;
      }
      hist[b] = hist[b]! + 1;
      if (u > maxU) maxU = u;
      if (u < minU) minU = u;
      const x = values[i]!;
      sum += x * x;
    }
    this.zeros += zeros;
    this.sumOfSquares += sum;
    if (maxU !== 0) {
      const extremes = new Float32Array(Int32Array.of(maxU, minU).buffer);
      if (extremes[0]! > this.maxAbs) this.maxAbs = extremes[0]!;
      if (extremes[1]! < this.minNonzero) this.minNonzero = extremes[1]!;
    }
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

  /** The exact path: boundary buckets, subnormal inputs, infinities and NaNs. */
  private slowValue(x: number, bucket: number): void {
    const targets = this.plan.targets;
    const counts = this.classCounts;
    if (Number.isNaN(x)) {
      this.nans++;
      for (let t = 0; t < targets.length; t++) counts[t * CAST_CLASS_COUNT + CAST_CLASS.nan]! += 1;
      return;
    }
    const a = Math.abs(x);
    if (this.plan.slow[bucket] === SLOW_IMPURE) this.classifyImpure(a, bucket);
    else for (let t = 0; t < targets.length; t++) counts[t * CAST_CLASS_COUNT + targets[t]!.classify(x)]! += 1;
    if (!Number.isFinite(x)) {
      this.infinities++;
      return;
    }
    this.sumOfSquares += x * x;
    if (a > this.maxAbs) this.maxAbs = a;
    if (a < this.minNonzero) this.minNonzero = a;
    if (this.plan.slow[bucket] === SLOW_IMPURE) this.hist[bucket]! += 1;
    else this.binadeExtra[binadeOf(a) + BINADE_OFFSET]! += 1;
  }

  /** The statistics so far. */
  tally(): TensorTally {
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
