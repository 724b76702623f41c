/**
 * Float64 kernels of the embedding family: a table lookup [vocabulary, width] scaled by a constant multiplier.
 */

/** y[r, :] = multiplier · table[ids[r], :]; ids outside [0, vocabulary) give a row of NaN (never throws). */
export function embeddingForward(
  ids: ArrayLike<number>,
  table: Float64Array,
  rows: number,
  vocabulary: number,
  width: number,
  multiplier: number,
): Float64Array {
  const y = new Float64Array(rows * width);
  for (let r = 0; r < rows; r++) {
    const id = ids[r]!;
    if (!(Number.isInteger(id) && id >= 0 && id < vocabulary)) {
      y.fill(NaN, r * width, (r + 1) * width);
      continue;
    }
    const src = id * width;
    const dst = r * width;
    for (let j = 0; j < width; j++) y[dst + j] = multiplier * table[src + j]!;
  }
  return y;
}

/** dTable[id, :] = multiplier · Σ over rows with that id of dy[r, :] (rows that never appear get zero). */
export function embeddingBackward(
  ids: ArrayLike<number>,
  dy: Float64Array,
  rows: number,
  vocabulary: number,
  width: number,
  multiplier: number,
): Float64Array {
  const dTable = new Float64Array(vocabulary * width);
  for (let r = 0; r < rows; r++) {
    const id = ids[r]!;
    if (!(Number.isInteger(id) && id >= 0 && id < vocabulary)) continue;
    const dst = id * width;
    const src = r * width;
    for (let j = 0; j < width; j++) dTable[dst + j] = dTable[dst + j]! + multiplier * dy[src + j]!;
  }
  return dTable;
}
