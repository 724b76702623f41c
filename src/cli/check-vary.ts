import { readFile } from "node:fs/promises";
import { evaluateTask } from "../batch/evaluate.js";
import { check, type CheckAnswer, type CheckAnswerOptions } from "../check.js";
import { summarizeCheck } from "../report/summary.js";
import { specJsonSchema } from "../spec/index.js";
import { judgeOptions, type JudgeFlags } from "./check.js";
import { EXIT, raiseExitCode } from "./errors.js";
import { variantsFromOptions } from "./shared.js";

/**
 * `check --vary`: check every variant of one spec. A variant whose spec is invalid (or whose key does
 * not exist) is reported on stderr with its position in the file and exit code 2; the others are
 * checked. Resolves to the checked variants in order.
 */
export async function checkVariants(
  path: string,
  options: readonly string[],
  flags: JudgeFlags,
): Promise<{ variant: string; result: CheckAnswer }[]> {
  const variants = variantsFromOptions(options);
  const checkOptions: CheckAnswerOptions = judgeOptions(flags);
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
