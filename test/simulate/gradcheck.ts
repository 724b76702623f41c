/**
 * Central finite differences (common practice): ∂f/∂x_i ≈ (f(x + h·e_i) − f(x − h·e_i)) / 2h, error O(h²).
 * Used by the kernel tests to check every backward pass against its forward pass.
 */
import { createRandom, type RandomSource } from "../../src/numeric/random.js";

/** A seeded source for test data. */
export function testRandom(seed: number): RandomSource {
  return createRandom(seed);
}

/** An array of n standard normal values (times `scale`). */
export function randomArray(random: RandomSource, n: number, scale = 1): Float64Array {
  const a = new Float64Array(n);
  for (let i = 0; i < n; i++) a[i] = scale * random.normal();
  return a;
}

/** Σ y_i·r_i: a scalar whose gradient with respect to y is r. */
export function dot(y: Float64Array, r: Float64Array): number {
  let s = 0;
  for (let i = 0; i < y.length; i++) s += y[i]! * r[i]!;
  return s;
}

/**
 * The norm-wise relative error ‖g_fd − g‖₂ / max(‖g_fd‖₂, ‖g‖₂, 1e-8) between the central-difference gradient of
 * `f` with respect to `x` (perturbed in place and restored) and the analytic gradient `g`.
 */
export function gradientError(f: () => number, x: Float64Array, g: Float64Array, h = 1e-5): number {
  let diff = 0;
  let normFd = 0;
  let normG = 0;
  for (let i = 0; i < x.length; i++) {
    const saved = x[i]!;
    x[i] = saved + h;
    const up = f();
    x[i] = saved - h;
    const down = f();
    x[i] = saved;
    const fd = (up - down) / (2 * h);
    diff += (fd - g[i]!) ** 2;
    normFd += fd * fd;
    normG += g[i]! * g[i]!;
  }
  // a gradient that is zero by construction (a bias feeding batch norm) compares against 1e-8, not against its rounding noise
  const scale = Math.max(Math.sqrt(normFd), Math.sqrt(normG), 1e-8);
  return Math.sqrt(diff) / scale;
}
