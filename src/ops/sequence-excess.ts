/**
 * How evenly the deviations of one sequence's positions from the sequence's mean fill the features (Signal.
 * sequenceExcess, ε): with Σ_s their covariance over the positions of sequence s (the weights and what the positions
 * share held fixed), 1 + ε = D·E[tr Σ_s²]/E[tr Σ_s]², so two positions of one sequence have E[(x̃_j·x̃_j')²] =
 * D·E[x̃²]²·(1 + ε), what the attention's query gradient sums over pairs of keys. A layer that maps every sequence
 * with the same matrix moves it as it moves a pooled covariance; a gated product, whose units' gains depend on what
 * the positions of the sequence share, scales each unit by a gain of its own in each sequence, which the pooled
 * covariance averages away (transformer stream: ε grew from 0.02 to 1.04 over six blocks in the float64 simulation,
 * while the pooled one stayed near 0.13).
 */
import { activationFunction, type ActivationFunction } from "../numeric/activations.js";
import { gaussHermite } from "../numeric/quadrature.js";
import type { ActivationName } from "../spec/types.js";
import { positionCorrelationOf } from "./common.js";
import type { Signal } from "./types.js";

/** ε of a signal of `width` features; absent, what its pooled feature covariance gives (pooledExcessOf). */
export function sequenceExcessOf(signal: Signal, width: number): number {
  return signal.sequenceExcess ?? pooledExcessOf(signal, width);
}

/**
 * The same for two positions of two different sequences, whose deviations pair through the covariance pooled over
 * sequences: (D − 1)·E[Cov(x_a, x_b)²]/E[x̃²]² (featureCovariance, in units of E[x²]², and E[x̃²] = E[x²]·(1 − ρ)).
 */
export function pooledExcessOf(signal: Signal, width: number): number {
  const apart = 1 - positionCorrelationOf(signal);
  return ((width - 1) * (signal.featureCovariance ?? 0)) / Math.max(apart * apart, 1e-12);
}

/**
 * A random map W (out × in, i.i.d. Gaussian entries) applied to every position: Σ_y = W·Σ·Wᵀ, and over W
 * E[tr Σ_y²] = var²·(out·(out + 1)·tr Σ² + out·(tr Σ)²) (Wishart moments, own algebra: Σ_ab (w_aᵀΣw_b)², the
 * a ≠ b terms σ⁴·tr Σ² and the a = b terms σ⁴·((tr Σ)² + 2·tr Σ²)), so ε_y = (out + 1)·(1 + ε)/in.
 */
export function mappedExcess(excess: number, inWidth: number, outWidth: number): number {
  return inWidth > 0 ? ((outWidth + 1) * (1 + excess)) / inWidth : excess;
}

/**
 * A sum x + F whose deviations are randomly oriented to each other (E[tr(Σ_x·Σ_F)] = tr Σ_x·tr Σ_F/D):
 * (1 + ε)·(e_x + e_F)² = (1 + ε_x)·e_x² + (1 + ε_F)·e_F² + 2·e_x·e_F for deviation energies e = E[x̃²]. Where F holds
 * J·x̃, a map of x's deviations of mean zero over the weights with energy e_J = E[(J·x̃)²] (a gated branch's first
 * order, Signal.sequenceLinear), x̃ + J·x̃ also has the cross terms tr((J·Σ + Σ·Jᵀ)²), of mean 2·(e_J/e_x)·tr Σ_x²:
 * a random symmetric perturbation spreads Σ_x's spectrum, adding 2·(1 + ε_x)·e_x·e_J (own algebra).
 */
export function summedExcess(excessX: number, energyX: number, excessF: number, energyF: number, linearEnergy = 0): number {
  const total = energyX + energyF;
  return total > 0 ? (excessX * energyX * energyX + excessF * energyF * energyF + 2 * (1 + excessX) * energyX * linearEnergy) / (total * total) : excessX;
}

/**
 * An attention average x̄_i = Σ_j p_ij·x_j over the keys of one sequence: its deviations Σ_j (p_ij − p̄_j)·x̃_j lie in
 * the span of the sequence's own keys, their covariance that of `keys` samples of Σ, whose E[tr Σ̂²] = (1 + 1/n)·tr Σ²
 * + (tr Σ)²/n (Wishart moments; own algebra, the weights taken independent of the keys): 1 + ε = (1 + ε_x)·(1 + 1/n)
 * + D/n.
 */
export function averagedExcess(excess: number, width: number, keys: number): number {
  const n = Math.max(keys, 1);
  return (1 + excess) * (1 + 1 / n) + width / n - 1;
}

/** Gaussian expectations of the gated product over what the positions of a sequence share, per unit energies. */
interface GatedSums {
  /** e_L: the linear part's deviation energy, E[a²]·σ_u² + E[b²]·ρ·q_u·σ_g² */
  linear: number;
  /** E[r²]/E[r]² of a unit's linear-part energy r over units */
  linearKappa: number;
  /** e_N: the rest's deviation energy */
  rest: number;
  restKappa: number;
  /** E[r·n]/(E[r]·E[n]) */
  joint: number;
}

const gatedCache = new Map<string, GatedSums>();
const NODES = 40;

/**
 * The gated product h = φ(g)·u, gate g and up u independent Gaussians of second moments q_g, q_u whose share ρ is
 * common to the positions of a sequence: in sequence s unit k has means G ~ N(0, ρ·q_g), U ~ N(0, ρ·q_u) and
 * deviations g̃, ũ of variances σ_g² = (1 − ρ)·q_g, σ_u² = (1 − ρ)·q_u. To first order h̃ = a·ũ + b·U·g̃ with
 * a = E[φ(G + g̃)], b = E[φ'(G + g̃)] over the positions: a linear image of x̃ through rows a·w_u + b·U·w_g, each unit
 * with a gain r = a²·σ_u² + b²·U²·σ_g² of its own in each sequence; the rest has energy n = U²·(Var φ − b²·σ_g²) +
 * σ_u²·Var φ (own algebra: Var(φ(G + g̃)·(U + ũ)) = U²·Var φ + σ_u²·E[φ²]). Memoised.
 */
