import { evaluateText, readSpecText } from "../batch/evaluate.js";
import { textVarier } from "../batch/vary.js";
import { check, loadSpecMeasurements, measuredIssues, measuredNetwork, type CheckAnswer, type CheckAnswerOptions } from "../check.js";
import type { Measurements } from "../measure/index.js";
import { formatSpecIssue, specJsonSchema } from "../spec/index.js";
import { judgeOptions, type JudgeFlags } from "./check.js";
import { reportMeasuredIssues } from "./load-spec.js";
import { EXIT, raiseExitCode } from "./errors.js";
import { variantsFromOptions } from "./shared.js";

/**
 * `check --vary`: check every variant of one spec. The file is read once and each variant applied to its text in
 * memory. A variant whose spec is invalid (or whose key does not exist) is reported on stderr with its position in
 * the file and exit code 2; the others are checked with the spec's measured data as a plain check would be, the data
 * read once for all variants that share the `measured` section (its problems reported once, exit code 2; a measured
 * weight that a variant's network cannot use is reported for that variant). Resolves to the checked variants in order.
 */
export async function checkVariants(
  path: string,
  options: readonly string[],
  flags: JudgeFlags,
): Promise<{ variant: string; result: CheckAnswer }[]> {
  const variants = variantsFromOptions(options);
  const checkOptions: CheckAnswerOptions = judgeOptions(flags);
  // read as a plain check reads a spec (the same messages for a missing file, a folder, a wrong extension)
  const text = await readSpecText(path);
  if (typeof text !== "string") {
    // a file that cannot be read is no variant's problem: said once, as a plain check says it
    process.stderr.write(`${text.error.message}\n`);
    raiseExitCode(text.error.kind === "internal" ? EXIT.internal : EXIT.inputError);
    return [];
  }
  const vary = textVarier(text, specJsonSchema());
  const measuredCache = new Map<string, Promise<Measurements>>();
  const reported = new Set<Measurements>();
  const out: { variant: string; result: CheckAnswer; warnings: string[] }[] = [];
  for (const variant of variants) {
    // the judge gives the check itself: a variant is rendered whole, so no batch summary is made of it
    const outcome = await evaluateText(path, text, variant, {
      vary,
      judge: async (spec, locate) => {
        const measurements = await loadSpecMeasurements(spec, measuredCache);
        if (measurements !== undefined && !reported.has(measurements)) {
          reported.add(measurements);
          reportMeasuredIssues(measuredIssues(measurements.problems, locate));
        }
        // the weights this variant's network cannot use (a varied width), named by the variant; the graph built and
        // the weights matched for them serve the check
        const network = measuredNetwork(spec, measurements);
        const unusable = measuredIssues(network.weightProblems, locate);
        for (const issue of unusable) process.stderr.write(`${formatSpecIssue(issue)} [${variant.name}]\n`);
        if (unusable.length > 0) raiseExitCode(EXIT.inputError);
        return check(spec, checkOptions, network);
      },
    });
    if (outcome.status === "error") {
      // every problem of the varied spec, one line each, as a plain check prints them
      const issues = outcome.error.issues;
      const lines = issues !== undefined && issues.length > 1 ? issues.map((issue) => issue.message) : [outcome.error.message];
      for (const line of lines) process.stderr.write(`${line} [${variant.name}]\n`);
      raiseExitCode(outcome.error.kind === "internal" ? EXIT.internal : EXIT.inputError);
      continue;
    }
    // as a plain check prints its spec's warnings, each variant's, named by the variant
    for (const warning of outcome.warnings ?? []) process.stderr.write(`warning: ${warning} [${variant.name}]\n`);
    out.push({ variant: variant.name, result: outcome.summary, warnings: outcome.warnings ?? [] });
  }
  return out;
}
