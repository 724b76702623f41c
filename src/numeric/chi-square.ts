/**
 * The chi-square tail, for statistics that are Gaussian quadratic forms: P(χ²_k > x) = Q(k/2, x/2), the regularized
 * upper incomplete gamma function, by its series below x = a + 1 and its continued fraction (modified Lentz) above
 * (Press et al., Numerical Recipes in C, 2nd ed., §6.2, gser and gcf; ln Γ by Lanczos's approximation, §6.1, gammln;
 * from memory, checked against the closed forms of Abramowitz & Stegun 26.4.4 and 26.4.5 in
 * test/numeric/chi-square.test.ts). Relative accuracy about 1e-10, far below the model's own uncertainty.
 */

const LANCZOS = [76.18009172947146, -86.50532032941677, 24.01409824083091, -1.231739572450155, 0.1208650973866179e-2, -0.5395239384953e-5];

/** ln Γ(a) for a > 0 (Lanczos, γ = 5, six terms: error below 2e-10). */
export function lnGamma(a: number): number {
  let y = a;
  const t = a + 5.5 - (a + 0.5) * Math.log(a + 5.5);
  let series = 1.000000000190015;
  for (let i = 0; i < LANCZOS.length; i++) series += (LANCZOS[i] as number) / ++y;
  return -t + Math.log((2.5066282746310005 * series) / a);
}

/** Q(a, x) = Γ(a, x)/Γ(a), the regularized upper incomplete gamma function, for a > 0. */
export function upperGammaQ(a: number, x: number): number {
  if (!(x > 0)) return 1;
  if (!(a > 0)) return 0;
  const front = -x + a * Math.log(x) - lnGamma(a);
  if (x < a + 1) {
    // series of the lower function: P = e^(−x)·x^a/Γ(a + 1)·Σ x^n/((a + 1)…(a + n))
    let term = 1 / a;
    let sum = term;
    for (let n = 1; n < 1000; n++) {
      term *= x / (a + n);
      sum += term;
      if (Math.abs(term) < Math.abs(sum) * 1e-16) break;
    }
    return Math.max(0, 1 - sum * Math.exp(front));
  }
  // continued fraction of the upper function, by the modified Lentz method
  const tiny = 1e-300;
  let b = x + 1 - a;
  let c = 1 / tiny;
  let d = 1 / b;
  let h = d;
  for (let i = 1; i < 1000; i++) {
    const an = -i * (i - a);
    b += 2;
    d = an * d + b;
    if (Math.abs(d) < tiny) d = tiny;
    c = b + an / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    const step = d * c;
    h *= step;
    if (Math.abs(step - 1) < 1e-16) break;
  }
  return Math.exp(front) * h;
}

/** P(χ²_k > x), k > 0 degrees of freedom (not necessarily whole). */
export function chiSquareTail(k: number, x: number): number {
  return upperGammaQ(k / 2, x / 2);
}
