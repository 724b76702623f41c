import { Option, type Command } from "commander";
import { FORMAT_NAMES } from "../../formats/names.js";
import type { RegisterCommand } from "../commands.js";
import { lazyAction, planOption, repeatable, specCommand, varyOption } from "./define.js";

/** The options `check`, `explain` and `report` share. */
export function addJudgeOptions(command: Command): Command {
  return command
    .addOption(
      repeatable(
        new Option(
          "--format <formats>",
          `judge these formats instead of the plan's (comma-separated or repeated; ${FORMAT_NAMES.join(", ")}); ` +
            "with no loss scale given, each is judged at the pick of its own gradients' window (none for bfloat16); " +
            "the optimizer is still answered for the plan, but counts in the verdict only in the plan's formats judged",
        ),
      ),
    )
    .addOption(planOption("judge"))
    .addOption(new Option("--loss-scale <scale>", "judge with this static loss scale, a power of two (1024, 0.5 or 2^-22), instead of the plan's"));
}

/** `headroom check SPEC`: a verdict per format, the tensors at risk and the operation hazards (run by src/cli/check.ts). */
export const register: RegisterCommand = (program) => {
  const command = specCommand(program, "check")
    .description(
      "Judge a network spec against its precision plan: a verdict per format (fits, at risk, fails) with the reasons, " +
        "the tensors at risk, the operation hazards, the loss scale and the optimizer. Exit code 1 when the verdict is " +
        "\"fails\" (a format, the optimizer or the loss scale), 2 for input errors. " +
        "Predictions are estimates; confirm with a short run.",
    )
    .option("--all", "list every tensor and operation, not only those at risk")
    .option("--json", "print the whole result as JSON (fields documented in README.md)")
    .addOption(new Option("--md", "print Markdown for a CI comment").conflicts("json"))
    .addOption(varyOption());
  addJudgeOptions(command).action(lazyAction(() => import("../check.js").then((m) => m.runCheck)));
};
