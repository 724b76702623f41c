/**
 * The softmax-moment quadratures of src/numeric/softmax.ts start their sums of ln t at a cut derived from a bound on
 * the small-t integrand and take the Gaussian variables on steps of up to 0.75 (trapezoid rule on the line,
 * Trefethen & Weideman 2014, SIAM Review 56(3), §5). Checked here against the direct method they replaced: the same
 * Laplace-transform quadrature (Cressie, Davis, Folks & Policello 1981) with every node from −40 − ln C − s² and
 * Gaussian steps of at most 0.25 in the normal variable, over a sweep of variances, correlations and class counts.
 */
import { describe, expect, it } from "vitest";
import { gaussianSoftmaxMoments, gaussianSoftmaxPairMoment } from "../../src/numeric/index.js";

const Z_RANGE = 9;

// Trapezoid weights of N(0, 1), normalised to sum to 1: written out here on purpose, not imported, so that the direct
// method stays an independent oracle that a change to the quadrature's own helpers cannot move with it.
function weights(n: number, h: number): Float64Array {
  const w = new Float64Array(n);
  let total = 0;
  for (let i = 0; i < n; i++) {
    const x = (i - (n - 1) / 2) * h;
    w[i] = Math.exp(-0.5 * x * x);
    total += w[i] as number;
  }
  for (let i = 0; i < n; i++) w[i] = (w[i] as number) / total;
  return w;
}

/** The direct method: the lattice of ln t + s·Z on the full range, Z on steps of at most 0.25. */
function directMoments(variance: number, C: number): { mean: number; second: number; logSumExp: number } {
  const step = 0.25;
  const s = Math.sqrt(variance);
  const k = Math.ceil(step / Math.min(0.3, step * s));
  const spacing = step / k;
  const n = 2 * Math.ceil(Z_RANGE / (spacing / s)) + 1;
  const w = weights(n, spacing / s);
  const low = -40 - Math.log(C) - variance;
  const steps = Math.ceil((10 * s + 45 + Math.log(C) + variance) / step);
  const base = low - ((n - 1) / 2) * spacing;
  let mean = 0;
  let second = 0;
  let logSumExp = 0;
  for (let m = 0; m < steps; m++) {
    const t = Math.exp(low + m * step);
    let oneMinusL0 = 0;
    let l1 = 0;
    let l2 = 0;
    for (let i = 0; i < n; i++) {
      const y = Math.exp(base + (m * k + i) * spacing);
      const wi = w[i] as number;
      oneMinusL0 -= wi * Math.expm1(-y);
      l1 += wi * y * Math.exp(-y);
      l2 += wi * y * y * Math.exp(-y);
    }
    const logL0 = oneMinusL0 < 1 ? Math.log1p(-oneMinusL0) : -Infinity;
    const others = Math.exp((C - 1) * logL0);
    mean += l1 * others;
    second += l2 * others;
    logSumExp += -Math.expm1(C * logL0) + Math.expm1(-t);
  }
  return { mean: mean * step, second: second * step, logSumExp: logSumExp * step };
}

/** The direct pair method: ln t and ln u from −40 − ln C − s², the common part a and the own part ε on steps ≤ 0.25. */
function directPair(variance: number, c: number, C: number): number {
  const step = 0.5;
  const sa = Math.sqrt(c * variance);
  const se = Math.sqrt((1 - c) * variance);
  const k = Math.ceil(step / Math.min(step, 0.25 * sa));
  const spacing = step / k;
  const na = 2 * Math.ceil(Z_RANGE / (spacing / sa)) + 1;
  const wa = weights(na, spacing / sa);
  const low = -40 - Math.log(C) - variance;
  const steps = Math.ceil((10 * Math.sqrt(variance) + 45 + Math.log(C) + variance) / step);
  const base = low - ((na - 1) / 2) * spacing;
  const he = Math.min(0.25, 0.3 / se);
  const ne = 2 * Math.ceil(Z_RANGE / he) + 1;
  const we = weights(ne, he);
  const length = steps * k + na;
  const off = new Float64Array(length);
  const m1 = new Float64Array(length);
  for (let j = 0; j < length; j++) {
    const tau = Math.exp(base + j * spacing);
    for (let e = 0; e < ne; e++) {
      const y = tau * Math.exp(se * (e - (ne - 1) / 2) * he);
      off[j] = (off[j] as number) - (we[e] as number) * Math.expm1(-y);
      m1[j] = (m1[j] as number) + (we[e] as number) * y * Math.exp(-y);
    }
  }
  let sum = 0;
  for (let i = 0; i < steps; i++) {
    for (let j = 0; j < steps; j++) {
      let oneMinusB = 0;
      let m = 0;
      for (let r = 0; r < na; r++) {
        const x = off[i * k + r] as number;
        const y = off[j * k + r] as number;
        oneMinusB += (wa[r] as number) * (x + y - x * y);
        m += (wa[r] as number) * (m1[i * k + r] as number) * (m1[j * k + r] as number);
      }
      if (m === 0) continue;
      sum += m * Math.exp((C - 1) * (oneMinusB < 1 ? Math.log1p(-oneMinusB) : -Infinity));
    }
  }
  return sum * step * step;
}

describe("softmax quadratures against the direct method", () => {
  it("E[p], E[p²] and E[ln Σ e^z] agree within 1e-12 relative (variance 1e-4 to 40, 2 to 10⁶ classes)", () => {
    let worst = 0;
    for (const variance of [1.01e-4, 0.05, 0.35, 1.76, 6, 40]) {
      for (const classes of [2, 3, 12, 1000, 1e6]) {
        const direct = directMoments(variance, classes);
        const fast = gaussianSoftmaxMoments(variance, classes);
        worst = Math.max(worst, Math.abs(fast.mean * classes - direct.mean * classes), Math.abs(fast.second / direct.second - 1), Math.abs(fast.logSumExp / direct.logSumExp - 1));
      }
    }
    expect(worst).toBeLessThan(1e-12);
  });

  it("E[p_n p_m] agrees within 1e-9 relative, and its excess over 1/C² within 1e-8 (variance 0.05 to 6, c 0.02 to 0.99)", () => {
    let worst = 0;
    let worstExcess = 0;
    for (const variance of [0.05, 0.53, 1.76, 6]) {
      for (const c of [0.02, 0.3, 0.77, 0.99]) {
        for (const classes of [2, 12, 50000]) {
          const direct = directPair(variance, c, classes);
          const fast = gaussianSoftmaxPairMoment(variance, c, classes);
          const floor = 1 / (classes * classes);
          worst = Math.max(worst, Math.abs(fast / direct - 1));
          worstExcess = Math.max(worstExcess, Math.abs((fast - floor) / (direct - floor) - 1));
        }
      }
    }
    expect(worst).toBeLessThan(1e-9);
    expect(worstExcess).toBeLessThan(1e-8);
  });
});
