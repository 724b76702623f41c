import { Option } from "commander";
import { readFile } from "node:fs/promises";
import { evaluateTask } from "../batch/evaluate.js";
import { nodePathHost } from "../batch/files.js";
import { check } from "../check.js";
import { summarizeCheck } from "../report/summary.js";
import type { CheckAnswer, CheckAnswerOptions } from "../check.js";
import { specJsonSchema } from "../spec/index.js";
import { parseFormats } from "./check.js";
import { expandInputs, pathsFromText } from "../batch/paths.js";
import { runBatch } from "../batch/run.js";
import type { BatchWorkerData } from "../batch/worker.js";
import { batchExitCode } from "../batch/types.js";
import { parseVaryOption, variantsOf, VaryError, type Variant } from "../batch/vary.js";
import { renderBatchCsv, renderBatchJsonl, renderBatchMarkdown, renderBatchText } from "../report/batch.js";
import { colorEnabled, createStyle } from "../report/style.js";
import type { RegisterCommand } from "./commands.js";
import { EXIT, raiseExitCode, UserError } from "./errors.js";
import { createProgress, type Progress } from "./progress.js";

/** Read all of stdin as text. */
export async function readStdin(): Promise<string> {
  const chunks: Buffer[] = [];
  for await (const chunk of process.stdin) chunks.push(chunk as Buffer);
  return Buffer.concat(chunks).toString("utf8");
}

/** Parse every --vary option into the list of variants (empty without options); bad options are input errors. */
export function variantsFromOptions(options: readonly string[] | undefined): Variant[] {
  try {
    return variantsOf((options ?? []).map(parseVaryOption));
  } catch (error) {
    if (error instanceof VaryError) throw new UserError(error.message);
    throw error;
  }
}

/** Write text to stdout and wait until it is handed over (large outputs, pipes). */
export function writeOut(text: string): Promise<void> {
  return new Promise((resolve, reject) => {
    process.stdout.write(text, (error) => (error ? reject(error) : resolve()));
  });
}

function parseWorkers(text: string | undefined): number | undefined {
  if (text === undefined) return undefined;
  const value = Number(text);
  if (!Number.isInteger(value) || value < 1 || value > 256) {
    throw new UserError(`--workers: expected a whole number from 1 to 256, got "${text}"`);
  }
  return value;
}

interface BatchFlags {
  vary?: string[];
  jsonl?: boolean;
  csv?: boolean;
  md?: boolean;
  workers?: string;
  plan?: string;
  color?: boolean;
}

