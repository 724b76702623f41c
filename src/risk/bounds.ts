/**
 * Cheap bounds on the draw integrals of src/risk/profile.ts, for searches that only compare a share with a
 * tolerance (the loss-scale window, the dynamic-scale simulation). Internal to the risk and scale modules: not
 * re-exported by src/risk/index.ts.
 */
import type { MagnitudeProfile } from "../magnitude/types.js";
import { isConstantLike, isEmpty, lawOverDrawsBounds } from "./laws.js";
import { energyBelow, fractionBelow, probabilityAnyAbove } from "./profile.js";

/**
 * Bounds [low, high] on {@link energyBelow}(profile, t) from the integrand at the extreme draws and at ±4
 * standard deviations (it is monotone in the scale): four evaluations instead of the integral, for searches that
 * only compare the share with a tolerance.
 */
export function energyBelowBounds(profile: MagnitudeProfile, t: number): [number, number] {
  if (isEmpty(profile)) return [0, 0];
  if (isConstantLike(profile)) {
    const value = fractionBelow(profile, t);
    return [value, value];
  }
  // shares are compared with tolerances of 1e-3 and more: the inner bounds decide most of them
  return lawOverDrawsBounds(profile, "energy-below", t, true);
}

/** Whether {@link energyBelow}(profile, t) exceeds `level`, integrating only when the bounds do not tell. */
export function energyBelowExceeds(profile: MagnitudeProfile, t: number, level: number): boolean {
  const [low, high] = energyBelowBounds(profile, t);
  if (high <= level) return false;
  if (low > level) return true;
  return energyBelow(profile, t) > level;
}

/**
 * Bounds [low, high] on {@link probabilityAnyAbove}(profile, t) from the integrand at the two extreme draws (it is
 * monotone in the scale).
 */
export function probabilityAnyAboveBounds(profile: MagnitudeProfile, t: number): [number, number] {
  if (isEmpty(profile) || isConstantLike(profile)) {
    const value = probabilityAnyAbove(profile, t);
    return [value, value];
  }
  return lawOverDrawsBounds(profile, "any-above", t, false);
}
