/**
 * How each gradient tensor reacts to a loss scale 2^k: its overflow risk and its flushed energy as functions of
 * k, the input of the loss-scale window (src/scale/window.ts takes objects of this shape).
 */
import type { MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { energyBelowBounds, probabilityAnyAboveBounds } from "./bounds.js";
import { energyBelow, probabilityAnyAbove, sameDistribution } from "./profile.js";
import { GRADIENT_ROLES, riskProfile } from "./tensor.js";
import type { RangeLimits } from "./types.js";

/** A gradient tensor's response to the loss scale 2^k, at the worse of the start and the end of the horizon. */
export interface LossScaleCurves {
  id: string;
  /** probability that at least one element overflows in one step at scale 2^k (nondecreasing in k) */
  overflowRisk(log2Scale: number): number;
  /** share of the tensor's squared norm flushed to zero at scale 2^k (nonincreasing in k) */
  flushedEnergy(log2Scale: number): number;
  /** cheap bounds [low, high] on overflowRisk (the exact value twice once it is known) */
  overflowRiskBounds(log2Scale: number): readonly [number, number];
  /** cheap bounds [low, high] on flushedEnergy (the exact value twice once it is known) */
  flushedEnergyBounds(log2Scale: number): readonly [number, number];
  /** rough guesses of the exponents where this tensor's overflow and flushing reach their limits (search starts) */
  edgeGuessesLog2: { overflow: number; flush: number };
}

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
      return {
        id: tensor.id,
        start,
        end,
        same,
        edgeGuessesLog2,
        // every law scales with the profile, bound included: the profile scaled by 2^k against t is the profile
        // against t·2^−k, exactly (powers of two), without a scaled copy per exponent
        overflowRiskBounds(k: number): readonly [number, number] {
          const level = limits.overflowLevel * 2 ** -k;
          const a = probabilityAnyAboveBounds(start, level);
          const b = same ? a : probabilityAnyAboveBounds(end, level);
          return [Math.max(a[0], b[0]), Math.max(a[1], b[1])];
        },
        flushedEnergyBounds(k: number): readonly [number, number] {
          const level = limits.flushBound * 2 ** -k;
          // the worse of two values lies between the worse of their lower and the worse of their upper bounds
          const a = energyBelowBounds(start, level);
          const b = same ? a : energyBelowBounds(end, level);
          return [Math.max(a[0], b[0]), Math.max(a[1], b[1])];
        },
      };
    });
}

/**
 * The loss-scale curves of every gradient tensor (activation and weight gradients) held in a format. Values are
 * memoised per exponent, as a window search asks for the same exponents of many tensors.
 */
export function lossScaleCurves(tensors: readonly TensorPrediction[], limits: RangeLimits): LossScaleCurves[] {
  return lossScaleCurveParts(tensors, limits).map((parts) => {
    const { start, end, same } = parts;
    const overflow = new Map<number, number>();
    const flush = new Map<number, number>();
    const flushBounds = new Map<number, readonly [number, number]>();
    const overflowBounds = new Map<number, readonly [number, number]>();
    const worse = (f: (profile: MagnitudeProfile) => number): number => (same ? f(start) : Math.max(f(start), f(end)));
    return {
      id: parts.id,
      edgeGuessesLog2: parts.edgeGuessesLog2,
      overflowRisk(k: number): number {
        let value = overflow.get(k);
        if (value === undefined) {
          const level = limits.overflowLevel * 2 ** -k;
          value = worse((p) => probabilityAnyAbove(p, level));
          overflow.set(k, value);
        }
        return value;
      },
      overflowRiskBounds(k: number): readonly [number, number] {
        const value = overflow.get(k);
        if (value !== undefined) return [value, value];
        let bounds = overflowBounds.get(k);
        if (bounds === undefined) {
          bounds = parts.overflowRiskBounds(k);
          overflowBounds.set(k, bounds);
        }
        return bounds;
      },
      flushedEnergy(k: number): number {
        let value = flush.get(k);
        if (value === undefined) {
          const bound = limits.flushBound * 2 ** -k;
          value = worse((p) => energyBelow(p, bound));
          flush.set(k, value);
        }
        return value;
      },
      flushedEnergyBounds(k: number): readonly [number, number] {
        const value = flush.get(k);
        if (value !== undefined) return [value, value];
        let bounds = flushBounds.get(k);
        if (bounds === undefined) {
          bounds = parts.flushedEnergyBounds(k);
          flushBounds.set(k, bounds);
        }
        return bounds;
      },
    };
  });
}
