/**
 * The hot loops over binary32 values: one pass over a chunk counts each element into its bucket (the top 16 bits of
 * |x|: exponent and 7 fraction bits), sums the squares (per channel too) and keeps the extremes of |bits|, with no
 * function call and no table besides the bucket counters. Everything else (cast classes, binades, channel figures)
 * is derived from these counts and sums by the callers. Infinities and NaNs are squared like any value, which spoils
 * the sums of their chunk; they are rare, and the caller, seeing them in the largest |bits|, sums that chunk again.
 *
 * Two tricks keep the loop short. Each bucket has WAYS counters, and the four elements of a step use one each, so
 * neighbours in one bucket do not wait on one memory cell. And the counters of buckets a class boundary cuts start
 * at FLAG, a large negative number: an increment that leaves a counter negative marks a rare element for the exact
 * path, found by the sign of the value just written instead of a second table.
 */

/** counters per bucket, interleaved: bucket b, way k sits at b × WAYS + k (the loops are written for 4) */
export const WAYS = 4;
/** starting value of the counters of buckets a class boundary cuts; stays negative for fewer than 2^30 increments */
export const FLAG = -(2 ** 30);
/** increments a counter may take between two merges (counters are int32; flagged ones start at FLAG) */
export const MERGE_EVERY = 2 ** 29;
/** |bits| of +infinity: at and above it lie infinities and NaNs (IEEE 754-2019 binary32 encoding) */
export const INFINITY_BITS = 0x7f800000;
/** |bits| of the smallest normal binary32 value, 2^-126 (IEEE 754-2019) */
export const MIN_NORMAL_BITS = 0x00800000;

/**
 * Results of the last pass besides its sum of squares: [largest |bits|, smallest (|bits| − 1) mod 2^31, which is
 * the smallest nonzero |bits| less one (a zero wraps to 0x7fffffff), number of entries written to `flagged`].
 */
export const runResult = new Int32Array(3);

/** channel sums nobody reads, for {@link countRun}: it is the same pass over runs of SCRATCH_RUN elements */
const SCRATCH_RUN = 4096;
const scratchFast = new Float64Array(SCRATCH_RUN);
let scratchSlow = new Float64Array(0);

/**
 * Count the chunk into `counts` and return the sum of its squares; `bits` views the same memory as `values`.
 * Flagged elements are reported by the start of their group of four in `flagged`. (One loop serves both this and
 * {@link countChunkChannels}: the channel squares it adds here go to a small scratch row that stays in cache.)
 */
export function countRun(values: Float32Array, bits: Int32Array, counts: Int32Array, flagged: Int32Array): number {
  const runs = Math.ceil(values.length / SCRATCH_RUN);
  if (scratchSlow.length < runs) scratchSlow = new Float64Array(runs);
  return countChunkChannels(values, bits, counts, flagged, 0, scratchFast, scratchSlow, scratchSlow);
}

/**
 * Count the chunk into `counts` and feed the per-channel sums; return the sum of its squares. The chunk starts at
 * storage index `first` of a tensor whose runs along the fast storage axis are fastSum.length long (rows of a C-order
 * matrix). Each square goes to its fast-axis channel; each run's sum and largest square go to its slow-axis channel.
 * `bits` views the same memory as `values`; flagged elements are reported by the start of their group of four.
 */
