import { MX_BLOCK } from "../../formats/model.js";
import type { RegisterCommand } from "../commands.js";
import { lazyAction, specCommand } from "./define.js";

/** `headroom compare SPEC`: several precision plans side by side, ranked. */
export const register: RegisterCommand = (program) => {
  specCommand(program, "compare")
    .description(
      "Evaluate several precision plans for one network (all binary32; binary16 or bfloat16 with a master copy; bfloat16 " +
        "only; 8-bit with scale factors; and the spec's own plans) and rank them: the cheapest plan not expected to fail " +
        "first. Exit code 1 when every plan is expected to fail, 2 for input errors. Rankings rest on estimates.",
    )
    .option("--only-spec-plans", "compare only the spec's own plans (its precision and plans)")
    .option("--json", "print the whole comparison as JSON")
    .addHelpText(
      "after",
      "\nmemory: the spec's parameters at the bytes per parameter (weights, master copy, gradients, optimizer states) plus one " +
        `step's stored activations; block-scaled 8-bit tensors add one scale byte per ${MX_BLOCK.size} elements (per-tensor scales are ` +
        "not counted). saved: the share saved against all binary32 (every tensor in binary32, no master copy).",
    )
    .action(lazyAction(() => import("../compare.js").then((m) => m.runCompare)));
};
