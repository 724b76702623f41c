/**
 * Float64 kernels of the flatten family. Row-major storage already lays [batch, c, h, w] out as
 * [batch, c·h·w], so both directions copy the values unchanged; only the shape the graph records changes.
 */

/** y = x, as a new array (the graph gives it the flattened shape). */
export function flattenForward(x: Float64Array): Float64Array {
  return Float64Array.from(x);
}

/** dx = dy, as a new array (the graph gives it the unflattened shape). */
export function flattenBackward(dy: Float64Array): Float64Array {
  return Float64Array.from(dy);
}