export function countChunkChannels(
  values: Float32Array,
  bits: Int32Array,
  counts: Int32Array,
  flagged: Int32Array,
  first: number,
  fastSum: Float64Array,
  slowSum: Float64Array,
  slowMaxSquare: Float64Array,
): number {
  const n = values.length;
  const runLength = fastSum.length;
  let slow = Math.floor(first / runLength);
  let fast = first - slow * runLength;
  let total = 0;
  let max = 0;
  let min = 0x7fffffff;
  let nFlagged = 0;
  for (let start = 0; start < n; ) {
    const end = Math.min(n, start + runLength - fast);
    const groups = start + ((end - start) & ~3);
    // channel of position i: offset + i
    const offset = fast - start;
    let sum = 0;
    let runMax = 0;
    // four elements a step, each with its own counter of the bucket (way k), so neighbours never wait on one another
    for (let i = start; i < groups; i += 4) {
      const w0 = bits[i]!;
      const w1 = bits[i + 1]!;
      const w2 = bits[i + 2]!;
      const w3 = bits[i + 3]!;
      // bucket × 4 + way, straight from the raw bits: the shift drops 14 bits, the mask drops the sign and way bits;
      // `| 0` below spares the engine an overflow check per increment (counters stay far inside int32: MERGE_EVERY)
      const j0 = (w0 >> 14) & 0x1fffc;
      const j1 = ((w1 >> 14) & 0x1fffc) | 1;
      const j2 = ((w2 >> 14) & 0x1fffc) | 2;
      const j3 = ((w3 >> 14) & 0x1fffc) | 3;
      const c0 = (counts[j0]! + 1) | 0;
      counts[j0] = c0;
      const c1 = (counts[j1]! + 1) | 0;
      counts[j1] = c1;
      const c2 = (counts[j2]! + 1) | 0;
      counts[j2] = c2;
      const c3 = (counts[j3]! + 1) | 0;
      counts[j3] = c3;
      if ((c0 | c1 | c2 | c3) < 0) flagged[nFlagged++] = i;
      const u0 = w0 & 0x7fffffff;
      const u1 = w1 & 0x7fffffff;
      const u2 = w2 & 0x7fffffff;
      const u3 = w3 & 0x7fffffff;
      // one comparison per element against the running extreme: rarely true, so the branch is predicted
      if (u0 > runMax) runMax = u0;
      if (u1 > runMax) runMax = u1;
      if (u2 > runMax) runMax = u2;
      if (u3 > runMax) runMax = u3;
      // smallest nonzero: a zero wraps to 0x7fffffff
      const m0 = (u0 - 1) & 0x7fffffff;
      const m1 = (u1 - 1) & 0x7fffffff;
      const m2 = (u2 - 1) & 0x7fffffff;
      const m3 = (u3 - 1) & 0x7fffffff;
      if (m0 < min) min = m0;
      if (m1 < min) min = m1;
      if (m2 < min) min = m2;
      if (m3 < min) min = m3;
      const x0 = values[i]!;
      const x1 = values[i + 1]!;
      const x2 = values[i + 2]!;
      const x3 = values[i + 3]!;
      const s0 = x0 * x0;
      const s1 = x1 * x1;
      const s2 = x2 * x2;
      const s3 = x3 * x3;
      const k = (offset + i) | 0;
      fastSum[k] = fastSum[k]! + s0;
      fastSum[k + 1] = fastSum[k + 1]! + s1;
      fastSum[k + 2] = fastSum[k + 2]! + s2;
      fastSum[k + 3] = fastSum[k + 3]! + s3;
      sum += s0 + s1 + (s2 + s3);
    }
    for (let i = groups; i < end; i++) {
      const w = bits[i]!;
      const j = (w >> 14) & 0x1fffc;
      const c = (counts[j]! + 1) | 0;
      counts[j] = c;
      if (c < 0) flagged[nFlagged++] = i;
      const u = w & 0x7fffffff;
      if (u > runMax) runMax = u;
      const m = (u - 1) & 0x7fffffff;
      if (m < min) min = m;
      const x = values[i]!;
      const s = x * x;
      fastSum[offset + i] = fastSum[offset + i]! + s;
      sum += s;
    }
    if (runMax > max) max = runMax;
    const a = valueOfBits(runMax);
    slowSum[slow] = slowSum[slow]! + sum;
    if (a * a > slowMaxSquare[slow]!) slowMaxSquare[slow] = a * a;
    total += sum;
    start = end;
    fast = 0;
    slow++;
  }
  runResult[0] = max;
  runResult[1] = min;
  runResult[2] = nFlagged;
  return total;
}

const scratchBits = new Int32Array(1);
const scratchValue = new Float32Array(scratchBits.buffer);

/** The binary32 value whose bit pattern is `u`. */
export function valueOfBits(u: number): number {
  scratchBits[0] = u;
  return scratchValue[0]!;
}

// Type feedback for the rare branch (a flagged element, in a step of four and in the tail) before the first real
// chunk: without it the optimised loops bail out to the interpreter the first time a flagged element turns up.
{
  const values = new Float32Array(WAYS + 1);
  const bits = new Int32Array(values.buffer);
  for (let round = 0; round < 30; round++) {
    countRun(values, bits, new Int32Array(WAYS).fill(FLAG), new Int32Array(WAYS + 1));
    const sums = [new Float64Array(WAYS + 1), new Float64Array(1), new Float64Array(1)] as const;
    countChunkChannels(values, bits, new Int32Array(WAYS).fill(FLAG), new Int32Array(WAYS + 1), 0, ...sums);
  }
}
