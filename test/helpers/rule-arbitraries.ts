import fc from "fast-check";

/** Correlations on a grid from −1.25 to 1.25 (past ±1 the rules clamp them), or absent (each reader's default). */
export const correlation = fc.oneof(fc.constant(undefined), fc.integer({ min: -100, max: 100 }).map((k) => k / 80));

/** Second moments 1.375·2^k, k from −20 to 10. */
export const moment = fc.integer({ min: -20, max: 10 }).map((k) => 2 ** k * 1.375);
