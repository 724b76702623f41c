import type { RegisterCommand } from "../commands.js";
import { lazyAction, planOption, specCommand } from "./define.js";

/** `headroom simulate SPEC`: run the network in float64 with planned storage rounding and compare with the prediction. */
export const register: RegisterCommand = (program) => {
  specCommand(program, "simulate")
    .description(
      "Run the described network forward and backward on random data in float64, rounding every stored tensor to its " +
        "planned format, and put the measured magnitudes beside the predicted ones",
    )
    .option("--steps <n>", "optimizer steps to run after the first measurement, to see the first steps' drift", "0")
    .option("--seed <n>", "seed of the first draw (draw i uses seed + i)", "1")
    .option("--draws <n>", "independent draws of weights and data; the median is reported", "1")
    .option("--shrink <factors>", "shrink for speed: one factor for widths, batch and positions (e.g. 4), or width=4,batch=8,positions=2,classes=2,image=2")
    .addOption(planOption("store tensors in"))
    .option(
      "--loss-scale <scale>",
      "static loss scale, a power of two (default: the plan's, else the scale check judges the simulated network's gradients at, else 1)",
    )
    .option("--no-rounding", "keep every tensor in binary64 (counts still say what storing would do)")
    .option("--memory <GiB>", "refuse runs that would need more memory than this", "4")
    .option("--micro-batches <n>", "micro-batches (accumulation steps × workers) run per step at most", "8")
    .option("--all", "list every tensor, not only those with findings or disagreements")
    .option("--json", "write the result as JSON")
    .option("--html <file>", "also write a page with each tensor's measured band drawn over its predicted band")
    .addHelpText(
      "after",
      "\nExit code: 0 when no stored tensor overflowed or became non-finite in the simulation (at the first measurement or after the " +
        "--steps) and no step was skipped for an overflowed gradient or made an infinite or NaN update, 1 when one did, 2 for bad input. " +
        "The loss is listed with the shares of the loss times the loss scale, as check judges it, in the activation format (not " +
        "stored: no exit code) and, when the plan accumulates in another format, summed in that one; an overflow of the sum " +
        "exits 1, as check says it fails (with one format for both, the one count is the sum's).",
    )
    .action(lazyAction(() => import("../simulate.js").then((m) => m.runSimulate)));
};
