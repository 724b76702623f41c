/**
 * Per-channel outlier statistics: for a vector (a norm gain), which element stands out; for a matrix, the rms and the
 * largest magnitude of every row and every column. Outlier channels (max/rms of 20 to 100,000 in large models,
 * common practice) decide whether one per-tensor scale can serve an 8-bit format.
 */

/** Outlier figures along one axis of a matrix (or over the elements of a vector). */
export interface ChannelAxis {
  /** "row" = first index, "column" = second index, "element" = the entries of a vector */
  axis: "row" | "column" | "element";
  channels: number;
  /** median over channels of the channel rms (of the magnitude itself for "element") */
  medianRms: number;
  /** the channel with the largest rms, and that rms */
  loudest: number;
  loudestRms: number;
  /** loudestRms / medianRms: how far the loudest channel stands out (null when the median is 0) */
  rmsRatio: number | null;
  /**
   * the largest value of (channel max |x|) / (channel rms), and the channel it belongs to; tracked along the axis that
   * changes slowest in storage (rows of a C-order matrix, columns of a Fortran-order one, the elements of a vector),
   * null along the other axis, where a per-element maximum per channel would cost a second store per element
   */
  maxOverRms: number | null;
  maxOverRmsChannel: number | null;
}

/** The running sums of a {@link ChannelAccumulator}. */
export interface ChannelSums {
  readonly fastSum: Float64Array;
  readonly slowSum: Float64Array;
  readonly slowMaxSquare: Float64Array;
}

/** Accumulates per-row and per-column (or per-element) statistics of a rank-1 or rank-2 tensor, in storage order. */
export class ChannelAccumulator {
  private readonly fastSum: Float64Array;
  private readonly slowSum: Float64Array;
  private readonly slowMax: Float64Array;
  private readonly fastCount: number;
  private readonly rows: number;
  private readonly columns: number;

  /**
   * @param shape [n] or [rows, columns]
   * @param order storage order: "C" (last index fastest) or "F" (first index fastest)
   */
  constructor(shape: readonly number[], private readonly order: "C" | "F") {
    if (shape.length === 1) {
      this.rows = shape[0]!;
      this.columns = 1;
    } else if (shape.length === 2) {
      this.rows = shape[0]!;
      this.columns = shape[1]!;
    } else {
      throw new RangeError(`channel statistics need a vector or a matrix; got shape [${shape.join(", ")}]`);
    }
    const vector = shape.length === 1;
    this.fastCount = vector ? this.rows : order === "C" ? this.columns : this.rows;
    const slowCount = vector ? 1 : order === "C" ? this.rows : this.columns;
    this.fastSum = new Float64Array(this.fastCount);
    this.slowSum = new Float64Array(slowCount);
    this.slowMax = new Float64Array(slowCount);
    this.vector = vector;
    this.sums = { fastSum: this.fastSum, slowSum: this.slowSum, slowMaxSquare: this.slowMax };
  }

  private readonly vector: boolean;

  /** Feed values whose first element has storage index `first`. Non-finite values are left out. */
  add(values: Float32Array | Float64Array, first: number): void {
    const fastCount = this.fastCount;
    if (fastCount === 0 || values.length === 0) return;
    let slow = Math.floor(first / fastCount);
    let fast = first - slow * fastCount;
    let done = 0;
    while (done < values.length) {
      const length = Math.min(fastCount - fast, values.length - done);
      addRun(values, done, length, fast, this.fastSum, this.slowSum, this.slowMax, slow);
      done += length;
      fast += length;
      if (fast === fastCount) {
        fast = 0;
        slow++;
      }
    }
  }

  /**
   * The running sums, for a pass that feeds them itself (TensorAccumulator, in its counting pass): the squares per
   * fast-axis channel (fastSum.length is the run length along the fast storage axis), and per slow-axis channel the
   * sum and largest square, non-finite values left out (a pass that added some puts the sums back with restore).
   */
  readonly sums: ChannelSums;

  /** the sums a chunk can change, as they were before it (see {@link save}) */
  private saved = new Float64Array(0);
  private savedFast = 0;
  private savedFastSpan = 0;
  private savedSlow = 0;
  private savedSlowSpan = 0;

