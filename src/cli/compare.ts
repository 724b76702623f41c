import { CheckInputError } from "../check.js";
import { comparePlans, expectedToTrain } from "../compare.js";
import { PredictionRangeError } from "../magnitude/range.js";
import { renderCompareJson, renderCompareText } from "../report/compare-text.js";
import type { PrecisionPlan } from "../spec/types.js";
import { loadMeasuredNetwork, loadSpecReporting, reportGraphIssues } from "./load-spec.js";
import { EXIT, raiseExitCode } from "./errors.js";
import { stdoutStyle, textWidth } from "./terminal.js";

/** `headroom compare SPEC`: several precision plans side by side, ranked. */
export async function runCompare(path: string, flags: { onlySpecPlans?: boolean; json?: boolean }): Promise<void> {
  const loaded = await loadSpecReporting(path);
  if (loaded === undefined) return;
  const spec = loaded.spec;
  const plans: PrecisionPlan[] | undefined = flags.onlySpecPlans ? [spec.precision, ...spec.plans] : undefined;
  // the spec's measured data, read once and judged with in every plan, its problems reported as plain check does
  const network = await loadMeasuredNetwork(loaded);
  let comparison;
  try {
    comparison = comparePlans(spec, { ...(plans ? { plans } : {}), measurements: network });
  } catch (error) {
    // the network cannot be built: every plan's check says so, the first one first
    if (error instanceof CheckInputError) return reportGraphIssues(loaded, error.issues);
    // values the prediction cannot carry in binary64, positioned; any other error is headroom's own (exit code 3)
    if (error instanceof PredictionRangeError) return reportGraphIssues(loaded, error.issues);
    throw error;
  }
  process.stdout.write(
    flags.json
      ? renderCompareJson(comparison)
      : renderCompareText(comparison, {
          style: stdoutStyle(),
          width: textWidth(),
        }),
  );
  if (!comparison.outcomes.some(expectedToTrain)) raiseExitCode(EXIT.findings);
}
