/**
 * Per-block scaling of 8-bit formats (OCP Microscaling v1.0; Rouhani et al. 2023): each block of 32 consecutive
 * elements shares one power-of-two scale X = 2^(⌊log2 max|V_i|⌋ − emax_elem), and each element is stored as
 * RNE(V_i / X) clamped to ± the element format's largest value (SCIENCE.md §1.4; the conversion rule there is
 * from memory, unconfirmed, and the tests hold this model to a Monte Carlo of the rule itself).
 *
 * Consequences [X, SCIENCE.md §1.4]: a block's maximum can be clipped by up to 2^(emax+1)/max (e4m3: 512/448),
 * and elements far below their block's maximum flush to zero.
 */
import type { Format } from "../formats/index.js";
import { normalCdf, normalPdf } from "../numeric/index.js";

/** The share of elements (and of squared norm) lost when a tensor is converted with per-block scale factors. */
export interface BlockScaledRisk {
  blockSize: number;
  /** share of elements that round to zero */
  flushedFraction: number;
  /** share of the squared norm those elements carry */
  flushedEnergy: number;
  /** share of elements clipped to the element format's largest value (a block maximum past it) */
  clippedFraction: number;
}

/**
 * Analytic block-scaled conversion of Gaussian-like elements (the scale of the tensor cancels: each block's scale
 * follows its own maximum). Integrates over the distribution of a block's largest magnitude, with the other
 * elements of the block independent and below it.
 * @example blockScaledRisk(FORMATS.e4m3).clippedFraction // => about 0.005
 */
export function blockScaledRisk(format: Pick<Format, "emax" | "maxFinite" | "flushBound">, blockSize = 32): BlockScaledRisk {
  if (!(Number.isInteger(blockSize) && blockSize >= 2)) throw new RangeError(`blockSize must be an integer ≥ 2. Value: ${blockSize}`);
  const n = blockSize;
  const others = n - 1;
  // P(|Z| ≤ t) and E[Z²; |Z| ≤ t] for Z ~ N(0, 1): 2Φ(t) − 1 and (2Φ(t) − 1) − 2tφ(t) (integration by parts)
  const below = (t: number) => Math.max(0, 2 * normalCdf(t) - 1);
  const energyBelow = (t: number) => Math.max(0, below(t) - 2 * t * normalPdf(t));
  const totalEnergy = n; // E[Σ Z²] over a block

  let flushed = 0;
  let clipped = 0;
  let flushedEnergy = 0;
  let mass = 0;
  // density of the block maximum u of n |Z|: n · 2φ(u) · (2Φ(u) − 1)^(n−1); trapezoid on a fine grid
  const lo = 1e-3;
  const hi = 9;
  const steps = 3000;
  const h = (hi - lo) / steps;
  for (let i = 0; i <= steps; i++) {
    const u = lo + i * h;
    const weight = (i === 0 || i === steps ? 0.5 : 1) * h;
    const inside = below(u);
    const density = n * 2 * normalPdf(u) * inside ** others;
    if (!(density > 0)) continue;
    const shared = Math.floor(Math.log2(u)) - format.emax;
    const X = 2 ** shared;
    const flushLevel = X * format.flushBound;
    const clipLevel = X * format.maxFinite;
    // the other elements of the block are independent |Z| conditioned below u
    const g = (t: number) => (inside > 0 ? Math.min(1, below(Math.min(t, u)) / inside) : 0);
    const flushedHere = others * g(flushLevel);
    const clippedHere = (u > clipLevel ? 1 : 0) + (clipLevel < u ? others * (1 - g(clipLevel)) : 0);
    const energyHere = inside > 0 ? (others * energyBelow(Math.min(flushLevel, u))) / inside : 0;
    flushed += weight * density * flushedHere;
    clipped += weight * density * clippedHere;
    flushedEnergy += weight * density * energyHere;
    mass += weight * density;
  }
  return {
    blockSize: n,
    flushedFraction: flushed / mass / n,
    flushedEnergy: flushedEnergy / mass / totalEnergy,
    clippedFraction: clipped / mass / n,
  };
}

const cache = new Map<string, BlockScaledRisk>();

/** {@link blockScaledRisk} for blocks of 32, computed once per format. */
export function blockScaledRiskCached(format: Pick<Format, "name" | "emax" | "maxFinite" | "flushBound">): BlockScaledRisk {
  let hit = cache.get(format.name);
  if (!hit) {
    hit = blockScaledRisk(format, 32);
    cache.set(format.name, hit);
  }
  return hit;
}
