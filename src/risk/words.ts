/** Number wording shared by the sentences the risk module writes. */

/**
 * A number in three significant digits, plain where that reads well and in e-notation otherwise.
 * @example plainNumber(0.000123) // => "1.23e-4"
 */
export function plainNumber(x: number): string {
  if (!Number.isFinite(x)) return x > 0 ? "infinity" : x < 0 ? "-infinity" : "not a number";
  if (x === 0) return "0";
  const magnitude = Math.abs(x);
  if (magnitude >= 1e-3 && magnitude < 1e6) {
    return String(Number(x.toPrecision(3)));
  }
  const [mantissa, exponent] = x.toExponential(2).split("e");
  return `${String(Number(mantissa))}e${Number(exponent)}`;
}

/**
 * A share as a percentage with up to three significant digits.
 * @example percent(0.0123) // => "1.23%"
 */
export function percent(x: number): string {
  return `${plainNumber(x * 100)}%`;
}

/** Binades with one decimal, e.g. "3.2 binades". */
export function binades(x: number): string {
  const rounded = Math.round(x * 10) / 10;
  return `${rounded === 0 ? "0" : rounded.toFixed(1)} binade${Math.abs(rounded) === 1 ? "" : "s"}`;
}

/** "at the start of training" / "at the end of the horizon" */
export function when(at: "start" | "end"): string {
  return at === "start" ? "at the start of training" : "at the end of the horizon";
}

/**
 * A loss scale: a power of two as `2^k`, anything else as a plain number.
 * @example scaleWords(131072) // => "2^17"
 */
export function scaleWords(scale: number): string {
  const k = Math.log2(scale);
  return Number.isInteger(k) && k !== 0 ? `2^${k}` : plainNumber(scale);
}
