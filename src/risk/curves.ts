/**
 * How each gradient tensor reacts to a loss scale 2^k: its overflow risk and its flushed energy as functions of
 * k, the input of the loss-scale window (src/scale/window.ts takes objects of this shape).
 */
import type { MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { lossScaleCurveParts } from "./curve-parts.js";
import { energyBelow, probabilityAnyAbove } from "./profile.js";
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

/**
 * The loss-scale curves of every gradient tensor (activation and weight gradients) held in a format. Values are
 * memoised per exponent, as a window search asks for the same exponents of many tensors.
 */
export function lossScaleCurves(tensors: readonly TensorPrediction[], limits: RangeLimits): LossScaleCurves[] {
  return lossScaleCurveParts(tensors, limits).map((parts) => {
    const { start, end, same } = parts;
    const worse = (f: (profile: MagnitudeProfile) => number): number => (same ? f(start) : Math.max(f(start), f(end)));
    // every law scales with the profile: the profile scaled by 2^k against t is the profile against t·2^−k
    const overflow = memoisedCurve(
      (k) => {
        const level = limits.overflowLevel * 2 ** -k;
        return worse((p) => probabilityAnyAbove(p, level));
      },
      (k) => parts.overflowRiskBounds(k),
    );
    const flush = memoisedCurve(
      (k) => {
        const bound = limits.flushBound * 2 ** -k;
        return worse((p) => energyBelow(p, bound));
      },
      (k) => parts.flushedEnergyBounds(k),
    );
    return {
      id: parts.id,
      edgeGuessesLog2: parts.edgeGuessesLog2,
      overflowRisk: overflow.value,
      overflowRiskBounds: overflow.bounds,
      flushedEnergy: flush.value,
      flushedEnergyBounds: flush.bounds,
    };
  });
}

// One curve memoised per exponent, with its cheap bounds memoised too (the exact value twice once it is known).
function memoisedCurve(
  exact: (k: number) => number,
  cheap: (k: number) => readonly [number, number],
): { value(k: number): number; bounds(k: number): readonly [number, number] } {
  const values = new Map<number, number>();
  const bounds = new Map<number, readonly [number, number]>();
  return {
    value: (k) => {
      let value = values.get(k);
      if (value === undefined) {
        value = exact(k);
        values.set(k, value);
      }
      return value;
    },
    bounds: (k) => {
      const value = values.get(k);
      if (value !== undefined) return [value, value];
      let b = bounds.get(k);
      if (b === undefined) {
        b = cheap(k);
        bounds.set(k, b);
      }
      return b;
    },
  };
}
