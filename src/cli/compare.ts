import { comparePlans } from "../compare.js";
import { renderCompareJson, renderCompareText } from "../report/compare-text.js";
import { colorEnabled, createStyle } from "../report/style.js";
import { formatSpecIssue, formatSpecPath } from "../spec/index.js";
import type { PrecisionPlan } from "../spec/types.js";
import { loadSpecReporting } from "./load-spec.js";
import { EXIT, raiseExitCode, UserError } from "./errors.js";
import { buildGraph } from "../graph/index.js";

/** `headroom compare SPEC`: several precision plans side by side, ranked. */
export async function runCompare(path: string, flags: { onlySpecPlans?: boolean; json?: boolean }): Promise<void> {
  const loaded = await loadSpecReporting(path);
  if (loaded === undefined) return;
  const spec = loaded.spec;
  const built = buildGraph(spec);
  if (!built.ok) {
    for (const issue of built.issues) {
      process.stderr.write(formatSpecIssue({ ...loaded.locate(issue.path), path: formatSpecPath(issue.path), message: issue.message }) + "\n");
    }
    raiseExitCode(EXIT.inputError);
    return;
  }
  const plans: PrecisionPlan[] | undefined = flags.onlySpecPlans ? [spec.precision, ...spec.plans] : undefined;
  let comparison;
  try {
    comparison = comparePlans(spec, plans ? { plans } : {});
  } catch (error) {
    if (error instanceof RangeError) throw new UserError(`${path}: ${error.message}`);
    throw error;
  }
  process.stdout.write(
    flags.json
      ? renderCompareJson(comparison)
      : renderCompareText(comparison, {
          style: createStyle(colorEnabled(process.stdout, process.env)),
          width: Math.max(80, Math.min(140, process.stdout.columns ?? 100)),
        }),
  );
  if (!comparison.outcomes.some((o) => o.trainsSafely)) raiseExitCode(EXIT.findings);
}
