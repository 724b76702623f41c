// The site, context and profile the operation-hazard tests build: a plan in binary16 with binary32 states and
// accumulation, gradients summed in their own format, one worker, unit-rms Gaussian inputs, each field open to a test's own value.
import type { HazardSite, MagnitudeProfile } from "../../src/magnitude/types.js";
import { DEFAULT_THRESHOLDS, type HazardContext } from "../../src/risk/index.js";
import { BINARY16, BINARY32 } from "./limits.js";

export function profile(partial: Partial<MagnitudeProfile>): MagnitudeProfile {
  return { elements: 1, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0, ...partial };
}

export function context(partial: Partial<HazardContext> = {}): HazardContext {
  return {
    activations: BINARY16,
    gradients: BINARY16,
    optimizerStates: BINARY32,
    accumulate: BINARY32,
    lossScale: 1,
    beta2: 0.999,
    workerGradients: "sum",
    workers: 1,
    thresholds: DEFAULT_THRESHOLDS,
    ...partial,
    // summed in the gradient format unless a test names another, as a plan without gradient-sums is
    gradientSums: partial.gradientSums ?? partial.gradients ?? BINARY16,
  };
}

export function site(partial: Partial<HazardSite> & Pick<HazardSite, "kind">): HazardSite {
  return { layer: "layer", input: profile({}), terms: 1, guarded: false, detail: "test site", ...partial };
}
