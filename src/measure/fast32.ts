/**
 * The hot loop over binary32 values, as a small WebAssembly module with 128-bit SIMD: one pass over a chunk counts
 * each element into its bucket (the top 16 bits of |x|: exponent and 7 fraction bits), sums the squares (per channel
 * too) and keeps the extremes of |bits|, with no function call and no table besides the bucket counters. Everything
 * else (cast classes, binades, channel figures) is derived from these counts and sums by the callers. Infinities and
 * NaNs are squared like any value, which spoils the sums of their chunk; they are rare, and the caller, seeing them in
 * the largest |bits|, sums that chunk again.
 *
 * Semantics relied on (WebAssembly Core Specification 2.0, §4.3 Numerics and §4.4.3 Vector Instructions; section
 * numbers from memory): i32 arithmetic wraps modulo 2^32 and i32x4 lanes act as four such integers; i32x4.shr_s is
 * an arithmetic shift; f64.promote_f32 and f64x2.promote_low_f32x4 are exact; f64 and f64x2 add and multiply are IEEE
 * 754 binary64 operations rounded to nearest, ties to even, lane by lane, with no fused multiply-add. The square of
 * a binary32 value is exact in binary64 (24 + 24 significant bits fit in 53), so every square equals JavaScript's
 * x * x; a channel's sum adds them in storage order, as a plain loop does. Loads and stores are little-endian
 * (§4.4.7) and may be unaligned, so i32 lanes of a loaded vector are the binary32 bit patterns in order.
 *
 * Two tricks keep the loop short. Each bucket has WAYS counters, and the four elements of a step use one each, so
 * neighbours in one bucket do not wait on one memory cell. And the counters of buckets a class boundary cuts start
 * at FLAG, a large negative number: an increment that leaves a counter negative marks a rare element for the exact
 * path, found by the sign of the value just written instead of a second table; the step's address is written to the
 * flagged list every time and the list's end moves on only when a counter went negative, so there is no branch.
 *
 * The counters live in the module's memory, where one accumulator at a time holds them (takeCounters); chunks read
 * into a buffer lent from that memory (lendBuffer) are counted where they lie, others are copied in first (at most
 * MAX_PASS elements a pass), and the results are read back.
 */
import { CodeBuilder, F64, I32, instantiate, op, PAGE_BYTES, V128, type WasmFunction } from "../numeric/wasm.js";
import type { ChannelSums } from "./channels.js";

/** counters per bucket, interleaved: bucket b, way k sits at b × WAYS + k (the kernel is written for 4) */
export const WAYS = 4;
/** starting value of the counters of buckets a class boundary cuts; stays negative for fewer than 2^30 increments */
export const FLAG = -(2 ** 30);
/** increments a counter may take between two merges (counters are int32; flagged ones start at FLAG) */
export const MERGE_EVERY = 2 ** 29;
/** |bits| of +infinity: at and above it lie infinities and NaNs (IEEE 754-2019 binary32 encoding) */
export const INFINITY_BITS = 0x7f800000;
/** |bits| of the smallest normal binary32 value, 2^-126 (IEEE 754-2019) */
export const MIN_NORMAL_BITS = 0x00800000;
/** binary32 elements per counting pass at most */
export const MAX_PASS = 1 << 20;
/** shortest channel run (fastSum.length) {@link countPass} takes; shorter runs cost more in calls than they save */
export const MIN_FUSED_RUN = 64;

const BUCKETS = 32768;

// the module's memory (byte addresses): counters, results, per-run records, the chunk, the flagged list, a window
// of the per-channel sums
const COUNTS_AT = 0;
const RESULTS_AT = BUCKETS * WAYS * 4;
const RUNS_AT = RESULTS_AT + 64;
const VALUES_AT = 1 << 20;
const FLAGGED_AT = VALUES_AT + 4 * MAX_PASS;
const FAST_AT = FLAGGED_AT + 4 * MAX_PASS;
/** buffers lent to file readers (see {@link lendBuffer}): two per file read at the same time */
const LENT_BUFFERS = 4;
/** bytes of a lent buffer */
export const LENT_BUFFER_BYTES = 2 << 20;
const LENT_AT = FAST_AT + 8 * MAX_PASS;
const MEMORY_BYTES = LENT_AT + LENT_BUFFERS * LENT_BUFFER_BYTES;
// a pass of MAX_PASS elements in runs of MIN_FUSED_RUN has at most this many runs (partial ones at both ends)
if (RUNS_AT + 16 * (MAX_PASS / MIN_FUSED_RUN + 2) > VALUES_AT) throw new Error("fast32: run records overlap the chunk");

