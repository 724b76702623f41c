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
 * A probability or a fraction in [0, 1]: `0` and `1` exactly; below 0.01 in exponent form with two
 * significant digits (`3.2e-5`); otherwise two significant digits (`0.25`, `0.5`).
 * Values outside [0, 1] or NaN read `n/a`.
 * @example formatProbability(0.000032) // => "3.2e-5"
 */
export function formatProbability(p: number): string {
  if (Number.isNaN(p) || p < 0 || p > 1) return NOT_A_NUMBER;
  if (p === 0) return "0";
  if (p === 1) return "1";
  // integrated to 1e-12 absolute (README, "Estimates"): smaller values have no resolved digit
  if (p < 1e-12) return "<1e-12";
  if (p < 0.01) return p.toExponential(1);
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
 * A share as a percentage with one decimal: `12.5%`; tiny nonzero shares read `<0.1%`.
 * @example formatPercent(0.125) // => "12.5%"
 */
export function formatPercent(share: number): string {
  if (Number.isNaN(share)) return NOT_A_NUMBER;
  if (share > 0 && share < 0.0005) return "<0.1%";
  // likewise at the top: a share short of all would round to "100.0%", which reads as certainty
  if (share < 1 && share >= 0.9995) return ">99.9%";
  return `${(share * 100).toFixed(1)}%`;
}

function trimZeros(text: string): string {
  return text.includes(".") && !text.includes("e") ? text.replace(/\.?0+$/, "") : text;
}
