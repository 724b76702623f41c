/**
 * A batch norm after a rectifier divides each channel by that channel's own variance over batch and pixels. When the
 * rectifier's input has a per-channel mean (a convolution of a nonzero-mean input: μ_c = m·Σw, one Gaussian draw per
 * channel), the channels' variances differ: a channel whose mean sits low is nearly off, with a tiny variance and a
 * large 1/variance. The backward pass multiplies each channel's gradient by gain²/(var_c + ε), so the gradient's second
 * moment holds the channels' mean of 1/(var_c + ε), which a heavy tail puts well above 1/(mean var + ε). The simulation
 * and the risk figures read one draw's tensor, so the rule gives that mean at the median draw.
 */
import { gaussHermite, gaussLegendre } from "../../numeric/quadrature.js";
import { normalCdf, normalPdf, normalQuantile } from "../../numeric/normal.js";
import type { ChannelSpread } from "../types.js";


/** The channels' mean of 1/(var_c + ε), and of E[φ'²|c]/(var_c + ε) per unit of it, at the median draw. */
export interface ChannelInverse {
  /** the mean over the channels of 1/(var_c + ε) */
  inverse: number;
  /** the mean over the channels of E[φ'²|c]/(var_c + ε), divided by `inverse` */
  gate: number;
  /** E[φ'(u)·φ'(v)] for two samples of one channel (independent given the channel: E[φ'|c]²), weighed as `gate` */
  pair: number;
  /** the same for two positions of one sample, whose deviations from the channel's mean correlate (`position`) */
  positionPair: number;
  /**
   * what the norm's x̂ term takes from a channel's gated gradient summed over its N terms of batch × pixels, per unit of
   * N·E[(φ'·δ)²] (channels weighed as `gate`): the sum a bias below the rectifier gets is the pairs' less this
   */
  correction: number;
}

/**
 * Var[φ(a + Z)] and E[φ'(a + Z)²] for Z ~ N(0, 1) and φ(x) = max(x, 0) − slope·max(−x, 0): with m1 = aΦ(a) + φ(a)
 * and m2 = (a² + 1)Φ(a) + aφ(a) the ReLU's first two moments (the truncated normal's), Var[relu] = m2 − m1²,
 * Cov(x, relu(x)) = Φ(a) (Stein's lemma) and φ(x) = slope·x + (1 − slope)·relu(x) (own algebra). Both formulas keep
 * their relative accuracy to a = −30 (their cancellations cost about t⁴ ulps at t = −a).
 */
export function rectifierChannel(a: number, slope: number): { variance: number; derivativeSecond: number; on: number; onMean: number } {
  const cdf = normalCdf(a);
  const pdf = normalPdf(a);
  const m1 = a * cdf + pdf;
  const m2 = (a * a + 1) * cdf + a * pdf;
  const relu = Math.max(m2 - m1 * m1, 0);
  const keep = 1 - slope;
  return {
    variance: slope * slope + 2 * slope * keep * cdf + keep * keep * relu,
    derivativeSecond: slope * slope + (1 - slope * slope) * cdf,
    on: cdf,
    // E[(φ − E[φ])·1(x > 0)] = E[relu(x)] − E[φ]·Φ(a), φ being x where x > 0
    onMean: m1 - (slope * a + keep * m1) * cdf,
  };
}

/**
 * The x̂ term's part of a channel's gated gradient summed over its N terms, per unit N·E[δ²] of the gradient above the
 * norm, for δ independent between terms: the norm's backward is δ_x = (δ − mean δ − x̂·mean(δ·x̂))/√(var + ε), and
 * Σ φ'·δ_x = (1 − slope)·Σ_{x>0} δ_x (Σ δ_x = 0), whose coefficients c_i = 1(x_i > 0) − p − x̂_i·S/N have
 * Σ c_i² = N·(p(1 − p) − s²·(2 − var/(var + ε))), p = Φ(a), s = S/N = E[x̂·1(x > 0)] (own algebra): p(1 − p) is what
 * gates independent of δ give (the pairs' anti-correlation), the s² term the x̂ term's, which pairs the gate with x̂
 */
function gatedCorrection(ch: { variance: number; onMean: number }, slope: number, epsilon: number): number {
  const total = ch.variance + epsilon;
  const s = ch.onMean / Math.sqrt(total);
  const keep = 1 - slope;
  return (keep * keep * s * s * (2 - ch.variance / total)) / total;
}

/**
 * P(x > 0, x' > 0) for x, x' ~ N(a, 1) of correlation ρ ≥ 0: E_t[Φ((a + √ρ·t)/√(1 − ρ))²] over t ~ N(0, 1), the
 * one-factor form of two equicorrelated Gaussians (Dunnett & Sobel 1955, from memory, as allBelowZero), by
 * 40-node Gauss–Hermite; ρ above 0.98 taken as 0.98 (the pair then nearly one term, P → Φ(a))
 */
