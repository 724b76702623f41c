/**
 * A batch worker's check of one spec with its measured data: unreadable or unusable measured data is an input error
 * at the spec's `measured` section, as `headroom check` makes it (exit code 2); otherwise the check's summary row.
 */
import { check, loadSpecMeasurements, measuredNetwork } from "../check.js";
import type { Measurements } from "../measure/index.js";
import { summarizeCheck } from "../report/summary.js";
import type { CheckOptions } from "../risk/index.js";
import type { NetworkSpec, SpecPath } from "../spec/types.js";
import type { SpecSummary } from "./types.js";

/** Unreadable or unusable measured data: an input error at the spec's `measured` section, as `headroom check` makes it (exit code 2). */
export class MeasuredDataError extends RangeError {
  readonly issues: { path: SpecPath; message: string }[];
  constructor(problems: readonly string[]) {
    super(`the measured data cannot be read: ${problems.join("; ")}`);
    this.name = "MeasuredDataError";
    this.issues = problems.map((message) => ({ path: ["measured"], message }));
  }
}

/**
 * Check a spec with its measured data, read through `cache` (variants of one spec share a reading). The graph is
 * built and the weights matched once, for the problems and the check.
 */
export async function checkMeasuredSpec(spec: NetworkSpec, options: CheckOptions, cache: Map<string, Promise<Measurements>>): Promise<SpecSummary> {
  const measurements = await loadSpecMeasurements(spec, cache);
  if (measurements === undefined) return summarizeCheck(check(spec, options));
  const network = measuredNetwork(spec, measurements);
  // a weight of this spec's network (a variant may change a width) that its matched tensor does not fit counts too
  const problems = [...measurements.problems, ...network.weightProblems];
  if (problems.length > 0) throw new MeasuredDataError(problems);
  return summarizeCheck(check(spec, options, network));
}
