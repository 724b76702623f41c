/**
 * Products of many per-layer factors, kept in log space so that a long chain (1.5^100, 0.8^100,
 * 2^-1000) neither overflows nor underflows on the way (the ledger of DESIGN.md §2).
 */

/** A product held as its base-2 logarithm, with the value it stands for. */
export interface LogProduct {
  /** Σ log2 |f_i| */
  readonly log2: number;
  /** ±2^log2 (±Infinity or ±0 when outside binary64; the sign is the product of the signs) */
  readonly value: number;
}

/**
 * Product of `factors` accumulated as Σ log2|f_i|, so intermediate products never overflow or
 * underflow; the sign is tracked separately. A zero factor gives log2 = −∞ and value 0; NaN propagates.
 */
export function logProduct(factors: Iterable<number>): LogProduct {
  let log2 = 0;
  let negative = false;
  for (const f of factors) {
    if (f < 0) negative = !negative;
    log2 += Math.log2(Math.abs(f));
  }
  const magnitude = Math.pow(2, log2);
  return { log2, value: negative ? -magnitude : magnitude };
}

/** x^n for x > 0 through exp(n·ln x): one rounding in ln x scaled by n, no repeated products. */
export function powerLogSpace(x: number, n: number): number {
  return Math.exp(n * Math.log(x));
}
