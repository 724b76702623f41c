import { FORMAT_NAMES } from "../../formats/names.js";
import type { RegisterCommand } from "../commands.js";
import { lazyAction } from "./define.js";

/** `headroom formats`: a table of the number formats and their limits (or JSON). */
export const register: RegisterCommand = (program) => {
  program
    .command("formats")
    .description("Print the number formats headroom knows and their limits: largest finite, overflow threshold, smallest normal and subnormal, epsilon, range")
    .argument("[names...]", `formats to show (default all): ${FORMAT_NAMES.join(", ")}`)
    .option("--json", "print a JSON array of the formats, every number exact (infinity as null)")
    .action(lazyAction(() => import("../formats.js").then((m) => m.runFormats)));
};