function gatedSums(f: ActivationFunction, key: string, qg: number, qu: number, rho: number): GatedSums {
  const hit = gatedCache.get(key);
  if (hit !== undefined) return hit;
  const { nodes, weights } = gaussHermite(NODES);
  const sg2 = (1 - rho) * qg;
  const su2 = (1 - rho) * qu;
  const common = rho * qu;
  const inner = Math.sqrt(2 * sg2);
  const outer = Math.sqrt(2 * rho * qg);
  // E over G of a², a⁴, a²b², b², b⁴, c = Var φ − b²σ_g², c², c·Var φ, Var φ, (Var φ)², a²c, a²·Var φ, b²c, b²·Var φ
  let a2 = 0, a4 = 0, a2b2 = 0, b2 = 0, b4 = 0, c = 0, c2 = 0, cv = 0, v = 0, v2 = 0, a2c = 0, a2v = 0, b2c = 0, b2v = 0;
  const outerCount = outer > 0 ? NODES : 1;
  for (let i = 0; i < outerCount; i++) {
    const wo = outer > 0 ? (weights[i] as number) / Math.sqrt(Math.PI) : 1;
    const G = outer > 0 ? outer * (nodes[i] as number) : 0;
    let a = 0, b = 0, s = 0;
    for (let j = 0; j < NODES; j++) {
      const w = (weights[j] as number) / Math.sqrt(Math.PI);
      const x = G + inner * (nodes[j] as number);
      const y = f.f(x);
      a += w * y;
      b += w * f.df(x);
      s += w * y * y;
    }
    const varPhi = Math.max(s - a * a, 0);
    const ci = Math.max(varPhi - b * b * sg2, 0);
    a2 += wo * a * a; a4 += wo * a ** 4; a2b2 += wo * a * a * b * b; b2 += wo * b * b; b4 += wo * b ** 4;
    c += wo * ci; c2 += wo * ci * ci; cv += wo * ci * varPhi; v += wo * varPhi; v2 += wo * varPhi * varPhi;
    a2c += wo * a * a * ci; a2v += wo * a * a * varPhi; b2c += wo * b * b * ci; b2v += wo * b * b * varPhi;
  }
  // U enters as U² (E = ρq_u) and U⁴ (E = 3ρ²q_u²), independent of G (gate and up weights independent)
  const linear = a2 * su2 + b2 * common * sg2;
  const linearSquare = a4 * su2 * su2 + 2 * a2b2 * common * su2 * sg2 + 3 * b4 * common * common * sg2 * sg2;
  const rest = c * common + su2 * v;
  const restSquare = 3 * c2 * common * common + 2 * cv * common * su2 + v2 * su2 * su2;
  const joint = su2 * common * a2c + su2 * su2 * a2v + 3 * common * common * sg2 * b2c + su2 * sg2 * common * b2v;
  const result: GatedSums = {
    linear,
    linearKappa: linear > 0 ? linearSquare / (linear * linear) : 1,
    rest,
    restKappa: rest > 0 ? restSquare / (rest * rest) : 1,
    joint: linear > 0 && rest > 0 ? joint / (linear * rest) : 1,
  };
  if (gatedCache.size > 256) gatedCache.clear();
  gatedCache.set(key, result);
  return result;
}

/**
 * ε of a gated product's H units from its input's ε (width D) and the share ρ the positions of a sequence have in
 * common (gatedSums). The linear part is a map whose rows have the gains r: E[tr Σ_L²] = (Σ r)²·tr Σ² + Σ r²·((tr Σ)²
 * + tr Σ²), so 1 + ε_L = (1 + ε_x)·(H + κ_r)/D + κ_r; the rest pairs two units through products of two of the
 * projections' correlations, each of mean square (1 + ε_x)/D, two such products (Isserlis' theorem), with its units'
 * energies spread by κ_n: 1 + ε_N = κ_n + 2·(H − 1)·((1 + ε_x)/D)². The two parts' traces meet on the diagonal only,
 * E[r·n] (own algebra). Also the linear part's share of the deviations' energy. Undefined for a softmax gate.
 */
export function gatedExcess(
  activation: ActivationName,
  slope: number,
  qg: number,
  qu: number,
  rho: number,
  excess: number,
  inWidth: number,
  hidden: number,
): { excess: number; linearShare: number } | undefined {
  if (activation === "softmax" || !(qg > 0) || !(qu > 0) || inWidth < 1) return undefined;
  const share = Math.min(Math.max(rho, 0), 1);
  const sums = gatedSums(activationFunction(activation, slope), `${activation}|${slope}|${qg}|${qu}|${share}`, qg, qu, share);
  const mean = (1 + excess) / inWidth;
  const linearOne = (1 + excess) * (hidden + sums.linearKappa) / inWidth + sums.linearKappa;
  const restOne = sums.restKappa + 2 * (hidden - 1) * mean * mean;
  const total = sums.linear + sums.rest;
  if (!(total > 0)) return undefined;
  const one = (linearOne * sums.linear * sums.linear + restOne * sums.rest * sums.rest + 2 * sums.joint * sums.linear * sums.rest) / (total * total);
  return { excess: Math.max(one - 1, 0), linearShare: sums.linear / total };
}
