/**
 * The few numeric kernels the risk module uses, gathered in one place so the module depends on src/numeric
 * through a single import line.
 */
export { erf, erfc, normalCdf, normalSf, normalPdf, normalTwoSidedTail, normalUpperQuantile } from "../numeric/index.js";

/** ln 2 */
export const LN2 = Math.LN2;

/**
 * Probability that at least one of n independent events of probability p happens: 1 − (1 − p)^n,
 * computed as −expm1(n·log1p(−p)) so that it stays accurate when p is tiny and n is large.
 */
export function anyOf(p: number, n: number): number {
  if (!(p > 0) || !(n > 0)) return 0;
  if (p >= 1) return 1;
  return -Math.expm1(n * Math.log1p(-p));
}
