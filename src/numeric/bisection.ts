// A bisection whose decisions a bracket found first settles (for src/risk/laws.ts and src/magnitude/profile.ts; not
// exported by src/numeric/index.ts, so not part of the public API).

/**
 * The plain bisection for where a decreasing f falls to `level` — while k < maxSteps and high − low > absTol +
 * relTol·high, mid = (low + high)/2 moves low if f(mid) > level, else high; the result is (low + high)/2 — with its
 * decisions settled by a bracket a < b, f(a) > level ≥ f(b), found first: from `start` (a guess of the crossing) out by
 * `step`, doubling, then by the Illinois variant of regula falsi on ln f − ln level (Dowell & Jarratt 1971) until the
 * bracket is narrower than the bisection's last one. A midpoint at or below a then moves low and one at or above b
 * moves high without evaluating f (f is decreasing); only the few inside are evaluated. The same midpoints and decisions
 * as the plain bisection, so the same result (but where f's rounding breaks its monotonicity, within an ulp of a or b),
 * from about a quarter of the evaluations. Never throws.
 */
export function bisectDecreasing(
  f: (x: number) => number,
  level: number,
  low: number,
  high: number,
  bisection: { maxSteps: number; absTol: number; relTol: number },
  start: number,
  step: number,
): number {
  let a = -Infinity;
  let fa = NaN;
  let b = Infinity;
  let fb = NaN;
  const note = (x: number, value: number): void => {
    if (value > level) {
      if (x > a) {
        a = x;
        fa = value;
      }
    } else if (x < b) {
      b = x;
      fb = value;
    }
  };
  if (start >= low && start <= high && step > 0) {
    note(start, f(start));
    for (let k = 0; k < 60 && (a === -Infinity || b === Infinity); k++, step *= 2) {
      const x = a === -Infinity ? Math.max(low, b - step) : Math.min(high, a + step);
      note(x, f(x));
      if (x === low || x === high) break;
    }
    const target = Math.log(level);
    const width = bisection.absTol + bisection.relTol * Math.abs(high);
    let kept = 0;
    let ga = Math.log(fa) - target;
    let gb = Math.log(fb) - target;
    for (let k = 0; k < 40 && a > -Infinity && b < Infinity && b - a > width / 4; k++) {
      let x = (a * gb - b * ga) / (gb - ga);
      if (!(x > a && x < b) || k % 8 === 7) x = 0.5 * (a + b);
      const value = f(x);
      const g = Math.log(value) - target;
      if (value > level) {
        a = x;
        fa = value;
        ga = g;
        if (kept === -1) gb /= 2;
        kept = -1;
      } else {
        b = x;
        fb = value;
        gb = g;
        if (kept === 1) ga /= 2;
        kept = 1;
      }
    }
  }
  for (let k = 0; k < bisection.maxSteps && high - low > bisection.absTol + bisection.relTol * high; k++) {
    const mid = 0.5 * (low + high);
    if (mid <= a) low = mid;
    else if (mid >= b) high = mid;
    else if (f(mid) > level) {
      low = mid;
      a = mid;
    } else {
      high = mid;
      b = mid;
    }
  }
  return 0.5 * (low + high);
}
