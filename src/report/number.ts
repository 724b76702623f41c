/**
 * Number formatting shared by every renderer, so a value reads the same in the terminal, CSV, Markdown and HTML.
 * Output is locale-independent (no Intl), so it is byte-identical on every machine.
 */

/** How non-finite and missing values read. */
const NOT_A_NUMBER = "n/a";

/**
 * Binades (log2 distances) with one decimal; infinities read `inf`/`-inf`.
 * @example formatBinades(12.34) // => "12.3"
 * @example formatBinades(-0.04) // => "0.0"
 */
export function formatBinades(binades: number): string {
  if (Number.isNaN(binades)) return NOT_A_NUMBER;
  if (!Number.isFinite(binades)) return binades > 0 ? "inf" : "-inf";
  const text = binades.toFixed(1);
  return text === "-0.0" ? "0.0" : text;
}

/**
 * A per-step probability, or a ratio in [0, 1] that is no share of elements (the subnormal noise against the squared
 * norm): `0` and `1` exactly; below 0.01 in exponent form with two significant digits, trailing zeros dropped as the
 * findings' sentences drop them (`3.2e-5`, `1e-9`); otherwise two significant digits (`0.25`, `0.5`).
 * Values outside [0, 1] or NaN read `n/a`.
 * @example formatProbability(0.000032) // => "3.2e-5"
 * @example formatProbability(1e-9) // => "1e-9"
 */
export function formatProbability(p: number): string {
  if (Number.isNaN(p) || p < 0 || p > 1) return NOT_A_NUMBER;
  if (p === 0) return "0";
  if (p === 1) return "1";
  // integrated to 1e-12 absolute (README, "Estimates"): smaller values have no resolved digit
  if (p < 1e-12) return "<1e-12";
  if (p < 0.01) return trimMantissa(p.toExponential(1));
  const text = trimZeros(p.toPrecision(2));
  // 0.995 and above would round up to "1.0", which would read as certainty
  return text === "1" ? "0.99" : text;
}

/**
 * A byte count in binary units: `512 B`, `1.5 KiB`, `3.0 MiB`, `2.0 GiB`.
 * @example formatBytes(1536) // => "1.5 KiB"
 */
export function formatBytes(bytes: number): string {
  if (!Number.isFinite(bytes) || bytes < 0) return NOT_A_NUMBER;
  const units = ["B", "KiB", "MiB", "GiB", "TiB", "PiB"] as const;
  let value = bytes;
  let unit = 0;
  while (value >= 1024 && unit < units.length - 1) {
    value /= 1024;
    unit += 1;
  }
  return unit === 0 ? `${Math.round(value)} B` : `${value.toFixed(1)} ${units[unit]}`;
}

/**
 * A count (elements, parameters, specs) with a comma every three digits.
 * @example formatCount(1234567) // => "1,234,567"
 */
export function formatCount(count: number): string {
  if (!Number.isFinite(count)) return NOT_A_NUMBER;
  const sign = count < 0 ? "-" : "";
  const digits = String(Math.round(Math.abs(count)));
  return sign + digits.replace(/\B(?=(\d{3})+(?!\d))/g, ",");
}

/**
 * A compact count for large sizes: `950`, `12.3k`, `4.5M`, `1.2G`.
 * @example formatCompactCount(4_500_000) // => "4.5M"
 */
export function formatCompactCount(count: number): string {
  if (!Number.isFinite(count)) return NOT_A_NUMBER;
  const abs = Math.abs(count);
  const steps = [
    [1e12, "T"],
    [1e9, "G"],
    [1e6, "M"],
    [1e3, "k"],
  ] as const;
  for (const [size, suffix] of steps) {
    if (abs >= size) return trimZeros((count / size).toFixed(1)) + suffix;
  }
  return String(Math.round(count));
}

/**
 * A power of two given by its exponent: `2^16`; with `withValue`, `2^16 (65536)`.
 * @example formatPowerOfTwo(-3, true) // => "2^-3 (0.125)"
 */
export function formatPowerOfTwo(exponent: number, withValue = false): string {
  if (!Number.isFinite(exponent)) return NOT_A_NUMBER;
  const power = `2^${exponent}`;
  return withValue ? `${power} (${formatValue(2 ** exponent)})` : power;
}

/**
 * A real value with up to `digits` significant digits, exponent form outside [1e-4, 1e6).
 * @example formatValue(65504) // => "65504"
 * @example formatValue(5.960464477539063e-8) // => "5.96e-8"
 */
export function formatValue(value: number, digits = 3): string {
  if (Number.isNaN(value)) return NOT_A_NUMBER;
  if (!Number.isFinite(value)) return value > 0 ? "inf" : "-inf";
  if (value === 0) return "0";
  const abs = Math.abs(value);
  if (abs >= 1e-4 && abs < 1e6) {
    if (Number.isInteger(value)) return String(value);
    // through Number: toPrecision alone writes 1234.5 as "1.23e+3"
    return String(Number(value.toPrecision(digits)));
  }
  const [mantissa = "", exponent = ""] = value.toExponential(digits - 1).split("e");
  return `${trimZeros(mantissa)}e${exponent.replace("+", "")}`;
}

/**
 * A share (of elements, of a squared norm, of memory) as a percentage: one decimal from 0.1% up (`12.5%`), two
 * significant digits below (`0.024%`, in exponent form under 0.001%: `2.4e-6%`), `<1e-6%` under the sentences' floor;
 * none and all exactly `0%` and `100%`, one short of all `>99.9%`.
 * @example formatPercent(0.125) // => "12.5%"
 * @example formatPercent(2.4e-8) // => "2.4e-6%"
 */
export function formatPercent(share: number): string {
  if (Number.isNaN(share)) return NOT_A_NUMBER;
  // exact ends without a decimal: "0.0%" would read as a rounded small share
  if (share === 0) return "0%";
  if (share === 1) return "100%";
  // a share short of all would round to "100.0%", which reads as certainty
  if (share < 1 && share >= 0.9995) return ">99.9%";
  const percent = share * 100;
  if (percent >= 0.1 || percent < 0) return `${percent.toFixed(1)}%`;
  // a modelled share below 1e-8 is a law's far tail, read to no useful digit: the findings' sentences give only that
  // bound ("less than 1e-6%", src/risk/words.ts), and so does every table (display only; common practice)
  if (percent < 1e-6) return "<1e-6%";
  // below 0.1% one decimal would read 0.0% for shares above an energy threshold of 0.01%: two significant digits,
  // plain down to 0.001% and in exponent form below, as the sentences write numbers (src/risk/words.ts plainNumber)
  return percent >= 1e-3 ? `${String(Number(percent.toPrecision(2)))}%` : `${trimMantissa(percent.toExponential(1))}%`;
}

// "1.0e-9" → "1e-9": an exponent form's mantissa without trailing zeros
function trimMantissa(text: string): string {
  const [mantissa = "", exponent = ""] = text.split("e");
  return `${trimZeros(mantissa)}e${exponent.replace("+", "")}`;
}

function trimZeros(text: string): string {
  return text.includes(".") && !text.includes("e") ? text.replace(/\.?0+$/, "") : text;
}
