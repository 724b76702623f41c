/**
 * Adam's second moments and its epsilon: the count of zero second moments per step, the one rule that grades a
 * vanishing epsilon, the one rule that grades flushed second moments, and the gradients both are judged at.
 * Shared by the operation hazards (./hazards.ts) and the optimizer check (src/scale/optimizer.ts) so that one
 * problem gets one severity. Not part of the public API.
 */
import { withProfiles } from "../magnitude/copy.js";
import type { HazardSite, MagnitudeProfile, Prediction, TensorPrediction } from "../magnitude/types.js";
import { fractionBelow, nonzeroElements, scaleProfile } from "./profile.js";
import { FORMATS, roundTo } from "../formats/index.js";
import type { RangeLimits, RiskThresholds, Verdict } from "./types.js";

// The stored second moment (1 − β2)·g² flushes for |g| ≤ √(flush bound/(1 − β2)): about 5.5e-3 in binary16 with
// β2 = 0.999 (DESIGN.md §5 item 5). The gradient is without the loss scale (removed before the optimizer).
// Gives the gradient bound and the share of nonzero elements below it.
/**
 * Adam's ε as the state format stores it: rounded (IEEE 754-2019 §4.3.1), then flushed where the limits flush
 * subnormals (SCIENCE.md §1.2), so the smallest normal is kept. 0 when it vanishes. One rule for hazard and optimizer.
 */
export function storedEpsilon(limits: RangeLimits, epsilon: number): number {
  return roundTo(FORMATS[limits.format], epsilon, { flushSubnormals: limits.smallest === limits.minNormal });
}

export function flushedSecondMoments(gradient: MagnitudeProfile, flushBound: number, beta2: number): { bound: number; share: number } {
  const bound = Math.sqrt(flushBound / Math.max(1e-300, 1 - beta2));
  return { bound, share: gradient.rms > 0 ? fractionBelow(gradient, bound) : 0 };
}

/** Second moments expected to be zero in one step: the exactly zero gradients and those whose (1 − β2)·g² flushes. */
export function zeroSecondMoments(gradient: MagnitudeProfile, flushBound: number, beta2: number): number {
  return gradient.elements * gradient.zeroFraction + nonzeroElements(gradient) * flushedSecondMoments(gradient, flushBound, beta2).share;
}

/**
 * An epsilon that rounds to zero: at risk, and fails when at least one zero second moment is expected per step,
 * since m/(√v + ε) then divides by zero somewhere every step (Kingma & Ba 2015, the update; README.md thresholds).
 */
export function vanishedEpsilonVerdict(zerosPerStep: number): Verdict {
  return zerosPerStep >= 1 ? "fails" : "at-risk";
}

/**
 * Flushed second moments, graded by the shares of the thresholds table (README.md; the caller's overrides
 * included): above `flushedFails` it fails, above `flushedAtRisk` it is at risk (NaN fits). Gives the threshold
 * crossed (0 when it fits).
 */
export function flushedSecondMomentsVerdict(
  share: number,
  thresholds: Pick<RiskThresholds, "flushedAtRisk" | "flushedFails">,
): { verdict: Verdict; threshold: number } {
  if (share > thresholds.flushedFails) return { verdict: "fails", threshold: thresholds.flushedFails };
  if (share > thresholds.flushedAtRisk) return { verdict: "at-risk", threshold: thresholds.flushedAtRisk };
  return { verdict: "fits", threshold: 0 };
}

/**
 * The gradients Adam's epsilon (`optimizer-constant`) or second moment (`optimizer-second-moment`) is judged at,
 * and the layer named: the prediction's own site of that kind when it has one (its input, and its input at the
 * end when it has one), else the weight gradient of smallest rms (start or end), whose second moments flush most
 * — the site src/risk/judge.ts adds for the training setup — among `weightGradients` (the prediction's unless given:
 * the clipped ones, as the optimizer's states see them).
 */
export function stateSiteGradients(
  prediction: Prediction,
  kind: "optimizer-constant" | "optimizer-second-moment",
  weightGradients: readonly TensorPrediction[] = weightGradientsOf(prediction),
): { layer: string; gradients: MagnitudeProfile[] } {
  const hazards = prediction.hazards;
  for (let i = 0; i < hazards.length; i++) {
    const site = hazards[i] as HazardSite;
    if (site.kind === kind) return { layer: site.layer, gradients: site.end === undefined ? [site.input] : [site.input, site.end.input] };
  }
  const pick = byRms(weightGradients, "smallest");
  return {
    layer: pick?.tensor.layer ?? "optimizer",
    gradients: [pick?.profile ?? { elements: 1, zeroFraction: 0, shape: "constant", rms: 0, log2Spread: 0 }],
  };
}

/** The tensor (and its start or end profile) of largest or smallest positive rms. */
export function byRms(tensors: readonly TensorPrediction[], pick: "largest" | "smallest"): { tensor: TensorPrediction; profile: MagnitudeProfile } | undefined {
  let bestTensor: TensorPrediction | undefined;
  let bestProfile: MagnitudeProfile | undefined;
  let bestRms = 0;
  for (let i = 0; i < tensors.length; i++) {
    const tensor = tensors[i] as TensorPrediction;
    // the start profile, then the end one
    for (let k = 0; k < 2; k++) {
      const profile = k === 0 ? tensor.start : tensor.end;
      const rms = profile.rms;
      if (!(rms > 0)) continue;
      if (bestProfile === undefined || (pick === "largest" ? rms > bestRms : rms < bestRms)) {
        bestTensor = tensor;
        bestProfile = profile;
        bestRms = rms;
      }
    }
  }
  return bestTensor === undefined || bestProfile === undefined ? undefined : { tensor: bestTensor, profile: bestProfile };
}

