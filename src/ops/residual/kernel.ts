/**
 * Float64 kernels of the residual family: y = x + multiplier·branch(x) (He et al. 2016, eq. 1, with a constant
 * branch multiplier as in SkipInit/ReZero-style scaling). The branch itself runs layer by layer in the engine;
 * these kernels do the add and split the gradient.
 */

/** y = x + multiplier·branchOutput. */
export function residualForward(x: Float64Array, branchOutput: Float64Array, multiplier: number): Float64Array {
  const y = new Float64Array(x.length);
  for (let i = 0; i < x.length; i++) y[i] = x[i]! + multiplier * branchOutput[i]!;
  return y;
}

/**
 * The gradient arriving at the branch's output is multiplier·dy; the skip path passes dy unchanged, and the
 * engine adds the branch's input gradient to it: dx = dy + d(branch input).
 */
export function residualBackwardToBranch(dy: Float64Array, multiplier: number): Float64Array {
  const d = new Float64Array(dy.length);
  for (let i = 0; i < dy.length; i++) d[i] = multiplier * dy[i]!;
  return d;
}

/** dx = dy (skip path) + the gradient that came back through the branch. */
export function residualBackwardCombine(dy: Float64Array, branchInputGradient: Float64Array): Float64Array {
  const dx = new Float64Array(dy.length);
  for (let i = 0; i < dy.length; i++) dx[i] = dy[i]! + branchInputGradient[i]!;
  return dx;
}
