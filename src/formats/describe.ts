/**
 * One value stored in one format, described as plain data: what `headroom round` prints.
 */
import type { Format } from "./model.js";
import { encodeBigInt, formatCode, roundDetailed, type RoundOptions, type ValueClass } from "./round.js";

/**
 * The outcome of storing one binary64 value in one format.
 * @example describeRounding(FORMATS.e4m3, 465).class // => "saturated"
 */
export interface RoundingDescription {
  format: Format["name"];
  /** the binary64 input */
  value: number;
  /** the rounded value (as binary64) */
  rounded: number;
  /** the rounded value's bit pattern in the target format, as 0x-prefixed hex of the format's width */
  bits: string;
  class: ValueClass;
  /** a nonzero input became zero */
  flushed: boolean;
  /** |rounded − value| (Infinity on overflow to infinity, NaN when either is NaN) */
  absoluteError: number;
  /** |rounded − value| / |value| (0 for a zero input) */
  relativeError: number;
}

/**
 * Round x into the format and describe the result: value, bit pattern, class and errors.
 * @example describeRounding(FORMATS.binary16, 65519).bits // => "0x7bff"
 */
export function describeRounding(format: Format, x: number, options?: RoundOptions): RoundingDescription {
  const result = roundDetailed(format, x, options);
  const r = result.value;
  // the pattern of the value just computed (stochastic rounding must not draw a second time)
  const code = encodeBigInt(format, r);
  let absoluteError: number;
  let relativeError: number;
  if (r === x || (r === 0 && x === 0)) {
    absoluteError = 0;
    relativeError = 0;
  } else if (Number.isNaN(r) || Number.isNaN(x)) {
    absoluteError = NaN;
    relativeError = NaN;
  } else {
    absoluteError = Math.abs(r - x);
    relativeError = Number.isFinite(x) ? absoluteError / Math.abs(x) : NaN;
  }
  return {
    format: format.name,
    value: x,
    rounded: r,
    bits: formatCode(format, code),
    class: result.class,
    flushed: result.flushed,
    absoluteError,
    relativeError,
  };
}
