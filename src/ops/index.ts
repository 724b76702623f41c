/** Public exports of src/ops: per-family analytic rules and the activation moments they use. */
export { analyticRules, ruleFor } from "./registry.js";
export { residualBranchSeed } from "./residual/analytic.js";
export { activationMoments, activationKappa, erf, normalCdf } from "./activation/moments.js";
export { attentionRowSums } from "./attention/analytic.js";
export { maxOfNormals } from "./pool/analytic.js";
export { softmaxMoments } from "./activation/analytic.js";
export type * from "./types.js";
