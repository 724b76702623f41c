/**
 * Elementwise activation functions, their derivatives, and their Gaussian moments E_q[·] := E[·(√q·z)],
 * z ~ N(0,1), which the mean-field recursions need (SCIENCE.md §2.1, §2.9).
 *
 * softmax is not elementwise (each output depends on the whole row), so it has no entry here; the
 * magnitude engine treats it as a layer of its own.
 */
import type { ActivationName } from "../spec/types.js";
import { INV_SQRT_2PI, normalCdf, normalPdf } from "./normal.js";
import { gaussHermite, halfLineGaussianRule } from "./quadrature.js";

/** The activations that act element by element: every ActivationName except softmax. */
export type ElementwiseActivationName = Exclude<ActivationName, "softmax">;

/** Every elementwise activation, in the order of ACTIVATIONS (src/spec/types.ts) without softmax. */
export const ELEMENTWISE_ACTIVATIONS: readonly ElementwiseActivationName[] = [
  "relu",
  "leaky-relu",
  "gelu",
  "silu",
  "tanh",
  "sigmoid",
  "softplus",
  "identity",
];

/** Default negative-side slope of leaky-relu when none is given (common practice). */
export const DEFAULT_LEAKY_SLOPE = 0.01;

/** An activation as plain functions: the value and the derivative. */
export interface ActivationFunction {
  readonly f: (x: number) => number;
  readonly df: (x: number) => number;
}

/**
 * Gaussian moments of an activation at pre-activation variance q: with x = √q·z, z ~ N(0,1),
 * mean = E[φ(x)], second = E[φ(x)²], fourth = E[φ(x)⁴], derivativeMean = E[φ'(x)],
 * derivativeSecond = E[φ'(x)²], derivativeFourth = E[φ'(x)⁴], and zeroFraction = P(φ(x) = 0 exactly).
 */
export interface ActivationMoments {
  readonly mean: number;
  readonly second: number;
  readonly fourth: number;
  readonly derivativeMean: number;
  readonly derivativeSecond: number;
  readonly derivativeFourth: number;
  readonly zeroFraction: number;
}

function isElementwise(name: string): name is ElementwiseActivationName {
  return (ELEMENTWISE_ACTIVATIONS as readonly string[]).includes(name);
}

function checkName(name: string, caller: string): asserts name is ElementwiseActivationName {
  if (name === "softmax") {
    throw new RangeError(`${caller}: softmax is not elementwise; it has no per-element moments`);
  }
  if (!isElementwise(name)) {
    throw new RangeError(`${caller}: unknown activation "${name}"; accepted: ${ELEMENTWISE_ACTIVATIONS.join(", ")}`);
  }
}

// logistic σ(x) computed without overflow on either side
function logistic(x: number): number {
  if (x >= 0) return 1 / (1 + Math.exp(-x));
  const e = Math.exp(x);
  return e / (1 + e);
}

// σ'(x) = σ(x)(1 − σ(x)) = e^{−|x|}/(1 + e^{−|x|})², full relative accuracy in both tails
function logisticDerivative(x: number): number {
  const e = Math.exp(-Math.abs(x));
  const d = 1 + e;
  return e / (d * d);
}

// tanh'(x) = sech²(x) = 4e^{−2|x|}/(1 + e^{−2|x|})², full relative accuracy where tanh is near ±1
function tanhDerivative(x: number): number {
  const e = Math.exp(-2 * Math.abs(x));
  const d = 1 + e;
  return (4 * e) / (d * d);
}

// softplus(x) = ln(1 + eˣ) = max(x, 0) + log1p(e^{−|x|})
function softplus(x: number): number {
  return Math.max(x, 0) + Math.log1p(Math.exp(-Math.abs(x)));
}

const relu: ActivationFunction = { f: (x) => (x > 0 ? x : 0), df: (x) => (x > 0 ? 1 : 0) };
const identity: ActivationFunction = { f: (x) => x, df: () => 1 };
// GELU(x) = x·Φ(x) (Hendrycks & Gimpel 2016, erf form); GELU'(x) = Φ(x) + x·φ(x)
const gelu: ActivationFunction = { f: (x) => x * normalCdf(x), df: (x) => normalCdf(x) + x * normalPdf(x) };
// SiLU(x) = x·σ(x) (Elfwing et al. 2018; "swish" with β = 1); SiLU'(x) = σ(x) + x·σ'(x)
const silu: ActivationFunction = { f: (x) => x * logistic(x), df: (x) => logistic(x) + x * logisticDerivative(x) };
const tanh: ActivationFunction = { f: Math.tanh, df: tanhDerivative };
const sigmoid: ActivationFunction = { f: logistic, df: logisticDerivative };
const softplusFn: ActivationFunction = { f: softplus, df: logistic };

