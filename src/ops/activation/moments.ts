/**
 * Gaussian expectations of pointwise activations: E[φ(√q·z)^k] and E[φ'(√q·z)^k] for z ~ N(0,1)
 * (SCIENCE.md §2.9). Closed forms where they exist (ReLU, leaky ReLU, identity, GELU's first two moments);
 * the trapezoid rule against the Gaussian weight otherwise. Results are memoised by (name, q, slope), because deep networks repeat
 * the same q layer after layer.
 *
 * Written here because src/numeric had not landed when this module was needed; the field names follow its
 * announced `activationMoments` so the two can be swapped.
 */
import type { ActivationName } from "../../spec/types.js";
import type { ActivationMoments } from "../types.js";

const SQRT2 = Math.SQRT2;
const SQRT_2PI = Math.sqrt(2 * Math.PI);

/** erf(x) to about 1e-14: Maclaurin series below 3, Lentz continued fraction for erfc above. */
export function erf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  const ax = Math.abs(x);
  if (ax < 3) {
    // erf x = 2/√π Σ (−1)^n x^(2n+1) / (n! (2n+1))  (Abramowitz & Stegun 7.1.5)
    let term = ax;
    let sum = ax;
    const x2 = ax * ax;
    for (let n = 1; n < 200; n++) {
      term *= -x2 / n;
      const add = term / (2 * n + 1);
      sum += add;
      if (Math.abs(add) < 1e-17 * Math.abs(sum)) break;
    }
    const value = (2 / Math.sqrt(Math.PI)) * sum;
    return x < 0 ? -value : value;
  }
  const value = 1 - erfcLarge(ax);
  return x < 0 ? -value : value;
}

/** erfc(x) for x ≥ 3 by the continued fraction erfc x = e^(−x²)/√π · 1/(x + 1/2/(x + 1/(x + 3/2/(x + ...)))) (A&S 7.1.14). */
function erfcLarge(x: number): number {
  // modified Lentz on b0 = x, a_n = n/2, b_n = x
  const tiny = 1e-300;
  let f = x;
  let c = x;
  let d = 0;
  for (let n = 1; n < 300; n++) {
    const a = n / 2;
    d = x + a * d;
    d = d === 0 ? tiny : d;
    c = x + a / c;
    c = c === 0 ? tiny : c;
    d = 1 / d;
    const delta = c * d;
    f *= delta;
    if (Math.abs(delta - 1) < 1e-16) break;
  }
  return Math.exp(-x * x) / Math.sqrt(Math.PI) / f;
}

/** Standard normal cdf Φ(x). */
export function normalCdf(x: number): number {
  return x < -3 * SQRT2 ? 0.5 * erfcLarge(-x / SQRT2) : 0.5 * (1 + erf(x / SQRT2));
}

function normalPdf(x: number): number {
  return Math.exp(-0.5 * x * x) / SQRT_2PI;
}

function sigmoid(x: number): number {
  return x >= 0 ? 1 / (1 + Math.exp(-x)) : Math.exp(x) / (1 + Math.exp(x));
}

/** φ and φ' of the smooth activations that need quadrature. */
function pointwise(name: ActivationName, x: number): [number, number] {
  switch (name) {
    case "gelu": {
      const cdf = normalCdf(x);
      return [x * cdf, cdf + x * normalPdf(x)];
    }
    case "silu": {
      const s = sigmoid(x);
      return [x * s, s * (1 + x * (1 - s))];
    }
    case "tanh": {
      const t = Math.tanh(x);
      return [t, 1 - t * t];
    }
    case "sigmoid": {
      const s = sigmoid(x);
      return [s, s * (1 - s)];
    }
    case "softplus": {
      const value = x > 30 ? x : Math.log1p(Math.exp(x));
      return [value, sigmoid(x)];
    }
    default:
      throw new RangeError(`no pointwise form for activation "${name}"`);
  }
}

function quadrature(name: ActivationName, q: number): ActivationMoments {
  const scale = Math.sqrt(q);
  let mean = 0;
  let second = 0;
  let fourth = 0;
  let dMean = 0;
  let dSecond = 0;
  let dFourth = 0;
  const integrate = (x: number, w: number): void => {
    const [f, d] = pointwise(name, x);
    const f2 = f * f;
    const d2 = d * d;
    mean += w * f;
    second += w * f2;
    fourth += w * f2 * f2;
    dMean += w * d;
    dSecond += w * d2;
    dFourth += w * d2 * d2;
  };
  // trapezoid rule on z ∈ [−10, 10]: spectrally accurate for integrands analytic in a strip (Trefethen & Weideman
  // 2014); the step shrinks with √q so the poles of tanh/sigmoid at ±iπ/(2√q) stay far away in units of the step
  const step = Math.max(Math.min(0.1, 0.25 / scale), 20 / 40_000);
  const count = Math.ceil(10 / step);
  const h = 10 / count;
  for (let i = -count; i <= count; i++) {
    const z = i * h;
    integrate(scale * z, h * normalPdf(z));
  }
  return { mean, second, derivativeMean: dMean, derivativeSecond: dSecond, fourth, derivativeFourth: dFourth, zeroFraction: 0 };
}

