/**
 * The JSON rendering of a check: the whole typed result (README.md, "The JSON result", documents each field).
 * Keys keep the order the result's types declare, so the output is stable from run to run.
 */
import type { CheckResult } from "../risk/index.js";

/**
 * Render a check result as indented JSON followed by a newline. Non-finite numbers (an infinite critical level
 * in binary64) become null, as JSON has no infinity.
 */
export function renderCheckJson(result: CheckResult): string {
  return JSON.stringify(result, (_key, value: unknown) => (typeof value === "number" && !Number.isFinite(value) ? null : value), 2) + "\n";
}
