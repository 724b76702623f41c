import type { RegisterCommand } from "../commands.js";
import { addJudgeOptions } from "./check.js";
import { lazyAction, specCommand } from "./define.js";

/** `headroom explain SPEC TENSOR`: the ledger of one tensor, factor by factor, and its risk. */
export const register: RegisterCommand = (program) => {
  const command = specCommand(program, "explain")
    .argument("<tensor...>", "the tensor: its id (dense-3/activation-gradient), or a layer name and a role")
    .description(
      "Show the ledger of one tensor: each factor from the loss (or the input) to it, in log2 and as a multiplier, " +
        "with the rule that produced it, then its risk in each format. Predictions are estimates; confirm with a short run.",
    )
    .option("--json", "print the tensor's part of the check result as JSON");
  addJudgeOptions(command).action(lazyAction(() => import("../explain.js").then((m) => m.runExplain)));
};
