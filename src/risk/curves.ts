/**
 * How each gradient tensor reacts to a loss scale 2^k: its overflow risk and its flushed energy as functions of
 * k, the input of the loss-scale window (src/scale/window.ts takes objects of this shape).
 */
import type { TensorPrediction } from "../magnitude/types.js";
import { energyBelowBounds } from "./bounds.js";
import { energyBelow, probabilityAnyAbove, scaleProfile } from "./profile.js";
import { GRADIENT_ROLES } from "./tensor.js";
import type { RangeLimits } from "./types.js";

/** A gradient tensor's response to the loss scale 2^k, at the worse of the start and the end of the horizon. */
export interface LossScaleCurves {
  id: string;
  /** probability that at least one element overflows in one step at scale 2^k (nondecreasing in k) */
  overflowRisk(log2Scale: number): number;
  /** share of the tensor's squared norm flushed to zero at scale 2^k (nonincreasing in k) */
  flushedEnergy(log2Scale: number): number;
  /** cheap bounds [low, high] on flushedEnergy (the exact value twice once it is known) */
  flushedEnergyBounds(log2Scale: number): readonly [number, number];
}

/**
 * The loss-scale curves of every gradient tensor (activation and weight gradients) held in a format. Values are
 * memoised per exponent, as a window search asks for the same exponents of many tensors.
 */
export function lossScaleCurves(tensors: readonly TensorPrediction[], limits: RangeLimits): LossScaleCurves[] {
  return tensors
    .filter((tensor) => GRADIENT_ROLES.includes(tensor.role) && (tensor.start.rms > 0 || tensor.end.rms > 0))
    .map((tensor) => {
      const overflow = new Map<number, number>();
      const flush = new Map<number, number>();
      const worse = (k: number, f: (profile: TensorPrediction["start"]) => number): number =>
        Math.max(f(scaleProfile(tensor.start, 2 ** k)), f(scaleProfile(tensor.end, 2 ** k)));
      return {
        id: tensor.id,
        overflowRisk(k: number): number {
          let value = overflow.get(k);
          if (value === undefined) {
            value = worse(k, (p) => probabilityAnyAbove(p, limits.overflowLevel));
            overflow.set(k, value);
          }
          return value;
        },
        flushedEnergy(k: number): number {
          let value = flush.get(k);
          if (value === undefined) {
            value = worse(k, (p) => energyBelow(p, limits.flushBound));
            flush.set(k, value);
          }
          return value;
        },
        flushedEnergyBounds(k: number): readonly [number, number] {
          const value = flush.get(k);
          if (value !== undefined) return [value, value];
          // the worse of two values lies between the worse of their lower and the worse of their upper bounds
          const start = energyBelowBounds(scaleProfile(tensor.start, 2 ** k), limits.flushBound);
          const end = energyBelowBounds(scaleProfile(tensor.end, 2 ** k), limits.flushBound);
          return [Math.max(start[0], end[0]), Math.max(start[1], end[1])];
        },
      };
    });
}