  /**
   * Keep a copy of the sums that `length` values from storage index `first` can change, so that a pass that fed
   * them through {@link sums} can be undone with {@link restore} (binary32 chunks with infinities or NaNs).
   */
  save(first: number, length: number): void {
    const count = this.fastCount;
    const slow = Math.floor(first / count);
    const fast = first - slow * count;
    const fastSpan = Math.min(count, length);
    const slowSpan = Math.min(this.slowSum.length - slow, Math.ceil((fast + length) / count));
    if (this.saved.length < fastSpan + 2 * slowSpan) this.saved = new Float64Array(fastSpan + 2 * slowSpan);
    this.savedFast = fast;
    this.savedFastSpan = fastSpan;
    this.savedSlow = slow;
    this.savedSlowSpan = slowSpan;
    // the fast-axis channels from `fast` on, wrapping around to 0 when the values reach into the next run
    const head = Math.min(count - fast, fastSpan);
    this.saved.set(this.fastSum.subarray(fast, fast + head), 0);
    this.saved.set(this.fastSum.subarray(0, fastSpan - head), head);
    this.saved.set(this.slowSum.subarray(slow, slow + slowSpan), fastSpan);
    this.saved.set(this.slowMax.subarray(slow, slow + slowSpan), fastSpan + slowSpan);
  }

  /** Put back the sums kept by the last {@link save}. */
  restore(): void {
    const [fast, fastSpan, slow, slowSpan] = [this.savedFast, this.savedFastSpan, this.savedSlow, this.savedSlowSpan];
    const head = Math.min(this.fastCount - fast, fastSpan);
    this.fastSum.set(this.saved.subarray(0, head), fast);
    this.fastSum.set(this.saved.subarray(head, fastSpan), 0);
    this.slowSum.set(this.saved.subarray(fastSpan, fastSpan + slowSpan), slow);
    this.slowMax.set(this.saved.subarray(fastSpan + slowSpan, fastSpan + 2 * slowSpan), slow);
  }

  /** The outlier figures: one axis for a vector, rows then columns for a matrix. */
  result(): ChannelAxis[] {
    if (this.vector) return [axisFigures("element", this.fastSum, null, 1)];
    const [rowSum, rowMax, colSum, colMax] =
      this.order === "C"
        ? [this.slowSum, this.slowMax, this.fastSum, null]
        : [this.fastSum, null, this.slowSum, this.slowMax];
    return [axisFigures("row", rowSum, rowMax, this.columns), axisFigures("column", colSum, colMax, this.rows)];
  }
}

function axisFigures(axis: ChannelAxis["axis"], sums: Float64Array, maxes: Float64Array | null, perChannel: number): ChannelAxis {
  const n = sums.length;
  const rms = new Float64Array(n);
  for (let i = 0; i < n; i++) rms[i] = perChannel > 0 ? Math.sqrt(sums[i]! / perChannel) : 0;
  let loudest = 0;
  let maxOverRms: number | null = maxes ? 0 : null;
  let maxOverRmsChannel: number | null = maxes ? 0 : null;
  for (let i = 0; i < n; i++) {
    if (rms[i]! > rms[loudest]!) loudest = i;
    if (!maxes) continue;
    const ratio = rms[i]! > 0 ? Math.sqrt(maxes[i]!) / rms[i]! : 0;
    if (ratio > maxOverRms!) {
      maxOverRms = ratio;
      maxOverRmsChannel = i;
    }
  }
  const sorted = Float64Array.from(rms).sort();
  const medianRms = n === 0 ? 0 : n % 2 === 1 ? sorted[(n - 1) / 2]! : (sorted[n / 2 - 1]! + sorted[n / 2]!) / 2;
  const loudestRms = n === 0 ? 0 : rms[loudest]!;
  return {
    axis,
    channels: n,
    medianRms,
    loudest,
    loudestRms,
    rmsRatio: medianRms > 0 ? loudestRms / medianRms : null,
    maxOverRms,
    maxOverRmsChannel,
  };
}

/**
 * One run of consecutive elements along the fast axis (part of one row in C order): squares go to each element's
 * fast-axis channel and, summed, to the run's slow-axis channel, whose largest square is kept too (no abs needed).
 */
function addRun(
  values: Float32Array | Float64Array,
  start: number,
  length: number,
  fast: number,
  fastSum: Float64Array,
  slowSum: Float64Array,
  slowMaxSquare: Float64Array,
  slow: number,
): void {
  let sum = 0;
  let maxSquare = 0;
  for (let i = 0; i < length; i++) {
    const x = values[start + i]!;
    const s = x * x;
    // infinities and NaNs are left out (NaN fails the comparison too)
    if (s < Infinity) {
      const c = fast + i;
      fastSum[c] = fastSum[c]! + s;
      sum += s;
      maxSquare = s > maxSquare ? s : maxSquare;
    }
  }
  slowSum[slow] = slowSum[slow]! + sum;
  if (maxSquare > slowMaxSquare[slow]!) slowMaxSquare[slow] = maxSquare;
}
