/**
 * `check`: a network spec in, a judgement out. Builds the tensor graph, predicts every tensor's magnitudes and
 * judges them against the precision plan (src/risk/judge.ts). Pure; `checkFile` is the thin loader around it.
 */
import { buildGraph, type GraphIssue } from "./graph/index.js";
import { predict } from "./magnitude/index.js";
import { FORMATS } from "./formats/index.js";
import type { Prediction } from "./magnitude/types.js";
import {
  judgePrediction,
  limitsFor,
  lossScaleCurves,
  type CheckOptions,
  type CheckResult,
  type LossScaleWindowSummary,
} from "./risk/index.js";
import { lossScaleWindow } from "./scale/window.js";
import { formatSpecPath, loadSpec, type SpecIssue } from "./spec/index.js";
import type { NetworkSpec, PrecisionPlan } from "./spec/types.js";

/** A spec whose tensor graph cannot be built; `issues` name the spec paths. */
export class CheckInputError extends RangeError {
  readonly issues: GraphIssue[];
  constructor(issues: GraphIssue[]) {
    super(`the spec's network cannot be built: ${issues.map((issue) => issue.message).join("; ")}`);
    this.name = "CheckInputError";
    this.issues = issues;
  }
}

/**
 * Judge a network spec against its precision plan (or the formats given).
 * Throws RangeError for bad options (an unknown plan, a non-positive loss scale) and CheckInputError when the
 * network cannot be built from the spec.
 * @example check(spec).formats.map((f) => [f.format, f.verdict]) // => [["binary16", "fails"], ["binary32", "fits"]]
 */
export function check(spec: NetworkSpec, options: CheckOptions = {}): CheckResult {
  const plan = choosePlan(spec, options.plan);
  const built = buildGraph(spec);
  if (!built.ok) throw new CheckInputError(built.issues);
  const planned = { ...spec, precision: plan };
  const prediction = predict(built.graph, planned);
  const window = options.lossScale === undefined && plan.lossScale === undefined ? searchLossScale(plan, prediction) : undefined;
  return judgePrediction(planned, prediction, window === undefined ? options : { ...options, lossScaleWindow: window });
}

/**
 * Whether the plan's gradients need a loss scale: held in a format with a narrow exponent range (binary16, the
 * 8-bit formats) and, for 8-bit formats, without per-tensor scale factors. bfloat16 and binary32 share binary32's
 * range and are trained unscaled (Kalamkar et al. 2019, from memory, unconfirmed; SCIENCE.md §1.2).
 */
export function needsLossScale(plan: PrecisionPlan): boolean {
  const format = FORMATS[plan.gradients];
  if (format.exponentBits > 5) return false;
  return !(format.bits === 8 && plan.scaling !== "none");
}

/** The loss-scale window for the plan's gradient format (src/scale/window.ts, its default budget and tolerance). */
export function searchLossScale(plan: PrecisionPlan, prediction: Prediction): LossScaleWindowSummary | undefined {
  if (!needsLossScale(plan)) return undefined;
  const curves = lossScaleCurves(prediction.tensors, limitsFor(plan, plan.gradients));
  if (curves.length === 0) return undefined;
  const window = lossScaleWindow(curves);
  return {
    format: plan.gradients,
    lowestLog2: window.lowestLog2,
    highestLog2: window.highestLog2,
    pickLog2: window.pickLog2,
    empty: window.empty,
    upperEdgeSetBy: window.upperEdgeSetBy,
    lowerEdgeSetBy: window.lowerEdgeSetBy,
  };
}

function choosePlan(spec: NetworkSpec, name: string | undefined): PrecisionPlan {
  if (name === undefined || name === spec.precision.name) return spec.precision;
  const found = spec.plans.find((plan) => plan.name === name);
  if (found === undefined) {
    const names = [spec.precision.name, ...spec.plans.map((plan) => plan.name)];
    throw new RangeError(`no plan named "${name}" in the spec; its plans: ${names.join(", ")}`);
  }
  return found;
}

/** The result of {@link checkFile}: a check, or the problems of the spec file, positioned. */
export type CheckFileResult =
  | { ok: true; result: CheckResult; warnings: SpecIssue[] }
  | { ok: false; issues: SpecIssue[] };

/**
 * Load a spec file and check it. Problems of the file or of its network come back as positioned issues
 * (render them with formatSpecIssue); bad options still throw RangeError.
 */
export async function checkFile(path: string, options: CheckOptions = {}): Promise<CheckFileResult> {
  const loaded = await loadSpec(path);
  if (!loaded.ok) return { ok: false, issues: loaded.issues };
  try {
    return { ok: true, result: check(loaded.spec, options), warnings: loaded.warnings };
  } catch (error) {
    if (error instanceof CheckInputError) {
      return {
        ok: false,
        issues: error.issues.map((issue) => ({ ...loaded.locate(issue.path), path: formatSpecPath(issue.path), message: issue.message })),
      };
    }
    throw error;
  }
}
