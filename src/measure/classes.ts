/**
 * What a cast does to one value: the classes the per-target counts are made of.
 */

/** Cast outcome of one element, as a small integer for the hot loops. */
export const CAST_CLASS = {
  /** the element is an exact zero and stays one */
  zero: 0,
  /** a nonzero value that rounds to a normal number of the target */
  normal: 1,
  /** a nonzero value that rounds to a subnormal number of the target */
  subnormal: 2,
  /** a nonzero value that rounds to zero */
  flushed: 3,
  /** a finite value beyond the target's range clamped to ±largest finite by a saturating conversion */
  saturated: 4,
  /** a finite value that becomes ±infinity or NaN */
  overflowed: 5,
  /** non-finite in the file already: a NaN or an infinity, whatever the cast makes of it (not an overflow of the cast) */
  nan: 6,
} as const;
export type CastClass = (typeof CAST_CLASS)[keyof typeof CAST_CLASS];
export const CAST_CLASS_COUNT = 7;

/** A target format as the accumulators see it: its limits and the exact class of any binary64 value. */
export interface CastTarget {
  /** the format's name, e.g. "binary16" */
  format: string;
  /** how overflow is converted: clamp to the largest finite value, or infinity (NaN where there is none) */
  overflow: "saturate" | "infinity-or-nan";
  /** whether subnormal results are counted as flushed (hardware that flushes subnormals) */
  flushSubnormals: boolean;
  maxFinite: number;
  minNormal: number;
  minSubnormal: number;
  /** exact class of `x` after rounding to the format (from the format module's rounding) */
  classify(x: number): CastClass;
}
