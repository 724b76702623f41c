import { Option } from "commander";
import { OVERFLOW_MODES } from "../../formats/model.js";
import { DEFAULT_SCAN_TARGETS } from "../../measure/cast.js";
import type { RegisterCommand } from "../commands.js";
import { lazyAction } from "./define.js";

/** `headroom scan FILE...`: measure the tensors of safetensors and .npy files and judge casting them into formats. */
export const register: RegisterCommand = (program) => {
  program
    .command("scan")
    .description(
      "Measure every floating-point tensor of safetensors and .npy files (several files or a quoted glob for a sharded " +
        "checkpoint) and count, element by element, what a cast into each target format flushes, clips or overflows",
    )
    .argument("<files...>", "safetensors or .npy files, or glob patterns such as 'shards/*.safetensors'")
    .option("--to <formats>", "target formats, comma-separated", DEFAULT_SCAN_TARGETS.join(","))
    .option("--json", "write the result as JSON")
    .option("--csv", "write one CSV row per tensor and target format")
    .option("--all", "list every tensor in the table, not only those with findings (--json and --csv hold every one)")
    .addOption(
      new Option("--overflow <mode>", "what a value past the largest finite one becomes (default: each format's own: e4m3 saturates)").choices(
        OVERFLOW_MODES,
      ),
    )
    .option("--flush-subnormals", "count subnormal results as flushed, as hardware that flushes subnormals does")
    .option("--tolerance <share>", "share of a tensor's nonzero values that may flush or clip before it is called lossy", "0")
    .addHelpText(
      "after",
      "\nExit code: 0 when every tensor is safe in every target, 1 when some cast would lose values or break, " +
        "2 when a file could not be read (the strictest applies).",
    )
    .action(lazyAction(() => import("../scan.js").then((m) => m.runScan)));
};
