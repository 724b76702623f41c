/**
 * Gaussian quadrature rules and Gaussian expectations E_q[f] := E[f(√q·z)], z ~ N(0,1).
 * Rules are computed once per size and cached; callers must not modify the returned arrays.
 */

/** A quadrature rule: Σ weights[i]·f(nodes[i]) approximates the rule's weighted integral. */
export interface QuadratureRule {
  readonly nodes: Float64Array;
  readonly weights: Float64Array;
}

/** Largest supported Gauss–Hermite size. */
export const GAUSS_HERMITE_MAX_NODES = 200;

const hermiteCache = new Map<number, QuadratureRule>();

/**
 * Gauss–Hermite rule with n nodes for ∫ f(x)·e^{−x²} dx (physicists' weight), 1 ≤ n ≤ 200.
 * Exact for polynomials of degree ≤ 2n − 1. Nodes ascend. Weights sum to √π.
 * Throws RangeError for n outside [1, 200] or not an integer.
 */
export function gaussHermite(n: number): QuadratureRule {
  if (!Number.isInteger(n) || n < 1 || n > GAUSS_HERMITE_MAX_NODES) {
    throw new RangeError(`gaussHermite: n must be an integer from 1 to ${GAUSS_HERMITE_MAX_NODES}, got ${n}`);
  }
  let rule = hermiteCache.get(n);
  if (!rule) {
    rule = computeGaussHermite(n);
    hermiteCache.set(n, rule);
  }
  return rule;
}

// Nodes are the eigenvalues of the Jacobi matrix of the Hermite recurrence (zero diagonal, off-diagonal
// √(k/2); Golub & Welsch 1969), located one by one by Sturm-sequence bisection (which cannot skip or
// repeat a node, unlike Newton from guessed starts at n near 200), then polished by Newton on the
// orthonormal recurrence p_j = x·√(2/j)·p_{j−1} − √((j−1)/j)·p_{j−2}, p_0 = π^{−1/4}, with
// p_n' = √(2n)·p_{n−1} and weight 2/p_n'² (Press et al., Numerical Recipes 3rd ed. §4.6, gauher).
// The orthonormal form cannot overflow at n = 200.
function computeGaussHermite(n: number): QuadratureRule {
  const nodes = new Float64Array(n);
  const weights = new Float64Array(n);
  const half = Math.floor(n / 2);
  // number of Jacobi-matrix eigenvalues below x (Sturm count of the LDLᵀ pivots)
  const countBelow = (x: number): number => {
    let count = 0;
    let d = -x;
    if (d < 0) count++;
    for (let k = 1; k < n; k++) {
      if (d === 0) d = 1e-300;
      d = -x - k / 2 / d;
      if (d < 0) count++;
    }
    return count;
  };
  const pim4 = 0.7511255444649425; // π^{−1/4}
  const evaluate = (z: number): [number, number] => {
    let p1 = pim4;
    let p2 = 0;
    for (let j = 1; j <= n; j++) {
      const p3 = p2;
      p2 = p1;
      p1 = z * Math.sqrt(2 / j) * p2 - Math.sqrt((j - 1) / j) * p3;
    }
    return [p1, Math.sqrt(2 * n) * p2];
  };
  const upper = Math.sqrt(2 * n + 1) + 1; // every Hermite zero lies below √(2n+1)
  for (let i = 0; i < half; i++) {
    // the (n − i)-th smallest eigenvalue: countBelow(lo) < n − i ≤ countBelow(hi)
    const target = n - i;
    let lo = 0;
    let hi = i === 0 ? upper : (nodes[n - i] as number);
    for (let iter = 0; iter < 200 && hi - lo > 1e-9 * Math.max(1, hi); iter++) {
      const mid = 0.5 * (lo + hi);
      if (countBelow(mid) >= target) hi = mid;
      else lo = mid;
    }
    let z = 0.5 * (lo + hi);
    for (let iter = 0; iter < 5; iter++) {
      const [p, dp] = evaluate(z);
      const step = p / dp;
      z -= step;
      if (Math.abs(step) <= 1e-16 * z) break;
    }
    const [, dp] = evaluate(z);
    const w = 2 / (dp * dp);
    nodes[n - 1 - i] = z;
    nodes[i] = -z;
    weights[n - 1 - i] = w;
    weights[i] = w;
  }
  if (n % 2 === 1) {
    const [, dp] = evaluate(0);
    nodes[half] = 0;
    weights[half] = 2 / (dp * dp);
  }
  return { nodes, weights };
}