function compute(name: ActivationName, q: number, slope: number): ActivationMoments {
  switch (name) {
    case "identity":
      return { mean: 0, second: q, derivativeMean: 1, derivativeSecond: 1, fourth: 3 * q * q, derivativeFourth: 1, zeroFraction: 0 };
    case "relu":
    case "leaky-relu": {
      // closed forms for the leaky rectifier with negative slope a (SCIENCE.md §2.9; ReLU is a = 0)
      const a = name === "relu" ? 0 : slope;
      return {
        mean: (1 - a) * Math.sqrt(q / (2 * Math.PI)),
        second: (q * (1 + a * a)) / 2,
        derivativeMean: (1 + a) / 2,
        derivativeSecond: (1 + a * a) / 2,
        fourth: (3 * q * q * (1 + a ** 4)) / 2,
        derivativeFourth: (1 + a ** 4) / 2,
        zeroFraction: a === 0 ? 0.5 : 0,
      };
    }
    case "gelu": {
      const numeric = quadrature(name, q);
      // closed forms (SCIENCE.md §2.9, derived there): E_q[φ] = q/√(2π(1+q));
      // E_q[φ²] = q/4 + (q/2π)·[arcsin(q/(1+q)) + 2q/((1+q)√(1+2q))]
      numeric.mean = q / Math.sqrt(2 * Math.PI * (1 + q));
      numeric.second = q / 4 + (q / (2 * Math.PI)) * (Math.asin(q / (1 + q)) + (2 * q) / ((1 + q) * Math.sqrt(1 + 2 * q)));
      numeric.derivativeMean = 0.5; // exact identity E_q[φ'] = ½ (SCIENCE.md §2.9)
      return numeric;
    }
    case "silu":
    case "tanh":
    case "sigmoid":
    case "softplus":
      return quadrature(name, q);
    case "softmax":
      throw new RangeError(`softmax is not pointwise; its moments depend on the width it normalises over`);
  }
}

/** name → slope → q → moments (nested maps: formatting q into a string key costs more than the lookup) */
const cache = new Map<ActivationName, Map<number, Map<number, ActivationMoments>>>();
let cached = 0;

/**
 * Moments of an activation at input variance q (z ~ N(0, q)), memoised.
 * @example activationMoments("relu", 1, 0).second // => 0.5
 */
export function activationMoments(name: ActivationName, q: number, slope = 0): ActivationMoments {
  if (!(q >= 0) || !Number.isFinite(q)) {
    if (q === Infinity) {
      return { mean: Infinity, second: Infinity, derivativeMean: NaN, derivativeSecond: NaN, fourth: Infinity, derivativeFourth: NaN, zeroFraction: 0 };
    }
    throw new RangeError(`activation input variance must be a finite number ≥ 0, got ${q}`);
  }
  let bySlope = cache.get(name);
  if (bySlope === undefined) cache.set(name, (bySlope = new Map()));
  let byQ = bySlope.get(slope);
  if (byQ === undefined) bySlope.set(slope, (byQ = new Map()));
  let hit = byQ.get(q);
  if (hit === undefined) {
    hit = compute(name, q, slope);
    if (++cached > 50_000) {
      cache.clear();
      cached = 0;
    }
    byQ.set(q, hit);
  }
  return hit;
}

/**
 * Finite-width κ heuristics at input variance q (SCIENCE.md §2.6): forward κ_f = E[φ⁴]/E[φ²]² − 1,
 * backward κ_b = 3E[φ'⁴]/E[φ'²]² − 1. ReLU gives 5 and 5; a linear map 2 and 2.
 */
export function activationKappa(moments: ActivationMoments): { forward: number; backward: number } {
  const forward = moments.second > 0 ? moments.fourth / (moments.second * moments.second) - 1 : 2;
  const backward = moments.derivativeSecond > 0 ? (3 * moments.derivativeFourth) / (moments.derivativeSecond * moments.derivativeSecond) - 1 : 2;
  return { forward, backward };
}