/**
 * The activation φ and its derivative φ' as number → number functions. `slope` is leaky-relu's
 * negative-side slope (default 0.01) and is ignored by the others. At the kink x = 0, relu' and
 * leaky-relu' take the left value (0 and slope). Throws RangeError for softmax or an unknown name.
 */
export function activationFunction(name: ActivationName, slope: number = DEFAULT_LEAKY_SLOPE): ActivationFunction {
  checkName(name, "activationFunction");
  switch (name) {
    case "relu":
      return relu;
    case "leaky-relu":
      return { f: (x) => (x > 0 ? x : slope * x), df: (x) => (x > 0 ? 1 : slope) };
    case "gelu":
      return gelu;
    case "silu":
      return silu;
    case "tanh":
      return tanh;
    case "sigmoid":
      return sigmoid;
    case "softplus":
      return softplusFn;
    case "identity":
      return identity;
  }
}

// q at and below which a 64-node Gauss–Hermite rule meets 1e-12 for the smooth activations here; tanh's
// poles at x = ±iπ/2 slow Gauss–Hermite down as q grows (2e-5 error in E[φ'⁴] at q = 1), so above it the
// graded split rule is used (both checked against mpmath in test/numeric/activations.test.ts).
const GH_MAX_Q = 0.3;
const GH_NODES = 64;
// below this q a 32-node rule already meets 1e-12 (the poles move away as 1/√q)
const GH_SMALL_Q = 0.1;
const GH_SMALL_NODES = 32; // both Gauss–Hermite sizes must be even (the walk below pairs ±x_i)
// 10-point panels of the split rule give about 3e-12 relative against mpmath (12 give 5e-13 at 20% more cost)
const PANEL_NODES = 10;

// Value and derivative of a smooth activation at x ≥ 0, written into out[0] and out[1]; one kernel per
// activation so that shared work (σ for SiLU, Φ for GELU) is done once per node. The values at −x follow
// from a symmetry (see `reflection`), so each quadrature node pair ±x costs one kernel call.
type Kernel = (x: number, out: Float64Array) => void;
type SmoothName = "gelu" | "silu" | "tanh" | "sigmoid" | "softplus";
const KERNELS: Record<SmoothName, Kernel> = {
  gelu: (x, out) => {
    const cdf = normalCdf(x);
    out[0] = x * cdf;
    out[1] = cdf + x * normalPdf(x);
  },
  silu: (x, out) => {
    const e = Math.exp(-x);
    const s = 1 / (1 + e);
    out[0] = x * s;
    out[1] = s + (x * e) * s * s;
  },
  tanh: (x, out) => {
    out[0] = Math.tanh(x);
    out[1] = tanhDerivative(x);
  },
  sigmoid: (x, out) => {
    const e = Math.exp(-x);
    const s = 1 / (1 + e);
    out[0] = s;
    out[1] = e * s * s;
  },
  softplus: (x, out) => {
    const e = Math.exp(-x);
    out[0] = x + Math.log1p(e);
    out[1] = 1 / (1 + e);
  },
};
// How φ(−x), φ'(−x) follow from φ(x), φ'(x):
// "odd": tanh(−x) = −tanh x, tanh' even.
// "complement": σ(−x) = 1 − σ(x), σ' even.
// "shift": φ(x) − φ(−x) = x and φ'(x) + φ'(−x) = 1 for φ = x·g(x) with g(−x) = 1 − g(x) (GELU with g = Φ,
// SiLU with g = σ) and for softplus (ln(1+eˣ) − ln(1+e⁻ˣ) = x).
const REFLECTION: Record<SmoothName, "odd" | "complement" | "shift"> = {
  gelu: "shift",
  silu: "shift",
  tanh: "odd",
  sigmoid: "complement",
  softplus: "shift",
};
const kernelOut = new Float64Array(2);
const sums = new Float64Array(6);

