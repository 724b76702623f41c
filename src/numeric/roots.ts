/**
 * A bracketing root finder shared by the solvers in this module.
 */

/**
 * Root of a continuous f on [a, b] where f(a) and f(b) differ in sign, by the Illinois variant of
 * regula falsi (Dowell & Jarratt 1971), falling back to bisection when a step makes too little progress.
 * Stops when the bracket is below `relTol`·max(|a|,|b|) (or absolute 1e-300). Returns NaN if the signs
 * do not differ. Never throws.
 */
export function findRootBracketed(f: (x: number) => number, a: number, b: number, relTol = 1e-15, maxIter = 300): number {
  let fa = f(a);
  let fb = f(b);
  if (fa === 0) return a;
  if (fb === 0) return b;
  if (!(fa * fb < 0)) return NaN;
  let side = 0;
  for (let i = 0; i < maxIter; i++) {
    const width = Math.abs(b - a);
    if (width <= relTol * Math.max(Math.abs(a), Math.abs(b)) || width < 1e-300) break;
    let c = (a * fb - b * fa) / (fb - fa);
    // keep the step inside the bracket and away from its ends, else bisect
    const lo = Math.min(a, b);
    const hi = Math.max(a, b);
    if (!(c > lo && c < hi) || i % 8 === 7) c = 0.5 * (a + b);
    const fc = f(c);
    if (fc === 0) return c;
    if (fc * fb < 0) {
      a = b;
      fa = fb;
      b = c;
      fb = fc;
      side = 0;
    } else {
      b = c;
      fb = fc;
      // Illinois: halve the retained end's value when it is kept twice in a row
      if (side === 1) fa /= 2;
      side = 1;
    }
  }
  return Math.abs(fa) < Math.abs(fb) ? a : b;
}
