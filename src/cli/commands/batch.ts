import { Option } from "commander";
import type { RegisterCommand } from "../commands.js";
import { lazyAction, planOption, varyOption } from "./define.js";

/** `headroom batch PATH...`: check many specs in parallel; one row per spec (or variant) (run by src/cli/batch.ts). */
export const register: RegisterCommand = (program) => {
  program
    .command("batch")
    .argument("<paths...>", "spec files, folders (searched for *.yaml, *.yml and JSON specs), globs (* ? **), or - to read paths from stdin")
    .description(
      "Check many network specs at once, in parallel: one row per spec with its verdict per format, the loss-scale pick " +
        "and window, and the worst tensor. A bad spec is reported in its row, every problem listed with its " +
        "file:line:column, and never stops the others. Exit code 0 when all fit, 1 when some are at risk or fail, 2 when " +
        "some could not be read or validated, 3 when headroom itself failed on one; the strictest applies. Predictions " +
        "are estimates; confirm with a short run.",
    )
    .addOption(varyOption())
    .addOption(new Option("--jsonl", "print one JSON object per row (JSON Lines)").conflicts(["csv", "md"]))
    .addOption(new Option("--csv", "print CSV (RFC 4180: CRLF line ends, quoted fields)").conflicts(["jsonl", "md"]))
    .addOption(new Option("--md", "print a Markdown table for CI comments").conflicts(["jsonl", "csv"]))
    .addOption(new Option("--workers <n>", "worker threads (default: one per core)"))
    .addOption(planOption("judge", "each spec's"))
    .addOption(new Option("--color", "colour the table even when stdout is not a terminal"))
    .addOption(new Option("--no-color", "never colour the table"))
    .action(lazyAction(() => import("../batch.js").then((m) => m.runBatchCommand)));
};
