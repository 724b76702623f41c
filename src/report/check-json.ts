/**
 * The JSON rendering of a check: the whole typed result (README.md, "The JSON result", documents each field).
 * Keys keep the order the result's types declare, so the output is stable from run to run.
 */
import type { CheckResult } from "../risk/index.js";

/**
 * Render a check result as indented JSON followed by a newline. Non-finite numbers (an infinite critical level
 * in binary64) become null, as JSON has no infinity: JSON.stringify writes them so itself (ECMA-262,
 * SerializeJSONProperty: a number that is not finite is serialized as "null"), so no replacer is called for each of
 * the hundreds of thousands of values a large check holds.
 */
export function renderCheckJson(result: CheckResult): string {
  return JSON.stringify(result, null, 2) + "\n";
}