/** `headroom batch PATH...`: check many specs in parallel; one row per spec (or variant). */
export const register: RegisterCommand = (program) => {
  program
    .command("batch")
    .argument("<paths...>", "spec files, folders (searched for *.yaml and *.yml), globs (* ? **), or - to read paths from stdin")
    .description(
      "Check many network specs at once, in parallel: one row per spec with its verdict per format, the loss-scale pick " +
        "and window, and the worst tensor. A bad spec is reported in its row and never stops the others. Exit code 0 when " +
        "all fit, 1 when some are at risk or fail, 2 when some could not be read or validated, 3 when headroom itself " +
        "failed on one; the strictest applies. Predictions are estimates; confirm with a short run.",
    )
    .addOption(varyOption())
    .addOption(new Option("--jsonl", "print one JSON object per row (JSON Lines)").conflicts(["csv", "md"]))
    .addOption(new Option("--csv", "print CSV (RFC 4180: CRLF line ends, quoted fields)").conflicts(["jsonl", "md"]))
    .addOption(new Option("--md", "print a Markdown table for CI comments").conflicts(["jsonl", "csv"]))
    .addOption(new Option("--workers <n>", "worker threads (default: one per core)"))
    .addOption(new Option("--plan <name>", "judge this plan of each spec's `plans` instead of its `precision`"))
    .addOption(new Option("--color", "colour the table even when stdout is not a terminal"))
    .addOption(new Option("--no-color", "never colour the table"))
    .action(async (paths: string[], flags: BatchFlags) => {
      const variants = variantsFromOptions(flags.vary);
      const workers = parseWorkers(flags.workers);
      const stdinPaths = paths.includes("-") ? pathsFromText(await readStdin()) : [];
      const inputs = expandInputs(nodePathHost, paths, { stdinPaths });
      let progressDone = 0;
      if (inputs.length === 0) throw new UserError("batch: no spec files given (stdin listed no paths)");
      let progress: Progress | undefined;
      let rows;
      try {
        rows = await runBatch(inputs, variants, {
          ...(workers !== undefined ? { workers } : {}),
          workerData: {
            check: flags.plan !== undefined ? { plan: flags.plan } : {},
            // --vary needs the JSON Schema in every worker: built here once, not once per worker
            ...(variants.length > 0 ? { schema: specJsonSchema() } : {}),
          } satisfies BatchWorkerData,
          onRow: (done, total) => {
            progress ??= createProgress({ total, label: "checking" });
            progress.tick(done - progressDone);
            progressDone = done;
          },
        });
      } finally {
        progress?.finish();
      }
      const colour = flags.color ?? colorEnabled(process.stdout, process.env);
      const text = flags.jsonl
        ? renderBatchJsonl(rows)
        : flags.csv
          ? renderBatchCsv(rows)
          : flags.md
            ? renderBatchMarkdown(rows)
            : renderBatchText(rows, { style: createStyle(colour) });
      await writeOut(text);
      raiseExitCode(batchExitCode(rows));
    });
};

/** The `--vary` option, as `check` and `batch` take it (repeatable). */
export function varyOption(): Option {
  return new Option("--vary <KEY=V1,V2,...>", "check each value of a key in the spec (e.g. training.batch=8,16); repeat for the cross product").argParser(
    (value: string, previous: string[] | undefined) => [...(previous ?? []), value],
  );
}

/** What `check --vary` checks: the flags `check` shares with `explain`. */
export interface VariantFlags {
  format?: string[];
  plan?: string;
  lossScale?: string;
}

/**
 * `check --vary`: check every variant of one spec. A variant whose spec is invalid (or whose key does
 * not exist) is reported on stderr with its position in the file and exit code 2; the others are
 * checked. Resolves to the checked variants in order.
 */
export async function checkVariants(
  path: string,
  options: readonly string[],
  flags: VariantFlags,
  extra: CheckAnswerOptions = {},
): Promise<{ variant: string; result: CheckAnswer }[]> {
  const variants = variantsFromOptions(options);
  const checkOptions: CheckAnswerOptions = { ...extra };
  const formats = parseFormats(flags.format);
  if (formats !== undefined) checkOptions.formats = formats;
  if (flags.lossScale !== undefined) {
    const value = Number(flags.lossScale);
    if (!(value > 0) || !Number.isFinite(value)) throw new UserError(`--loss-scale: expected a positive number such as 1024, got "${flags.lossScale}"`);
    checkOptions.lossScale = value;
  }
  if (flags.plan !== undefined) checkOptions.plan = flags.plan;
  const out: { variant: string; result: CheckAnswer }[] = [];
  for (const variant of variants) {
    let result: CheckAnswer | undefined;
    const outcome = await evaluateTask(
      { file: path, variant },
      {
        readText: (file) => readFile(file, "utf8"),
        schema: () => specJsonSchema(),
        judge: (spec) => {
          result = check(spec, checkOptions);
          return summarizeCheck(result);
        },
      },
    );
    if (outcome.status === "error" || result === undefined) {
      const message = outcome.status === "error" ? outcome.error.message : `${path}: not checked`;
      process.stderr.write(`${message} [${variant.name}]\n`);
      raiseExitCode(outcome.status === "error" && outcome.error.kind === "internal" ? EXIT.internal : EXIT.inputError);
      continue;
    }
    out.push({ variant: variant.name, result });
  }
  return out;
}
