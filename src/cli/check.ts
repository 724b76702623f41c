import { check, CheckInputError, UnknownPlanError } from "../check.js";
import { PredictionRangeError } from "../magnitude/range.js";
import { formatSpecIssue } from "../spec/index.js";
import type { NetworkSpec } from "../spec/types.js";
import { renderCheckJson } from "../report/check-json.js";
import { renderCheckText } from "../report/check-text.js";
import type { CheckOptions, CheckResult } from "../risk/index.js";
import { loadMeasuredNetwork, loadSpecReporting, reportGraphIssues } from "./load-spec.js";
import { parseLossScale } from "./loss-scale.js";
import { EXIT, raiseExitCode, UserError } from "./errors.js";
import { parseFormatList } from "./lists.js";
import { stdoutStyle, textWidth } from "./terminal.js";

/** Options shared by `check` and `explain`. */
export interface JudgeFlags {
  format?: string[];
  plan?: string;
  lossScale?: string;
}

/** `--format`, `--plan` and `--loss-scale` as check options: one reading for every path (`check`, `check --vary`, `explain`, `report`). */
export function judgeOptions(flags: JudgeFlags): CheckOptions {
  const options: CheckOptions = {};
  // `--format a,b --format c`, aliases such as fp16 accepted
  if (flags.format !== undefined) options.formats = parseFormatList("--format", flags.format).map((format) => format.name);
  const lossScale = parseLossScale(flags.lossScale);
  if (lossScale !== undefined) options.lossScale = lossScale;
  if (flags.plan !== undefined) options.plan = flags.plan;
  return options;
}


/**
 * Load a spec and check it with the command's flags. Spec problems are printed one per line
 * (file:line:column: path: message) and end the command with exit code 2.
 */
export async function loadAndCheck(
  path: string,
  flags: JudgeFlags,
  extra: CheckOptions = {},
  warnings?: string[],
): Promise<CheckResult | undefined> {
  const options: CheckOptions = { ...extra, ...judgeOptions(flags) };

  const loaded = await loadSpecReporting(path);
  if (loaded === undefined) return undefined;
  // the spec's warnings (printed on stderr) for outputs that carry them too, such as a CI comment
  if (warnings !== undefined) for (const warning of loaded.warnings) warnings.push(formatSpecIssue(warning));
  // measured weights and recorded statistics (the spec's `measured` section); unreadable ones are input errors
  const network = await loadMeasuredNetwork(loaded);
  // the one option check() refuses with a RangeError that the command line cannot read alone: a plan the spec lacks
  if (options.plan !== undefined) planOption(path, loaded.spec, options.plan);
  try {
    return check(loaded.spec, options, network);
  } catch (error) {
    // a network that cannot be built, or values the prediction cannot carry in binary64: positioned input errors
    if (error instanceof CheckInputError || error instanceof PredictionRangeError) {
      reportGraphIssues(loaded, error.issues);
      return undefined;
    }
    // any other error is headroom's own (exit code 3), not the user's
    throw error;
  }
}

/** A `--plan` that names the spec's plan or one of its `plans`; else a UserError naming them (exit code 2). */
function planOption(path: string, spec: NetworkSpec, name: string): void {
  const names = [spec.precision.name, ...spec.plans.map((plan) => plan.name)];
  if (!names.includes(name)) throw new UserError(`${path}: ${new UnknownPlanError(name, names).message}`);
}

/** The flags of `check` (src/cli/commands/check.ts). */
export interface CheckFlags extends JudgeFlags {
  all?: boolean;
  json?: boolean;
  md?: boolean;
  vary?: string[];
}

/** `headroom check SPEC`: a verdict per format, the tensors at risk and the operation hazards. */
export async function runCheck(path: string, flags: CheckFlags): Promise<void> {
  // --vary (see src/cli/check-vary.ts): one check per variant, each named by its values
  const warnings: string[] = [];
  const runs: { variant: string | null; result: CheckResult | undefined; warnings?: string[] }[] = flags.vary
    ? await (await import("./check-vary.js")).checkVariants(path, flags.vary, flags)
    : [{ variant: null, result: await loadAndCheck(path, flags, {}, warnings), warnings }];
  // the Markdown renderer (and the batch table code it shares) loads only for --md
  const renderMarkdown = flags.md ? (await import("../report/markdown-check.js")).renderCheckMarkdown : undefined;
  const texts: string[] = [];
  for (const { variant, result, warnings: warned } of runs) {
    if (result === undefined) continue;
    texts.push(
      renderMarkdown
        ? renderMarkdown(result, { variant, warnings: warned ?? [], ...(flags.all ? { findings: Number.POSITIVE_INFINITY } : {}) })
        : flags.json
          ? renderCheckJson(result)
          : (variant ? `variant ${variant}\n\n` : "") +
            renderCheckText(result, {
              all: flags.all ?? false,
              style: stdoutStyle(),
              width: textWidth(),
            }),
    );
    if (result.verdict === "fails") raiseExitCode(EXIT.findings);
  }
  if (flags.json && flags.vary) {
    process.stdout.write(texts.length === 0 ? "[]\n" : `[\n${texts.map((text, i) => `{ "variant": ${JSON.stringify(runs[i]?.variant)}, "result": ${text.trimEnd()} }`).join(",\n")}\n]\n`);
  } else process.stdout.write(texts.join("\n"));
}