function bothOn(a: number, rho: number): number {
  const cdf = normalCdf(a);
  if (!(rho > 0)) return cdf * cdf;
  const r = Math.min(rho, 0.98);
  const { nodes, weights } = HERMITE;
  const s = Math.sqrt(2 * r);
  const d = Math.sqrt(1 - r);
  let sum = 0;
  for (let i = 0; i < nodes.length; i++) {
    const p = normalCdf((a + s * (nodes[i] as number)) / d);
    sum += (weights[i] as number) * p * p;
  }
  return sum / Math.sqrt(Math.PI);
}

const HERMITE = gaussHermite(40);
const cache = new Map<string, ChannelInverse>();
const PANEL = gaussLegendre(12);
/** u beyond 8.5 standard deviations holds below 1e-16 of the channels */
const U_END = 8.5;

/**
 * The mean over C channels of X_c = 1/(var_c + ε) (and of Y_c = E[φ'²|c]·X_c, of the gate's pairs and of the x̂ term's part of the gated sum) at the median draw, for channel means
 * μ_c ~ N(0, between) and a spread `within` about them. X is largest for the channel whose mean is lowest, and its
 * tail is heavy (X grows like e^(a²/2) at a = μ/√within, against the channels' density e^(−a²/2r²)): the mean of C
 * draws is set by their largest. So the largest takes the median of the lowest of C means, a* = r·Φ⁻¹(1 − 2^(−1/C))
 * (the maximum of C uniforms is below 2^(−1/C) with probability 1/2), and the other C − 1 their mean given a > a*
 * (own algebra: the C − 1 others are independent draws below the largest; within 3% of the median of the mean of C
 * draws by a Monte Carlo count, 4 ≤ C ≤ 128, r² from 0.2 to 2).
 */
export function channelInverse(spread: ChannelSpread, channels: number, epsilon: number): ChannelInverse {
  const within = spread.within;
  const slope = spread.slope;
  if (!(within > 0)) throw new RangeError(`channelInverse: the spread about the channel means must be positive, got ${within}`);
  const r = Math.sqrt(Math.max(spread.between, 0) / within);
  const scaledEpsilon = epsilon / within;
  const c = Math.max(Math.round(channels), 1);
  const position = spread.position;
  const key = `${slope} ${r} ${c} ${scaledEpsilon} ${position}`;
  const hit = cache.get(key);
  if (hit !== undefined) return { ...hit, inverse: hit.inverse / within };
  const at = (a: number): { x: number; y: number; z: number; v: number; b: number } => {
    const ch = rectifierChannel(a, slope);
    const x = 1 / (ch.variance + scaledEpsilon);
    const gate = slope + (1 - slope) * ch.on;
    // φ' = slope + (1 − slope)·1(x > 0): two positions' E[φ'φ'] = slope² + 2·slope(1 − slope)·p + (1 − slope)²·P(both on)
    const both = slope * slope + 2 * slope * (1 - slope) * ch.on + (1 - slope) * (1 - slope) * bothOn(a, position);
    return { x, y: ch.derivativeSecond * x, z: gate * gate * x, v: both * x, b: gatedCorrection(ch, slope, scaledEpsilon) };
  };
  // the lowest channel's tail probability at its median, p* = 1 − 2^(−1/C)
  const low = -Math.expm1(-Math.LN2 / c);
  const uLow = normalQuantile(low);
  const largest = at(r * uLow);
  // ∫ over u > u* of φ(u)·X(r·u): composite 12-point Gauss–Legendre, panels narrow where the integrand is steep (its
  // log changes by (1 + r²)·|u| + r per unit of u in X's exponential tail)
  let mass = 0;
  let sumX = 0;
  let sumY = 0;
  let sumZ = 0;
  let sumV = 0;
  let sumB = 0;
  let u = uLow;
  while (u < U_END) {
    const steep = (1 + r * r) * Math.abs(u) + 3 * r + 1;
    const width = Math.min(0.5, 2 / steep, U_END - u);
    for (let i = 0; i < PANEL.nodes.length; i++) {
      const v = u + 0.5 * width * (1 + (PANEL.nodes[i] as number));
      const w = 0.5 * width * (PANEL.weights[i] as number) * normalPdf(v);
      const p = at(r * v);
      mass += w;
      sumX += w * p.x;
      sumY += w * p.y;
      sumZ += w * p.z;
      sumV += w * p.v;
      sumB += w * p.b;
    }
    u += width;
  }
  const rest = (c - 1) / c;
  const meanX = mass > 0 ? rest * (sumX / mass) + largest.x / c : largest.x;
  const meanY = mass > 0 ? rest * (sumY / mass) + largest.y / c : largest.y;
  const meanZ = mass > 0 ? rest * (sumZ / mass) + largest.z / c : largest.z;
  const meanV = mass > 0 ? rest * (sumV / mass) + largest.v / c : largest.v;
  const meanB = mass > 0 ? rest * (sumB / mass) + largest.b / c : largest.b;
  const result = {
    inverse: meanX,
    gate: meanX > 0 ? meanY / meanX : 0,
    pair: meanX > 0 ? meanZ / meanX : 0,
    positionPair: meanX > 0 ? meanV / meanX : 0,
    correction: meanY > 0 ? meanB / meanY : 0,
  };
  if (cache.size >= 256) cache.clear();
  cache.set(key, result);
  return { ...result, inverse: result.inverse / within };
}