/** Largest supported Gauss–Legendre size. */
export const GAUSS_LEGENDRE_MAX_NODES = 200;

const legendreCache = new Map<number, QuadratureRule>();

/**
 * Gauss–Legendre rule with n nodes on [−1, 1], 1 ≤ n ≤ 200: exact for polynomials of degree ≤ 2n − 1.
 * Throws RangeError for n outside [1, 200] or not an integer.
 */
export function gaussLegendre(n: number): QuadratureRule {
  if (!Number.isInteger(n) || n < 1 || n > GAUSS_LEGENDRE_MAX_NODES) {
    throw new RangeError(`gaussLegendre: n must be an integer from 1 to ${GAUSS_LEGENDRE_MAX_NODES}, got ${n}`);
  }
  let rule = legendreCache.get(n);
  if (!rule) {
    rule = computeGaussLegendre(n);
    legendreCache.set(n, rule);
  }
  return rule;
}

// Newton on the three-term Legendre recurrence, start cos(π(i + 3/4)/(n + 1/2)) (Numerical Recipes §4.6,
// gauleg); weight 2/((1 − x²)·P_n'(x)²).
function computeGaussLegendre(n: number): QuadratureRule {
  const nodes = new Float64Array(n);
  const weights = new Float64Array(n);
  const half = Math.floor((n + 1) / 2);
  for (let i = 0; i < half; i++) {
    let z = Math.cos((Math.PI * (i + 0.75)) / (n + 0.5));
    let pp = 0;
    for (let iter = 0; iter < 100; iter++) {
      let p1 = 1;
      let p2 = 0;
      for (let j = 1; j <= n; j++) {
        const p3 = p2;
        p2 = p1;
        p1 = ((2 * j - 1) * z * p2 - (j - 1) * p3) / j;
      }
      pp = (n * (z * p1 - p2)) / (z * z - 1);
      const z1 = z;
      z = z1 - p1 / pp;
      if (Math.abs(z - z1) <= 1e-16) break;
    }
    const w = 2 / ((1 - z * z) * pp * pp);
    nodes[i] = -z;
    nodes[n - 1 - i] = z;
    weights[i] = w;
    weights[n - 1 - i] = w;
  }
  if (n % 2 === 1) nodes[(n - 1) / 2] = 0;
  return { nodes, weights };
}

/** Default Gauss–Hermite size for {@link gaussianExpectation}. */
export const DEFAULT_GAUSS_HERMITE_NODES = 96;

/**
 * E[f(√q·z)] for z ~ N(0,1) by n-node Gauss–Hermite quadrature (default 96): with x_i, w_i for the weight
 * e^{−x²}, E[f(√q z)] = (1/√π)·Σ w_i·f(√(2q)·x_i). Exact for polynomials of degree < 2n; converges
 * geometrically for f analytic in a strip, more slowly as q grows (the strip shrinks like 1/√q in z).
 * For f with a kink or jump at 0 use {@link gaussianExpectationSplit}. q must be ≥ 0; q = 0 gives f(0).
 */
export function gaussianExpectation(f: (x: number) => number, q: number, n: number = DEFAULT_GAUSS_HERMITE_NODES): number {
  if (!(q >= 0) || q === Infinity) return NaN;
  if (q === 0) return f(0);
  const { nodes, weights } = gaussHermite(n);
  const scale = Math.sqrt(2 * q);
  let sum = 0;
  for (let i = 0; i < nodes.length; i++) sum += (weights[i] as number) * f(scale * (nodes[i] as number));
  return sum * INV_SQRT_PI;
}

