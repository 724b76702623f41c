/**
 * Float64 kernels of the dropout family (training mode): each element is kept with probability 1 − rate and
 * scaled by 1/(1 − rate), so the expected value is unchanged ("inverted" dropout, common practice; Srivastava
 * et al. 2014 describe the equivalent test-time scaling). The mask is drawn from an injected random source.
 */

/** Draw a mask: 0 with probability `rate`, else 1/(1 − rate). `random` returns uniform values in [0, 1). */
export function dropoutMask(length: number, rate: number, random: () => number): Float64Array {
  const mask = new Float64Array(length);
  const keep = 1 / (1 - rate);
  for (let i = 0; i < length; i++) mask[i] = random() < rate ? 0 : keep;
  return mask;
}

/** y = x ⊙ mask. */
export function dropoutForward(x: Float64Array, mask: Float64Array): Float64Array {
  const y = new Float64Array(x.length);
  for (let i = 0; i < x.length; i++) y[i] = x[i]! * mask[i]!;
  return y;
}

/** dx = dy ⊙ mask. */
export function dropoutBackward(dy: Float64Array, mask: Float64Array): Float64Array {
  return dropoutForward(dy, mask);
}