/** Moments of a smooth activation by quadrature, all six in one pass: [E φ, E φ², E φ⁴, E φ', E φ'², E φ'⁴]. */
function quadratureMoments(name: SmoothName, q: number): Float64Array {
  const kernel = KERNELS[name];
  const reflection = REFLECTION[name];
  const out = kernelOut;
  let m1 = 0;
  let m2 = 0;
  let m4 = 0;
  let d1 = 0;
  let d2 = 0;
  let d4 = 0;
  // Gauss–Hermite: E[g(√q z)] = (1/√π)·Σ w_i g(√(2q)·x_i) for the weight e^{−x²}; its nodes come in pairs
  // ±x_i (even n), so the upper half is walked. The split rule already lists z > 0 with φ(z) folded in.
  const gh = q <= GH_MAX_Q;
  const { nodes, weights } = gh ? gaussHermite(q <= GH_SMALL_Q ? GH_SMALL_NODES : GH_NODES) : halfLineGaussianRule(q, 2, PANEL_NODES);
  const s = gh ? Math.sqrt(2 * q) : Math.sqrt(q);
  const wScale = gh ? 0.5641895835477563 : 1;
  for (let i = gh ? nodes.length >> 1 : 0; i < nodes.length; i++) {
    const w = (weights[i] as number) * wScale;
    const x = s * (nodes[i] as number);
    kernel(x, out);
    const v = out[0] as number;
    const d = out[1] as number;
    const vm = reflection === "odd" ? -v : reflection === "complement" ? 1 - v : v - x;
    const dm = reflection === "shift" ? 1 - d : d;
    const v2 = v * v;
    const vm2 = vm * vm;
    const dd = d * d;
    const dmm = dm * dm;
    m1 += w * (v + vm);
    m2 += w * (v2 + vm2);
    m4 += w * (v2 * v2 + vm2 * vm2);
    d1 += w * (d + dm);
    d2 += w * (dd + dmm);
    d4 += w * (dd * dd + dmm * dmm);
  }
  sums[0] = m1;
  sums[1] = m2;
  sums[2] = m4;
  sums[3] = d1;
  sums[4] = d2;
  sums[5] = d4;
  return sums;
}

// GELU E_q[φ²] = q/4 + (q/2π)·[arcsin(q/(1+q)) + 2q/((1+q)√(1+2q))] (SCIENCE.md §2.9, derived there [X]);
// E_q[φ] = q/√(2π(1+q)) (same section).
function geluSecond(q: number): number {
  const r = q / (1 + q);
  return q / 4 + (q / (2 * Math.PI)) * (Math.asin(r) + (2 * r) / Math.sqrt(1 + 2 * q));
}

const momentCaches = new Map<ElementwiseActivationName, Map<number, ActivationMoments>>();
const MOMENT_CACHE_LIMIT = 50000;

/**
 * Gaussian moments of activation `name` at pre-activation variance q ≥ 0 (see {@link ActivationMoments}).
 * Closed forms for relu, leaky-relu, identity (SCIENCE.md §2.9) and for GELU's mean and second moment;
 * the exact identities E_q[φ'] = ½ (GELU, SiLU, softplus) and E_q[sigmoid] = ½, E_q[tanh] = 0 (odd
 * symmetry); Gauss–Hermite (q ≤ 1.5) or graded Gauss–Legendre (q > 1.5) for the rest, about 1e-12 absolute.
 * Results are memoised. q = 0 gives the values at x = 0 (relu's derivative moments keep their q > 0 limit ½).
 * q = ∞ gives the limits (tanh → sign, sigmoid → step, GELU/SiLU/softplus → ReLU).
 * `slope` applies to leaky-relu only (default 0.01). q < 0 or NaN gives NaN moments.
 * Throws RangeError for softmax (not elementwise) or an unknown name.
 */
export function activationMoments(name: ActivationName, q: number, slope: number = DEFAULT_LEAKY_SLOPE): ActivationMoments {
  checkName(name, "activationMoments");
  if (name === "relu" || name === "leaky-relu" || name === "identity") return computeMoments(name, q, slope);
  let cache = momentCaches.get(name);
  if (!cache) {
    cache = new Map();
    momentCaches.set(name, cache);
  }
  const hit = cache.get(q);
  if (hit) return hit;
  const result = computeMoments(name, q, slope);
  if (cache.size >= MOMENT_CACHE_LIMIT) cache.clear();
  cache.set(q, result);
  return result;
}

// q → ∞: tanh(√q z) → sign z, σ(√q z) → 1(z > 0), and GELU, SiLU, softplus → max(x, 0), whose derivatives
// tend to the step 1(x > 0); the derivative moments of tanh and sigmoid vanish.
function infiniteVarianceLimit(name: "gelu" | "silu" | "tanh" | "sigmoid" | "softplus"): ActivationMoments {
  switch (name) {
    case "tanh":
      return { mean: 0, second: 1, fourth: 1, derivativeMean: 0, derivativeSecond: 0, derivativeFourth: 0, zeroFraction: 0 };
    case "sigmoid":
      return { mean: 0.5, second: 0.5, fourth: 0.5, derivativeMean: 0, derivativeSecond: 0, derivativeFourth: 0, zeroFraction: 0 };
    default:
      return { mean: Infinity, second: Infinity, fourth: Infinity, derivativeMean: 0.5, derivativeSecond: 0.5, derivativeFourth: 0.5, zeroFraction: 0 };
  }
}

