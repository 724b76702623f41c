// Smooth activations written from their definitions, independent of src/numeric, for Monte Carlo checks of the laws.

/** Φ by the Abramowitz & Stegun 7.1.26 erf approximation (|error| < 1.5e-7). */
export function Phi(x: number): number {
  const z = Math.abs(x) / Math.SQRT2;
  const t = 1 / (1 + 0.3275911 * z);
  const erf = 1 - (((((1.061405429 * t - 1.453152027) * t + 1.421413741) * t - 0.284496736) * t + 0.254829592) * t) * Math.exp(-z * z);
  return x >= 0 ? (1 + erf) / 2 : (1 - erf) / 2;
}

const sigma = (x: number): number => 1 / (1 + Math.exp(-x));

/** GELU(x) = x·Φ(x) (Hendrycks & Gimpel 2016) and SiLU(x) = x·σ(x) (Elfwing et al. 2018), with their derivatives. */
export const SMOOTH = {
  gelu: { f: (x: number) => x * Phi(x), df: (x: number) => Phi(x) + (x * Math.exp((-x * x) / 2)) / Math.sqrt(2 * Math.PI) },
  silu: { f: (x: number) => x * sigma(x), df: (x: number) => sigma(x) * (1 + x * (1 - sigma(x))) },
};
