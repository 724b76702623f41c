import { CheckInputError, loadSpecMeasurements, measuredIssues } from "../check.js";
import { comparePlans } from "../compare.js";
import { renderCompareJson, renderCompareText } from "../report/compare-text.js";
import { formatSpecIssue } from "../spec/index.js";
import type { PrecisionPlan } from "../spec/types.js";
import { loadSpecReporting, reportGraphIssues } from "./load-spec.js";
import { EXIT, raiseExitCode, UserError } from "./errors.js";
import { stdoutStyle, textWidth } from "./terminal.js";

/** `headroom compare SPEC`: several precision plans side by side, ranked. */
export async function runCompare(path: string, flags: { onlySpecPlans?: boolean; json?: boolean }): Promise<void> {
  const loaded = await loadSpecReporting(path);
  if (loaded === undefined) return;
  const spec = loaded.spec;
  const plans: PrecisionPlan[] | undefined = flags.onlySpecPlans ? [spec.precision, ...spec.plans] : undefined;
  // the spec's measured data, read once and judged with in every plan, its problems reported as plain check does
  const measurements = await loadSpecMeasurements(spec);
  // (the lines cli/check.ts's reportMeasuredIssues writes; that module and its renderers are not loaded for compare)
  const problems = measuredIssues(measurements, loaded.locate, spec);
  for (const issue of problems) process.stderr.write(formatSpecIssue(issue) + "\n");
  if (problems.length > 0) raiseExitCode(EXIT.inputError);
  let comparison;
  try {
    comparison = comparePlans(spec, { ...(plans ? { plans } : {}), ...(measurements ? { measurements } : {}) });
  } catch (error) {
    // the network cannot be built: every plan's check says so, the first one first
    if (error instanceof CheckInputError) return reportGraphIssues(loaded, error.issues);
    if (error instanceof RangeError) throw new UserError(`${path}: ${error.message}`);
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
  if (!comparison.outcomes.some((o) => o.trainsSafely)) raiseExitCode(EXIT.findings);
}
