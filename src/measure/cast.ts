/**
 * Cast targets built on the format module: the class of a value after a cast comes from its rounding (classify),
 * never from rounding written again here.
 */
import { classify, getFormat, type Format, type OverflowMode, type RoundOptions } from "../formats/index.js";
import { CAST_CLASS, type CastClass, type CastTarget } from "./classes.js";

/** Options of {@link castTarget}. */
export interface CastTargetOptions {
  /** default: the format's own (saturate for e4m3, infinity for the others) */
  overflow?: OverflowMode;
  /** count subnormal results as flushed, as hardware that flushes subnormals does (default false) */
  flushSubnormals?: boolean;
}

/**
 * A cast target for a format (by record or by name; aliases such as fp16 and bf16 accepted).
 * Throws a RangeError naming the accepted formats for an unknown name.
 * @example castTarget("binary16").classify(1e-8) // => CAST_CLASS.flushed
 */
export function castTarget(format: Format | string, options: CastTargetOptions = {}): CastTarget {
  const record = typeof format === "string" ? getFormat(format) : format;
  const overflow = options.overflow ?? record.defaultOverflow;
  const flushSubnormals = options.flushSubnormals ?? false;
  const roundOptions: RoundOptions = { overflow, flushSubnormals };
  return {
    format: record.name,
    overflow,
    flushSubnormals,
    maxFinite: record.maxFinite,
    minNormal: record.minNormal,
    minSubnormal: record.minSubnormal,
    classify(x: number): CastClass {
      if (x !== x) return CAST_CLASS.nan;
      if (x === 0) return CAST_CLASS.zero;
      switch (classify(record, x, roundOptions)) {
        // x is nonzero here, so a zero result is a flush
        case "zero":
          return CAST_CLASS.flushed;
        case "subnormal":
          return CAST_CLASS.subnormal;
        case "normal":
          return CAST_CLASS.normal;
        case "saturated":
          return CAST_CLASS.saturated;
        // an infinity, or NaN from a non-NaN input (e4m3 without saturation)
        case "infinite":
        case "nan":
          return CAST_CLASS.overflowed;
      }
    },
  };
}

/** The targets `headroom scan` judges when none are named: the two 16-bit formats a checkpoint usually moves between. */
export const DEFAULT_SCAN_TARGETS = ["binary16", "bfloat16"] as const;