/** The expected zero second moments per step across the network, at one side of the horizon, and the tensor giving most. */
export interface NetworkZeroSecondMoments {
  perStep: number;
  at: "start" | "end";
  /** the id of the weight gradient contributing most, its layer, its profile at this side and its count ("", "",
   * undefined and 0 without weight gradients or zero second moments) */
  top: string;
  topLayer: string;
  topProfile: MagnitudeProfile | undefined;
  topCount: number;
}

/**
 * Zero second moments per step summed over every weight gradient at the start or the end of the horizon: each
 * element of the network is one term of Adam's update, so a division by zero is expected in a step once the sum
 * over all of them reaches 1 (expectations add; Kingma & Ba 2015, the update), not only within one tensor.
 */
export function networkZeroSecondMomentsAt(
  weightGradients: readonly TensorPrediction[],
  at: "start" | "end",
  flushBound: number,
  beta2: number,
): NetworkZeroSecondMoments {
  let perStep = 0;
  let top: TensorPrediction | undefined;
  let topCount = 0;
  for (let i = 0; i < weightGradients.length; i++) {
    const tensor = weightGradients[i] as TensorPrediction;
    const count = zeroSecondMoments(at === "start" ? tensor.start : tensor.end, flushBound, beta2);
    perStep += count;
    if (count > topCount) {
      top = tensor;
      topCount = count;
    }
  }
  return top === undefined
    ? { perStep, at, top: "", topLayer: "", topProfile: undefined, topCount }
    : { perStep, at, top: top.id, topLayer: top.layer, topProfile: at === "start" ? top.start : top.end, topCount };
}

/** The worse (larger) of the start and end network-wide counts; the start on a tie, as a hazard's start/end choice. */
export function networkZeroSecondMoments(weightGradients: readonly TensorPrediction[], flushBound: number, beta2: number): NetworkZeroSecondMoments {
  const start = networkZeroSecondMomentsAt(weightGradients, "start", flushBound, beta2);
  const end = networkZeroSecondMomentsAt(weightGradients, "end", flushBound, beta2);
  return end.perStep > start.perStep ? end : start;
}

/** The weight gradients of a prediction, in its order. */
export function weightGradientsOf(prediction: Prediction): TensorPrediction[] {
  const out: TensorPrediction[] = [];
  for (let i = 0; i < prediction.tensors.length; i++) {
    const tensor = prediction.tensors[i] as TensorPrediction;
    if (tensor.role === "weight-gradient") out.push(tensor);
  }
  return out;
}

/** Where `clip-norm` scales the gradients down, at one side of the horizon: the factor (below 1) and the global norm. */
export interface GradientClip {
  factor: number;
  globalNorm: number;
}

/**
 * Clipping to a global norm c multiplies every gradient by c/‖g‖ when ‖g‖ > c (common practice), before the optimizer
 * step: its states and its update see the clipped gradients, whatever the optimizer. ‖g‖² is predicted as the sum
 * over the weight gradients of nonzero elements × their second moment (rms of the nonzero elements at the median
 * draw), at each side of the horizon. Null when nothing is clipped.
 */
export function gradientClips(
  clipNorm: number | undefined,
  weightGradients: readonly TensorPrediction[],
): Partial<Record<"start" | "end", GradientClip>> | null {
  if (clipNorm === undefined) return null;
  const clip: Partial<Record<"start" | "end", GradientClip>> = {};
  for (let k = 0; k < 2; k++) {
    const side = k === 0 ? "start" : "end";
    let squares = 0;
    for (let i = 0; i < weightGradients.length; i++) {
      const p = (weightGradients[i] as TensorPrediction)[side];
      squares += nonzeroElements(p) * p.rms * p.rms;
    }
    const norm = Math.sqrt(squares);
    if (norm > clipNorm) clip[side] = { factor: clipNorm / norm, globalNorm: norm };
  }
  return clip.start === undefined && clip.end === undefined ? null : clip;
}

/**
 * The weight gradients as the optimizer's states see them: multiplied by the clip factor of each side where
 * `clip-norm` clips (the same tensors when it clips nowhere). Adam's second moments and its epsilon are judged on
 * these, by the hazards and the optimizer check alike.
 */
export function clippedWeightGradients(weightGradients: readonly TensorPrediction[], clipNorm: number | undefined): readonly TensorPrediction[] {
  return clippedBy(weightGradients, gradientClips(clipNorm, weightGradients));
}

/** {@link clippedWeightGradients} with the clip already worked out by {@link gradientClips}. */
export function clippedBy(weightGradients: readonly TensorPrediction[], clip: ReturnType<typeof gradientClips>): readonly TensorPrediction[] {
  if (clip === null) return weightGradients;
  const out: TensorPrediction[] = [];
  for (let i = 0; i < weightGradients.length; i++) {
    const t = weightGradients[i] as TensorPrediction;
    out.push(withProfiles(t, scaleProfile(t.start, clip.start?.factor ?? 1), scaleProfile(t.end, clip.end?.factor ?? 1)));
  }
  return out;
}

/** Whether the prediction carries a hazard site of this kind itself (the check then adds none for it). */
export function hasSite(sites: readonly HazardSite[], kind: HazardSite["kind"]): boolean {
  for (let i = 0; i < sites.length; i++) if ((sites[i] as HazardSite).kind === kind) return true;
  return false;
}
