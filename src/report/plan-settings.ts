/** A precision plan's conversion settings in words, for every renderer that names the plan. Pure. */
import { FORMATS } from "../formats/index.js";
import type { PrecisionPlan } from "../spec/types.js";

/**
 * The plan's conversion settings that move numbers, in words ("8-bit with per-tensor scale factors, saturating on
 * overflow", "subnormals flushed to zero"); "" when there are none to tell. Every output names them, so two plans
 * differing only in them read apart.
 */
export function planSettings(plan: PrecisionPlan): string {
  const eightBit = [plan.activations, plan.weights, plan.gradients, plan.optimizerStates].some((name) => FORMATS[name].bits === 8);
  return [
    ...(eightBit
      ? [
          `8-bit ${SCALING_WORDS[plan.scaling]}`,
          plan.overflow === "saturate" ? "saturating on overflow" : "infinity or NaN on overflow",
        ]
      : []),
    ...(plan.flushSubnormals ? ["subnormals flushed to zero"] : []),
  ].join(", ");
}

const SCALING_WORDS: Record<PrecisionPlan["scaling"], string> = {
  none: "without scale factors",
  tensor: "with per-tensor scale factors",
  block: "with per-block scale factors",
};
