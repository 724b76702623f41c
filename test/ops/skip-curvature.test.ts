import { describe, expect, it } from "vitest";
import { createRandom } from "../../src/numeric/index.js";
import { densePullback } from "../../src/ops/dense/analytic.js";
import { pointwiseForward, pointwiseBackward } from "../../src/ops/activation/analytic.js";
import { activationMoments } from "../../src/numeric/activations.js";
import type { OpContext } from "../../src/ops/types.js";

// A residual branch's seed holds the skip's A = c·M·J̄ᵀ, a non-symmetric part of the curvature (Curvature.skip). These
// check the two rules that carry it against Monte Carlo counts over random weights and Gaussian data.

function gaussianSource(seed: number): () => number {
  const random = createRandom(seed);
  return () => Math.sqrt(-2 * Math.log(Math.max(random.next(), 1e-300))) * Math.cos(2 * Math.PI * random.next());
}

describe("a dense layer's pullback of a non-symmetric curvature", () => {
  it("counts A's square once on the diagonal of Wᵀ·A·W (Isserlis' theorem: ‖A‖² + tr A², tr A² ≈ 0)", () => {
    // A = M·Jᵀ with M symmetric and J of independent zero-mean entries, n × n; W [n, m] of variance v
    const n = 24;
    const m = 16;
    const v = 1 / n;
    const gaussian = gaussianSource(11);
    const g = Array.from({ length: n * n }, gaussian);
    const M = (i: number, j: number): number => {
      let s = 0;
      for (let k = 0; k < n; k++) s += g[i * n + k]! * g[j * n + k]!;
      return s / n;
    };
    const J = Array.from({ length: n * n }, gaussian);
    const A: number[] = [];
    for (let i = 0; i < n; i++) for (let j = 0; j < n; j++) {
      let s = 0;
      for (let k = 0; k < n; k++) s += M(i, k) * J[j * n + k]!;
      A.push(s / n);
    }
    const frobenius = A.reduce((a, x) => a + x * x, 0);
    let trace = 0;
    let diagonalSquare = 0;
    for (let i = 0; i < n; i++) {
      trace += A[i * n + i]!;
      diagonalSquare += A[i * n + i]! ** 2;
    }
    // Monte Carlo over W: E[(Wᵀ·A·W)_ii²]
    const draws = 4000;
    let sum = 0;
    for (let t = 0; t < draws; t++) {
      const w = Array.from({ length: n * m }, () => gaussian() * Math.sqrt(v));
      for (let i = 0; i < m; i++) {
        let s = 0;
        for (let a = 0; a < n; a++) for (let b = 0; b < n; b++) s += w[a * m + i]! * A[a * n + b]! * w[b * m + i]!;
        sum += s * s;
      }
    }
    const measured = sum / (draws * m);
    const rows = frobenius / n;
    const pulled = densePullback(
      { diagonal: trace / n, diagonalSquare: diagonalSquare / n, rowSquares: rows, indefinite: true, skip: { rowSquares: rows, diagonalSquare: diagonalSquare / n, covariance: 0 } },
      v,
      n,
      m,
    );
    // 2‖A‖² (the symmetric count) is 1.9× the measurement here; the rule within 10% (4000 draws: ~4% noise)
    expect(pulled.diagonalSquare / measured).toBeGreaterThan(0.9);
    expect(pulled.diagonalSquare / measured).toBeLessThan(1.1);
    expect(pulled.skip?.diagonalSquare).toBeCloseTo(v * v * frobenius, 12);
  });
});

describe("a SiLU's gradient mean from the skip's part", () => {
  it("is E[φ'']·Cov(u, g) (Stein's lemma), not E[φ'φ] times the pulled-back diagonal", () => {
    // x ~ N(0, I_n), u = W1·x (W1 [h, n], variance 1/n), the skip's gradient part at the SiLU's output g = α·W3ᵀ·M·x
    // (W3 [n, h], variance 1/h): the rule's E_i[E_x[φ'(u_i)·g_i]²] from Curvature.skip's covariance at the seed,
    // carried through W3 by densePullback, against the mean of the exact per-unit Stein value over weight draws
    const n = 32;
    const h = 32;
    const alpha = 0.5;
    const gaussian = gaussianSource(5);
    const weightDraws = 24;
    let exact = 0;
    let chain = 0;
    for (let t = 0; t < weightDraws; t++) {
      const w1 = Array.from({ length: h * n }, () => gaussian() / Math.sqrt(n));
      const w3 = Array.from({ length: n * h }, () => gaussian() / Math.sqrt(h));
      const gm = Array.from({ length: n * n }, gaussian);
      const M: number[] = [];
      for (let i = 0; i < n; i++) for (let j = 0; j < n; j++) {
        let s = 0;
        for (let k = 0; k < n; k++) s += gm[i * n + k]! * gm[j * n + k]!;
        M.push(s / (n * n));
      }
      // B = α·W3ᵀ·M [h, n]; E[φ'(u_i)·g_i] = E[φ''(u_i)]·Σ_k W1_ik·B_ik for unit-variance u (Stein's lemma, exact)
      // J̄ = E[φ']·W3·W1; Cov(F_a, (α·M·x)_a) = α·Σ_k M_ak·J̄_ak
      let k3 = 0;
      for (let a = 0; a < n; a++) {
        let s = 0;
        for (let k = 0; k < n; k++) {
          let jbar = 0;
          for (let j = 0; j < h; j++) jbar += w3[a * h + j]! * w1[j * n + k]!;
          s += M[a * n + k]! * jbar;
        }
        k3 += (alpha * s) ** 2;
      }
      let direct = 0;
      for (let i = 0; i < h; i++) {
        let s = 0;
        for (let k = 0; k < n; k++) {
          let b = 0;
          for (let a = 0; a < n; a++) b += w3[a * h + i]! * M[a * n + k]!;
          s += w1[i * n + k]! * alpha * b;
        }
        direct += s * s;
      }
      exact += direct / h;
      chain += k3 / n;
    }
    // the rule's chain for unit-variance u: the seed's covariance is E[φ']²·(mean over the draws of k3/n) since J̄ holds
    // E[φ'] once; densePullback scales it by n/h; pointwiseBackward adds (E[φ'']/E[φ'])² of it to the shared part
    const u = { q: 1, mean: 0, zeroFraction: 0, shape: "gaussian" as const, logVar: 0, gaussian: true };
    const ctx = { moments: activationMoments, batch: 1 } as unknown as OpContext;
    const forward = pointwiseForward(ctx, "silu", 0, u, 1);
    const d1 = forward.stash.derivativeMean;
    const seedCovariance = (d1 * d1 * chain) / weightDraws;
    const curvature = densePullback(
      { diagonal: 0, diagonalSquare: 0, rowSquares: 0, indefinite: true, skip: { rowSquares: 0, diagonalSquare: 0, covariance: seedCovariance } },
      1 / h,
      n,
      h,
    );
    const back = pointwiseBackward("silu", forward.stash, { q: 1, zeroFraction: 0, shape: "gaussian", logVar: 0, curvature }, false);
    // E[φ''] for SiLU at unit variance, 0.3508 (quadrature of u·φ'(u), own), squared into the exact count
    const measured = (0.35084544 ** 2 * exact) / weightDraws;
    const predicted = back.gradient.shared ?? 0;
    // the symmetric rule's E[φ'φ]·A_ii count is 2.5× this for n = h; the rule within 25% (24 weight draws)
    expect(predicted / measured).toBeGreaterThan(0.75);
    expect(predicted / measured).toBeLessThan(1.25);
  });
});
