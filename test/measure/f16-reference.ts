/** binary16 cast counts from @petamoriken/float16 (an IEEE 754 binary16 reference library), element by element. */
import { f16round } from "@petamoriken/float16";

/**
 * Flushed, subnormal and overflowed counts of a round-to-nearest cast of each value to binary16, by f16round; a value
 * non-finite already (infinity, NaN) is counted apart, not as an overflow of the cast.
 */
export function f16roundCounts(values: Iterable<number>): { flushed: number; subnormal: number; saturated: 0; overflowed: number; nonFiniteInFile: number } {
  let flushed = 0;
  let subnormal = 0;
  let overflowed = 0;
  let nonFiniteInFile = 0;
  for (const x of values) {
    const r = f16round(x);
    if (!Number.isFinite(x)) nonFiniteInFile++;
    else if (!Number.isFinite(r)) overflowed++;
    else if (r === 0) flushed++;
    else if (Math.abs(r) < 2 ** -14) subnormal++; // IEEE 754-2019 binary16 smallest normal
  }
  return { flushed, subnormal, saturated: 0, overflowed, nonFiniteInFile };
}