/**
 * The counting function. Parameters: the chunk (byte address, element count), where the flagged list starts, the
 * byte address of channel 0's sum (wrapping modulo 2^32 is fine: only channels from `fast` on are touched), the run
 * length and the fast-axis channel of the first element. Per run it writes [f64 sum of squares, i32 largest |bits|]
 * at RUNS_AT (16 bytes a run), and at the end [f64 total, i32 largest |bits|, i32 smallest (|bits| − 1) mod 2^31,
 * i32 end of the flagged list, i32 runs] at RESULTS_AT. With `channels` false the squares go to no channel.
 */
function countFunction(channels: boolean): WasmFunction {
  const [values, n, flaggedAt, fastBase, runLength, fast] = [0, 1, 2, 3, 4, 5];
  const [p, end, runEnd, groupEnd, fp, flagPtr, c, w, runsPtr, maxG, runMax] = [6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16];
  const [total, runSum, x] = [17, 18, 19];
  const [v, u, maxV, minV, sumV, lo, hi] = [20, 21, 22, 23, 24, 25, 26];
  const b = new CodeBuilder();
  const splat = (k: number) => op.v128ConstI32([k, k, k, k]);
  /** the high half of a vector in its low half (the high half is any) */
  const HIGH_HALF = [8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
  const ODD_LANES = [4, 5, 6, 7, 0, 1, 2, 3, 12, 13, 14, 15, 8, 9, 10, 11];
  /** reduce the i32x4 local `vec` with `pick` (min_u or max_u) to lane 0, left on the stack */
  const reduce = (vec: number, pick: number[]) =>
    b.emit(op.localGet(vec), op.localGet(vec), op.localGet(vec), op.i8x16Shuffle(HIGH_HALF), pick, op.localTee(vec))
      .emit(op.localGet(vec), op.localGet(vec), op.i8x16Shuffle(ODD_LANES), pick, op.i32x4ExtractLane(0));
  /** bump the counter at the byte address on the stack; leave the new count in `c` */
  const bump = () => b.emit(op.localTee(w), op.localGet(w), op.i32Load(COUNTS_AT), op.i32Const(1), op.i32Add, op.localTee(c), op.i32Store(COUNTS_AT));
  /** write p to the flagged list; move the list on when the i32 on the stack is negative */
  const flagIfNegative = () =>
    b.emit(op.i32Const(31), op.i32ShrU, op.i32Const(2), op.i32Shl, op.localGet(flagPtr), op.localGet(p), op.i32Store(0))
      .emit(op.localGet(flagPtr), op.i32Add, op.localSet(flagPtr));
  /** add the f64x2 local to the two channel sums at fp + offset */
  const addToChannels = (local: number, offset: number) =>
    b.emit(op.localGet(fp), op.localGet(fp), op.v128Load(offset), op.localGet(local), op.f64x2Add, op.v128Store(offset));

  b.emit(op.localGet(values), op.localTee(p), op.localGet(n), op.i32Const(2), op.i32Shl, op.i32Add, op.localSet(end));
  b.emit(op.localGet(flaggedAt), op.localSet(flagPtr), op.i32Const(RUNS_AT), op.localSet(runsPtr));
  b.emit(splat(0x7fffffff), op.localSet(minV), op.i32Const(0), op.localSet(maxG), op.f64Const(0), op.localSet(total));
  b.whileBelow(p, end, () => {
    // runEnd = min(end, p + 4 (runLength − fast)); groupEnd: the last whole step of four in the run
    b.emit(op.localGet(p), op.localGet(runLength), op.localGet(fast), op.i32Sub, op.i32Const(2), op.i32Shl, op.i32Add, op.localTee(runEnd));
    b.emit(op.localGet(end), op.localGet(runEnd), op.localGet(end), op.i32LtU, op.select, op.localSet(runEnd));
    b.emit(op.localGet(p), op.localGet(runEnd), op.localGet(p), op.i32Sub, op.i32Const(-16), op.i32And, op.i32Add, op.localSet(groupEnd));
    b.emit(op.localGet(fastBase), op.localGet(fast), op.i32Const(3), op.i32Shl, op.i32Add, op.localSet(fp));
    b.emit(op.v128Zero, op.localSet(maxV), op.v128Zero, op.localSet(sumV), op.f64Const(0), op.localSet(runSum));
    b.whileBelow(p, groupEnd, () => {
      // counter address of lane k: bucket × 16 + 4k bytes, straight from the raw bits (the shift drops 12 bits, the
      // mask the sign and the low bits)
      b.emit(op.localGet(p), op.v128Load(0), op.localTee(v), op.i32Const(12), op.i32x4ShrS, splat(0x7fff0), op.v128And);
      b.emit(op.v128ConstI32([0, 4, 8, 12]), op.v128Or, op.localSet(u));
      for (let k = 0; k < WAYS; k++) {
        b.emit(op.localGet(u), op.i32x4ExtractLane(k));
        bump();
        b.emit(op.localGet(c));
        if (k > 0) b.emit(op.i32Or);
      }
      flagIfNegative();
      // extremes of |bits| (the smallest nonzero as (|bits| − 1) mod 2^31, so that a zero wraps to the top)
      b.emit(op.localGet(v), splat(0x7fffffff), op.v128And, op.localTee(u), op.localGet(maxV), op.i32x4MaxU, op.localSet(maxV));
      b.emit(op.localGet(u), splat(1), op.i32x4Sub, splat(0x7fffffff), op.v128And, op.localGet(minV), op.i32x4MinU, op.localSet(minV));
      // exact squares in binary64: lanes 0–1 and 2–3
      b.emit(op.localGet(v), op.f64x2PromoteLowF32x4, op.localTee(lo), op.localGet(lo), op.f64x2Mul, op.localSet(lo));
      b.emit(op.localGet(v), op.localGet(v), op.i8x16Shuffle(HIGH_HALF), op.f64x2PromoteLowF32x4, op.localTee(hi), op.localGet(hi), op.f64x2Mul, op.localSet(hi));
      b.emit(op.localGet(sumV), op.localGet(lo), op.localGet(hi), op.f64x2Add, op.f64x2Add, op.localSet(sumV));
      if (channels) {
        addToChannels(lo, 0);
        addToChannels(hi, 16);
        b.emit(op.localGet(fp), op.i32Const(32), op.i32Add, op.localSet(fp));
      }
      b.emit(op.localGet(p), op.i32Const(16), op.i32Add, op.localSet(p));
    });
    // the run's last one to three elements, one at a time (way 0)
    b.whileBelow(p, runEnd, () => {
      b.emit(op.localGet(p), op.i32Load(0), op.localTee(w), op.i32Const(12), op.i32ShrS, op.i32Const(0x7fff0), op.i32And);
      b.emit(op.localGet(w), op.i32Const(0x7fffffff), op.i32And, op.i32x4Splat, op.localSet(u));
      bump();
      b.emit(op.localGet(c));
      flagIfNegative();
      b.emit(op.localGet(u), op.localGet(maxV), op.i32x4MaxU, op.localSet(maxV));
      b.emit(op.localGet(u), splat(1), op.i32x4Sub, splat(0x7fffffff), op.v128And, op.localGet(minV), op.i32x4MinU, op.localSet(minV));
      b.emit(op.localGet(p), op.f32Load(0), op.f64PromoteF32, op.localTee(x), op.localGet(x), op.f64Mul, op.localTee(x));
      b.emit(op.localGet(runSum), op.f64Add, op.localSet(runSum));
      if (channels) {
        b.emit(op.localGet(fp), op.localGet(fp), op.f64Load(0), op.localGet(x), op.f64Add, op.f64Store(0));
        b.emit(op.localGet(fp), op.i32Const(8), op.i32Add, op.localSet(fp));
      }
      b.emit(op.localGet(p), op.i32Const(4), op.i32Add, op.localSet(p));
    });
    // the run's record: its sum and its largest |bits|; then the next run starts at channel 0
    b.emit(op.localGet(sumV), op.f64x2ExtractLane(0), op.localGet(sumV), op.f64x2ExtractLane(1), op.f64Add, op.localGet(runSum), op.f64Add, op.localSet(runSum));
    reduce(maxV, op.i32x4MaxU);
    b.emit(op.localSet(runMax), op.localGet(runsPtr), op.localGet(runSum), op.f64Store(0), op.localGet(runsPtr), op.localGet(runMax), op.i32Store(8));
    b.emit(op.localGet(runMax), op.localGet(maxG), op.localGet(runMax), op.localGet(maxG), op.i32GtU, op.select, op.localSet(maxG));
    b.emit(op.localGet(total), op.localGet(runSum), op.f64Add, op.localSet(total));
    b.emit(op.localGet(runsPtr), op.i32Const(16), op.i32Add, op.localSet(runsPtr), op.i32Const(0), op.localSet(fast));
  });
  b.emit(op.i32Const(0), op.localGet(total), op.f64Store(RESULTS_AT), op.i32Const(0), op.localGet(maxG), op.i32Store(RESULTS_AT + 8));
  b.emit(op.i32Const(0));
  reduce(minV, op.i32x4MinU);
  b.emit(op.i32Store(RESULTS_AT + 12), op.i32Const(0), op.localGet(flagPtr), op.i32Store(RESULTS_AT + 16));
  b.emit(op.i32Const(0), op.localGet(runsPtr), op.i32Const(RUNS_AT), op.i32Sub, op.i32Const(4), op.i32ShrU, op.i32Store(RESULTS_AT + 20));
  return {
    name: channels ? "countChannels" : "count",
    params: new Array<number>(6).fill(I32),
    results: [],
    locals: [
      [11, I32],
      [3, F64],
      [7, V128],
    ],
    code: b.code,
  };
}

type CountFunction = (values: number, n: number, flaggedAt: number, fastBase: number, runLength: number, fast: number) => void;

interface Kernel {
  buffer: ArrayBuffer;
  /** indices of the lent buffers not lent now */
  free: number[];
  count: CountFunction;
  countChannels: CountFunction;
  bytes: Uint8Array;
  i32: Int32Array;
  f64: Float64Array;
  counts: Int32Array;
  /** who holds the counters now */
  owner: Counters | null;
  /** with no owner: the counters at rest that the memory holds (null when unknown) */
  resting: Int32Array | null;
}

let kernel: Kernel | undefined;

function instantiateKernel(): Kernel {
  const { memory, exports } = instantiate([countFunction(false), countFunction(true)], Math.ceil(MEMORY_BYTES / PAGE_BYTES));
  // the memory never grows, so these views stay valid
  const buffer = memory.buffer;
  return {
    buffer,
    free: Array.from({ length: LENT_BUFFERS }, (_, i) => i),
    count: exports.count as CountFunction,
    countChannels: exports.countChannels as CountFunction,
    bytes: new Uint8Array(buffer),
    i32: new Int32Array(buffer),
    f64: new Float64Array(buffer),
    counts: new Int32Array(buffer, COUNTS_AT, BUCKETS * WAYS),
    owner: null,
    resting: null,
  };
}

/**
 * A buffer of LENT_BUFFER_BYTES inside the counting kernel's memory, or null when all are lent: binary32 values read
 * into it are counted without a copy. Give it back with {@link returnBuffer} once nothing reads into it any more.
 */
export function lendBuffer(): Uint8Array | null {
  const k = (kernel ??= instantiateKernel());
  const slot = k.free.pop();
  return slot === undefined ? null : new Uint8Array(k.buffer, LENT_AT + slot * LENT_BUFFER_BYTES, LENT_BUFFER_BYTES);
}

/** Give back a buffer from {@link lendBuffer}. */
export function returnBuffer(lent: Uint8Array): void {
  const k = kernel!;
  const slot = (lent.byteOffset - LENT_AT) / LENT_BUFFER_BYTES;
  if (lent.buffer !== k.buffer || !Number.isInteger(slot) || k.free.includes(slot)) throw new RangeError("returnBuffer: not a lent buffer");
  k.free.push(slot);
}

/** A holder of bucket counters: the kernel's own while it is theirs, a copy of them when another took them. */
export interface Counters {
  counts: Int32Array | null;
}

/**
 * Give the kernel's bucket counters to `owner` and return them (WAYS per bucket). They start as the owner's own
 * counts, or `base` (the counters at rest) when it has none; the previous owner gets a copy of its counts.
 */
export function takeCounters(owner: Counters, base: Int32Array): Int32Array {
  const k = (kernel ??= instantiateKernel());
  if (k.owner === owner) return k.counts;
  if (k.owner) k.owner.counts = k.counts.slice();
  if (owner.counts) k.counts.set(owner.counts);
  else if (k.resting !== base) k.counts.set(base);
  k.owner = owner;
  k.resting = null;
  return (owner.counts = k.counts);
}

/** `owner`'s counters are back at rest (equal to `base`): let them go, so the next accumulator can start from them. */
export function releaseCounters(owner: Counters, base: Int32Array): void {
  const k = kernel;
  if (k && k.owner === owner) {
    k.owner = null;
    k.resting = base;
  }
  owner.counts = null;
}

/**
 * Results of the last pass besides its sum of squares: [largest |bits|, smallest (|bits| − 1) mod 2^31, which is
 * the smallest nonzero |bits| less one (a zero wraps to 0x7fffffff), number of entries written to `flagged`].
 */
export const runResult = new Int32Array(3);

/**
 * Count a chunk of at most MAX_PASS values into the counters of the last {@link takeCounters} and return the sum
 * of its squares. Flagged elements are reported in `flagged` by the index of the start of their step of four (or
 * their own, in a run's last, shorter step), ascending. With `channels`, the chunk starts at storage index `first`
 * of a tensor whose runs along the fast storage axis are fastSum.length long (at least MIN_FUSED_RUN: rows of a
 * C-order matrix): each square goes to its fast-axis channel, each run's sum and largest square to its slow-axis one.
 */
export function countPass(values: Float32Array, flagged: Int32Array, channels?: ChannelSums, first = 0): number {
  const k = (kernel ??= instantiateKernel());
  const n = values.length;
  if (n > MAX_PASS) throw new RangeError(`a counting pass takes at most ${MAX_PASS} values; got ${n}`);
  runResult.set([0, 0x7fffffff, 0]);
  if (n === 0) return 0;
  // values in the kernel's memory (a lent buffer) are counted where they lie
  const at = values.buffer === k.buffer ? values.byteOffset : VALUES_AT;
  if (at === VALUES_AT) k.bytes.set(new Uint8Array(values.buffer, values.byteOffset, 4 * n), VALUES_AT);
  let total = 0;
  let max = 0;
  let min = 0x7fffffff;
  let flagEnd = FLAGGED_AT;
  const collect = () => {
    total += k.f64[RESULTS_AT / 8]!;
    max = Math.max(max, k.i32[RESULTS_AT / 4 + 2]!);
    min = Math.min(min, k.i32[RESULTS_AT / 4 + 3]!);
    flagEnd = k.i32[RESULTS_AT / 4 + 4]!;
  };
  if (!channels) {
    k.count(at, n, FLAGGED_AT, 0, n, 0);
    collect();
  } else {
    const { fastSum, slowSum, slowMaxSquare } = channels;
    const runLength = fastSum.length;
    if (runLength < MIN_FUSED_RUN) throw new RangeError(`channel runs of at least ${MIN_FUSED_RUN} values; got ${runLength}`);
    let slow = Math.floor(first / runLength);
    let fast = first - slow * runLength;
    // a pass touches the channels from `fast` on, up to the run's end or its own, copied into the window at FAST_AT;
    // a chunk that starts inside a run and goes past its end takes two passes, the second from channel 0
    for (let done = 0; done < n; ) {
      const length = fast > 0 ? Math.min(n - done, runLength - fast) : n - done;
      const span = Math.min(length, runLength - fast);
      k.f64.set(fastSum.subarray(fast, fast + span), FAST_AT / 8);
      k.countChannels(at + 4 * done, length, flagEnd, (FAST_AT - 8 * fast) | 0, Math.min(runLength, fast + length), fast);
      fastSum.set(k.f64.subarray(FAST_AT / 8, FAST_AT / 8 + span), fast);
      collect();
      const runs = k.i32[RESULTS_AT / 4 + 5]!;
      for (let r = 0; r < runs; r++, slow++) {
        slowSum[slow] = slowSum[slow]! + k.f64[RUNS_AT / 8 + 2 * r]!;
        const a = valueOfBits(k.i32[RUNS_AT / 4 + 4 * r + 2]!);
        if (a * a > slowMaxSquare[slow]!) slowMaxSquare[slow] = a * a;
      }
      // a pass ending inside a run ends the chunk, so `slow` only matters after whole runs
      done += length;
      fast = 0;
    }
  }
  const nFlagged = (flagEnd - FLAGGED_AT) >> 2;
  for (let i = 0; i < nFlagged; i++) flagged[i] = (k.i32[FLAGGED_AT / 4 + i]! - at) >> 2;
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
