/**
 * What the optimizer steps of a run did, over its draws: the steps skipped because a gradient overflowed and the
 * steps whose update held infinite or NaN values, each counted per draw and taken at the median over draws, as the
 * tensors' measurements are (src/simulate/stats.ts medianStats).
 */
import { median } from "./stats.js";
import type { SimulationResult, StepRecord } from "./types.js";

/** The steps of one run that diverged, median over draws, and the weights whose updates were not finite. */
export interface StepTrouble {
  /** steps skipped for an overflowed gradient (median over draws of the count per draw) */
  skipped: number;
  /** steps with an update element infinite or NaN (median over draws of the count per draw) */
  nonFiniteUpdates: number;
  /** the first draw's skipped steps, by number */
  skippedSteps: number[];
  /** the first draw's weights with a non-finite update, with the largest share over its steps */
  nonFiniteWeights: { weight: string; share: number }[];
}

function hasNonFiniteUpdate(record: StepRecord): boolean {
  return Object.values(record.nonFiniteUpdates).some((share) => share > 0);
}

/** How the run's optimizer steps went wrong, if they did (all zero without steps). */
export function stepTrouble(result: Pick<SimulationResult, "history">): StepTrouble {
  const first = result.history[0] ?? [];
  const worst = new Map<string, number>();
  for (const record of first) {
    for (const [weight, share] of Object.entries(record.nonFiniteUpdates)) {
      if (share > 0) worst.set(weight, Math.max(worst.get(weight) ?? 0, share));
    }
  }
  return {
    skipped: result.history.length === 0 ? 0 : median(result.history.map((draw) => draw.filter((r) => r.skipped).length)),
    nonFiniteUpdates: result.history.length === 0 ? 0 : median(result.history.map((draw) => draw.filter(hasNonFiniteUpdate).length)),
    skippedSteps: first.filter((r) => r.skipped).map((r) => r.step),
    nonFiniteWeights: [...worst].map(([weight, share]) => ({ weight, share })),
  };
}