function computeMoments(name: ElementwiseActivationName, q: number, slope: number): ActivationMoments {
  if (!(q >= 0)) {
    return { mean: NaN, second: NaN, fourth: NaN, derivativeMean: NaN, derivativeSecond: NaN, derivativeFourth: NaN, zeroFraction: NaN };
  }
  const sq = Math.sqrt(q);
  switch (name) {
    case "relu":
      // half-normal moments: E[x·1(x>0)] = √(q/2π), E[x²·1] = q/2, E[x⁴·1] = 3q²/2; φ' = 1(x>0)
      return {
        mean: sq * INV_SQRT_2PI,
        second: q / 2,
        fourth: 1.5 * q * q,
        derivativeMean: 0.5,
        derivativeSecond: 0.5,
        derivativeFourth: 0.5,
        zeroFraction: q === 0 ? 1 : 0.5,
      };
    case "leaky-relu": {
      // SCIENCE.md §2.9 leaky forms: E[φ] = (1−a)√(q/2π), E[φ²] = q(1+a²)/2, E[φ'²] = (1+a²)/2; the
      // fourth moments follow the same way from E[x⁴·1(x>0)] = 3q²/2
      const a = slope;
      const a2 = a * a;
      return {
        mean: (1 - a) * sq * INV_SQRT_2PI,
        second: (q * (1 + a2)) / 2,
        fourth: 1.5 * q * q * (1 + a2 * a2),
        derivativeMean: (1 + a) / 2,
        derivativeSecond: (1 + a2) / 2,
        derivativeFourth: (1 + a2 * a2) / 2,
        zeroFraction: q === 0 || a === 0 ? (q === 0 ? 1 : 0.5) : 0,
      };
    }
    case "identity":
      // Gaussian moments E[x²] = q, E[x⁴] = 3q²
      return { mean: 0, second: q, fourth: 3 * q * q, derivativeMean: 1, derivativeSecond: 1, derivativeFourth: 1, zeroFraction: q === 0 ? 1 : 0 };
    default:
      break;
  }
  if (q === Infinity) return infiniteVarianceLimit(name);
  const fn = activationFunction(name);
  if (q === 0) {
    const v = fn.f(0);
    const d = fn.df(0);
    return {
      mean: v,
      second: v * v,
      fourth: v ** 4,
      derivativeMean: d,
      derivativeSecond: d * d,
      derivativeFourth: d ** 4,
      zeroFraction: v === 0 ? 1 : 0,
    };
  }
  const sumsNow = quadratureMoments(name, q);
  const m1 = sumsNow[0] as number;
  const m2 = sumsNow[1] as number;
  const m4 = sumsNow[2] as number;
  const d1 = sumsNow[3] as number;
  const d2 = sumsNow[4] as number;
  const d4 = sumsNow[5] as number;
  switch (name) {
    case "gelu":
      return {
        mean: q / Math.sqrt(2 * Math.PI * (1 + q)),
        second: geluSecond(q),
        fourth: m4,
        derivativeMean: 0.5, // SCIENCE.md §2.9: E_q[φ'] = ½ for GELU at every q
        derivativeSecond: d2,
        derivativeFourth: d4,
        zeroFraction: 0,
      };
    case "silu":
    case "softplus":
      // E_q[φ'] = ½ for SiLU and softplus at every q (SCIENCE.md §2.9): φ' − ½ is odd
      return { mean: m1, second: m2, fourth: m4, derivativeMean: 0.5, derivativeSecond: d2, derivativeFourth: d4, zeroFraction: 0 };
    case "sigmoid":
      // σ(x) − ½ is odd, so E_q[σ] = ½ (SCIENCE.md §2.9)
      return { mean: 0.5, second: m2, fourth: m4, derivativeMean: d1, derivativeSecond: d2, derivativeFourth: d4, zeroFraction: 0 };
    case "tanh":
      // tanh is odd, so E_q[tanh] = 0
      return { mean: 0, second: m2, fourth: m4, derivativeMean: d1, derivativeSecond: d2, derivativeFourth: d4, zeroFraction: 0 };
  }
}
