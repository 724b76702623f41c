/**
 * What the loss-scale curves of src/risk/curves.ts are computed from, without their memos: for the window's search
 * (src/scale/window.ts keeps values and bounds itself). Internal to the risk and scale modules: not re-exported by
 * src/risk/index.ts.
 */
import type { MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { ProfileDrawBounds } from "./bounds.js";
import { sameDistribution } from "./profile.js";
import { GRADIENT_ROLES, riskProfile } from "./tensor.js";
import type { RangeLimits } from "./types.js";

/** What a gradient tensor's loss-scale curves are computed from: its start and end profiles (one object when alike). */
export interface LossScaleCurveParts {
  id: string;
  start: MagnitudeProfile;
  end: MagnitudeProfile;
  /** true when start and end have one distribution (end is then start) */
  same: boolean;
  edgeGuessesLog2: { overflow: number; flush: number };
  /** the cheap bounds of {@link LossScaleCurves}, not memoised */
  overflowRiskBounds(log2Scale: number): readonly [number, number];
  flushedEnergyBounds(log2Scale: number): readonly [number, number];
}

/**
 * The parts of the loss-scale curves of every gradient tensor (activation and weight gradients) held in a format,
 * for callers that keep values and bounds themselves (the window's search does): {@link lossScaleCurves} without its
 * memos.
 */
export function lossScaleCurveParts(tensors: readonly TensorPrediction[], limits: RangeLimits): LossScaleCurveParts[] {
  return tensors
    .filter((tensor) => GRADIENT_ROLES.includes(tensor.role) && (tensor.start.rms > 0 || tensor.end.rms > 0))
    .map((tensor) => {
      // the risk functions see profiles of one layout (riskProfile), whatever fields the prediction carried
      const same = sameDistribution(tensor.start, tensor.end);
      const start = riskProfile(tensor.start);
      const end = same ? start : riskProfile(tensor.end);
      // the largest elements sit a few rms above the rms, more for a spread scale; the flushed energy matters
      // once the bound comes within a few binades of the rms (rough: only the search's starting point)
      const rmsLog2 = Math.log2(Math.max(start.rms, end.rms) > 0 ? Math.max(start.rms, end.rms) : 1);
      const lowRmsLog2 = Math.log2(Math.min(start.rms || end.rms, end.rms || start.rms) || 1);
      const spread = Math.max(start.log2Spread, end.log2Spread, 0);
      const edgeGuessesLog2 = {
        overflow: Math.floor(Math.log2(limits.overflowLevel) - rmsLog2 - 2 - 3 * spread),
        flush: Math.ceil(Math.log2(limits.flushBound) - lowRmsLog2 + 4 + 3 * spread),
      };
      return new CurveParts(tensor.id, start, end, same, edgeGuessesLog2, limits);
    });
}

// One tensor's parts: each profile's extreme-draw bounds with its draws' scales taken once (ProfileDrawBounds)
class CurveParts implements LossScaleCurveParts {
  private readonly startBounds: ProfileDrawBounds;
  private readonly endBounds: ProfileDrawBounds;
  constructor(
    readonly id: string,
    readonly start: MagnitudeProfile,
    readonly end: MagnitudeProfile,
    readonly same: boolean,
    readonly edgeGuessesLog2: { overflow: number; flush: number },
    private readonly limits: RangeLimits,
  ) {
    this.startBounds = new ProfileDrawBounds(start);
    this.endBounds = same ? this.startBounds : new ProfileDrawBounds(end);
  }

  // every law scales with the profile, bound included: the profile scaled by 2^k against t is the profile against
  // t·2^−k, exactly (powers of two), without a scaled copy per exponent
  overflowRiskBounds(k: number): readonly [number, number] {
    const level = this.limits.overflowLevel * 2 ** -k;
    const a = this.startBounds.anyAbove(level);
    const b = this.same ? a : this.endBounds.anyAbove(level);
    return [Math.max(a[0], b[0]), Math.max(a[1], b[1])];
  }

  flushedEnergyBounds(k: number): readonly [number, number] {
    const level = this.limits.flushBound * 2 ** -k;
    // the worse of two values lies between the worse of their lower and the worse of their upper bounds
    const a = this.startBounds.energyBelow(level);
    const b = this.same ? a : this.endBounds.energyBelow(level);
    return [Math.max(a[0], b[0]), Math.max(a[1], b[1])];
  }
}
