import { Option } from "commander";
import type { RegisterCommand } from "../commands.js";
import { addJudgeOptions } from "./check.js";
import { lazyAction, specCommand } from "./define.js";

/** `headroom report SPEC -o FILE.html`: one self-contained HTML page about a spec. */
export const register: RegisterCommand = (program) => {
  const command = specCommand(program, "report")
    .description(
      "Write one self-contained HTML page about a spec (no scripts, no network access): the verdict, every tensor's " +
        "predicted magnitudes against the ranges of the planned formats, the loss-scale window, the ledger of the worst " +
        "tensor and the tables. Exit code 0 when written, 2 for input errors. Predictions are estimates; confirm with a short run.",
    )
    .addOption(new Option("-o, --output <file>", "write the page to this file (default: stdout)"));
  addJudgeOptions(command).action(lazyAction(() => import("../report.js").then((m) => m.runReport)));
};