const INV_SQRT_PI = 0.5641895835477563;
const INV_SQRT_2PI = 0.3989422804014327;

/**
 * Breakpoints in z for integrating g(√q·z)·φ(z) over z ∈ [0, 9.5]: a first panel of width 2^−(level+1),
 * each next one twice as wide up to `maxPanel`; φ(9.5) ≈ 1e-20 ends the range.
 */
function halfLineBreakpoints(level: number, maxPanel: number): number[] {
  const zMax = 9.5;
  const points = [0];
  let w = Math.pow(2, -(level + 1));
  let z = 0;
  while (z + w < zMax) {
    z += w;
    points.push(z);
    w = Math.min(2 * w, maxPanel);
  }
  points.push(zMax);
  return points;
}

const splitCache = new Map<string, QuadratureRule>();

/**
 * Nodes z > 0 and weights (the density φ(z) folded in) for ∫_0^∞ h(z)·φ(z) dz where h varies on the
 * scale 1/√q near 0: composite `panelNodes`-point Gauss–Legendre (default 12) over panels graded toward 0, the first one of
 * width 2^−(k+1) with 2^k ≥ √q, each next twice as wide up to `maxPanel` (default 1; 2 suffices for
 * integrands that settle to a polynomial away from 0, as activations do). Rules are cached per k.
 */
export function halfLineGaussianRule(q: number, maxPanel = 1, panelNodes = 12): QuadratureRule {
  if (!(q < Infinity)) throw new RangeError(`halfLineGaussianRule: q must be finite, got ${q}`);
  if (!(maxPanel > 0)) throw new RangeError(`halfLineGaussianRule: maxPanel must be positive, got ${maxPanel}`);
  const level = q > 1 ? Math.ceil(0.5 * Math.log2(q)) : 0;
  const key = `${level}|${maxPanel}|${panelNodes}`;
  let rule = splitCache.get(key);
  if (rule) return rule;
  const gl = gaussLegendre(panelNodes);
  const bps = halfLineBreakpoints(level, maxPanel);
  const count = (bps.length - 1) * gl.nodes.length;
  const nodes = new Float64Array(count);
  const weights = new Float64Array(count);
  let k = 0;
  for (let p = 0; p + 1 < bps.length; p++) {
    const a = bps[p] as number;
    const b = bps[p + 1] as number;
    const mid = 0.5 * (a + b);
    const half = 0.5 * (b - a);
    for (let i = 0; i < gl.nodes.length; i++) {
      const z = mid + half * (gl.nodes[i] as number);
      nodes[k] = z;
      weights[k] = half * (gl.weights[i] as number) * INV_SQRT_2PI * Math.exp(-0.5 * z * z);
      k++;
    }
  }
  rule = { nodes, weights };
  splitCache.set(key, rule);
  return rule;
}

/**
 * E[f(√q·z)] for z ~ N(0,1), integrating z < 0 and z > 0 separately with composite Gauss–Legendre on
 * panels graded toward 0. Accurate (about 1e-13) for f smooth on each side of 0 even with a kink or jump
 * at 0 (ReLU-like), and for large q, where Gauss–Hermite needs many nodes. About 250–500 evaluations;
 * f should vary on a scale of about 1 or more in x (not oscillate fast far from 0).
 */
export function gaussianExpectationSplit(f: (x: number) => number, q: number): number {
  if (!(q >= 0) || q === Infinity) return NaN;
  if (q === 0) return f(0);
  const { nodes, weights } = halfLineGaussianRule(q);
  const s = Math.sqrt(q);
  let sum = 0;
  for (let i = 0; i < nodes.length; i++) {
    const x = s * (nodes[i] as number);
    sum += (weights[i] as number) * (f(x) + f(-x));
  }
  return sum;
}
