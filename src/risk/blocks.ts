/**
 * Per-block scaling of 8-bit formats (OCP Microscaling v1.0; Rouhani et al. 2023): each block of 32 consecutive
 * elements shares one power-of-two scale X = 2^(⌊log2 max|V_i|⌋ − emax_elem), and each element is stored as
 * RNE(V_i / X) clamped to ± the element format's largest value (SCIENCE.md §1.4; the conversion rule there is
 * from memory, unconfirmed, and the tests hold this model to a Monte Carlo of the rule itself).
 *
 * Consequences [X, SCIENCE.md §1.4]: a block's maximum can be clipped by up to 2^(emax+1)/max (e4m3: 512/448),
 * and elements far below their block's maximum flush to zero. The clamp belongs to the block conversion itself
 * (OCP MX v1.0 §6 / Rouhani et al. 2023 Alg. 1, "clamping normal numbers", from memory), so that bounded clip is
 * no overflow under either overflow mode; only a block whose scale would pass E8M0's largest, 2^127, leaves its
 * maximum beyond the element range by more than that clip. At the other end a block whose scale would fall below
 * E8M0's smallest, 2^-127, keeps 2^-127 and flushes below 2^-127 times the element format's flush bound.
 */
import { MX_BLOCK, type Format } from "../formats/index.js";
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
  /**
   * magnitudes at or above this, 2^(127 + emax + 1), need a shared exponent past E8M0's largest: their block's scale
   * is clamped to 2^127 and they land at 2^(emax+1) or more, past the element range (overflow, or saturation)
   */
  scaleClampLevel: number;
  /** E8M0's smallest scale, 2^-127: a block whose maximum needs a smaller one keeps this, and flushes below 2^-127 times the element flush bound */
  smallestScale: number;
}

/**
 * Analytic block-scaled conversion of Gaussian-like elements (the scale of the tensor cancels: each block's scale
 * follows its own maximum). Integrates over the distribution of a block's largest magnitude, with the other
 * elements of the block independent and below it.
 * @example blockScaledRisk(FORMATS.e4m3).clippedFraction // => about 0.0086
 */
export function blockScaledRisk(format: Pick<Format, "emax" | "maxFinite" | "flushBound">, blockSize: number = MX_BLOCK.size): BlockScaledRisk {
  if (!(Number.isInteger(blockSize) && blockSize >= 2)) throw new RangeError(`blockSize must be an integer ≥ 2. Value: ${blockSize}`);
  const n = blockSize;
  const totalEnergy = n; // E[Σ Z²] over a block
  const sums = new Float64Array(4);
  blockSums(blockGrid(n), n - 1, format.emax, format.flushBound, format.maxFinite, sums);
  const mass = sums[3] as number;
  return {
    blockSize: n,
    flushedFraction: (sums[0] as number) / mass / n,
    flushedEnergy: (sums[2] as number) / mass / totalEnergy,
    clippedFraction: (sums[1] as number) / mass / n,
    scaleClampLevel: 2 ** (MX_BLOCK.maxExponent + format.emax + 1),
    smallestScale: 2 ** MX_BLOCK.minExponent,
  };
}

// P(|Z| ≤ t) for Z ~ N(0, 1): 2Φ(t) − 1
function below(t: number): number {
  return Math.max(0, 2 * normalCdf(t) - 1);
}

/**
 * The grid of the block maximum u of blockScaledRisk, with what does not depend on the format: the trapezoid weight,
 * P(|Z| ≤ u), the density n·2φ(u)·(2Φ(u) − 1)^(n−1) of the maximum of n |Z|, and ⌊log2 u⌋. Built once per block size
 * and shared by every format (the same expressions, so the same values as computed per format).
 */
interface BlockGrid {
  u: Float64Array;
  weight: Float64Array;
  inside: Float64Array;
  density: Float64Array;
  binade: Float64Array;
}

const grids = new Map<number, BlockGrid>();

function blockGrid(n: number): BlockGrid {
  let grid = grids.get(n);
  if (grid === undefined) {
    // trapezoid on a fine grid of u
    const lo = 1e-3;
    const hi = 9;
    const steps = 3000;
    const h = (hi - lo) / steps;
    grid = {
      u: new Float64Array(steps + 1),
      weight: new Float64Array(steps + 1),
      inside: new Float64Array(steps + 1),
      density: new Float64Array(steps + 1),
      binade: new Float64Array(steps + 1),
    };
    fillBlockGrid(grid, n, lo, h, steps);
    grids.set(n, grid);
  }
  return grid;
}

function fillBlockGrid(grid: BlockGrid, n: number, lo: number, h: number, steps: number): void {
  const others = n - 1;
  for (let i = 0; i <= steps; i++) {
    const u = lo + i * h;
    const inside = below(u);
    grid.u[i] = u;
    grid.weight[i] = (i === 0 || i === steps ? 0.5 : 1) * h;
    grid.inside[i] = inside;
    grid.density[i] = n * 2 * normalPdf(u) * inside ** others;
    grid.binade[i] = Math.floor(Math.log2(u));
  }
}

/**
 * The four trapezoid sums of blockScaledRisk over the grid, into sums[0 … 3]: flushed elements, clipped elements,
 * flushed energy and the mass of the density, kept in `sums` as they are added (a loop optimised while it runs
 * has no type feedback for code after it).
 */
function blockSums(grid: BlockGrid, others: number, emax: number, flushBound: number, maxFinite: number, sums: Float64Array): void {
  const { u: us, weight: weights, inside: insides, density: densities, binade } = grid;
  sums[0] = 0;
  sums[1] = 0;
  sums[2] = 0;
  sums[3] = 0;
  for (let i = 0; i < us.length; i++) {
    const density = densities[i] as number;
    if (!(density > 0)) continue;
    const u = us[i] as number;
    const weight = weights[i] as number;
    const inside = insides[i] as number;
    const X = 2 ** ((binade[i] as number) - emax);
    const flushLevel = X * flushBound;
    const clipLevel = X * maxFinite;
    // the other elements of the block are independent |Z| conditioned below u: a share g(t) = P(|Z| ≤ min(t, u))/P(|Z| ≤ u)
    // of them lies below t, and E[Z²; |Z| ≤ t] = (2Φ(t) − 1) − 2tφ(t) (integration by parts)
    const flushAt = Math.min(flushLevel, u);
    const belowFlush = below(flushAt);
    const flushedHere = others * (inside > 0 ? Math.min(1, belowFlush / inside) : 0);
    const clippedHere = (u > clipLevel ? 1 : 0) + (clipLevel < u ? others * (1 - (inside > 0 ? Math.min(1, below(clipLevel) / inside) : 0)) : 0);
    const energyHere = inside > 0 ? (others * Math.max(0, belowFlush - 2 * flushAt * normalPdf(flushAt))) / inside : 0;
    sums[0] += weight * density * flushedHere;
    sums[1] += weight * density * clippedHere;
    sums[2] += weight * density * energyHere;
    sums[3] += weight * density;
  }
}

const cache = new Map<string, BlockScaledRisk>();

/** {@link blockScaledRisk} for blocks of 32, computed once per format. */
export function blockScaledRiskCached(format: Pick<Format, "name" | "emax" | "maxFinite" | "flushBound">): BlockScaledRisk {
  let hit = cache.get(format.name);
  if (!hit) {
    hit = blockScaledRisk(format, MX_BLOCK.size);
    cache.set(format.name, hit);
  }
  return hit;
}
