import { Option } from "commander";
import { FORMATS, OVERFLOW_MODES, type Format } from "../../formats/model.js";
import { FORMAT_NAMES } from "../../formats/names.js";
import { ROUNDING_MODES } from "../../formats/round.js";
import type { RegisterCommand } from "../commands.js";
import { lazyAction } from "./define.js";

/**
 * What `round` rounds into without --to: the formats values are stored in, in FORMAT_NAMES order. Not tf32 (a compute
 * precision of matrix units, held in binary32's 4 bytes) nor binary64 (values are read as binary64: rounding into it changes nothing).
 */
export const STORAGE_FORMATS: readonly Format[] = FORMAT_NAMES.map((name) => FORMATS[name]).filter(
  (format) => !format.computeOnly && format.name !== "binary64",
);

/** `headroom round VALUE... [--to FORMAT[,FORMAT...]]`: each value rounded into each format (each storage format by default). */
export const register: RegisterCommand = (program) => {
  program
    .command("round")
    .description(
      "Round values into formats (directly from binary64, one rounding) and show the result, its bit pattern, " +
        "its class (zero, subnormal, normal, saturated, infinite, nan) and the rounding error (4 significant digits)",
    )
    .argument("<values...>", "decimal numbers, inf/nan, or 0x + 16 hex digits (binary64 bits); - reads one value per line from stdin")
    .option(
      "--to <formats>",
      `target formats, comma-separated: ${FORMAT_NAMES.join(", ")}; default: every storage format (${STORAGE_FORMATS.map((f) => f.name).join(", ")})`,
    )
    .addOption(new Option("--rounding <mode>", "how to round").choices(ROUNDING_MODES).default("nearest-even"))
    .addOption(
      new Option("--overflow <mode>", "past the largest finite value: clamp to it, or give infinity (NaN for e4m3); default: saturate for e4m3, infinity for the others")
        .choices(OVERFLOW_MODES),
    )
    .option("--flush-subnormals", "send subnormal results to zero, as some hardware does (bfloat16 often)")
    .option("--seed <n>", "seed of stochastic rounding (a whole number)", "1")
    .option("--json", "one JSON object per line (per value and format); infinities and NaN as strings")
    // values such as -inf and -nan look like options to the parser; unknown options arrive as values and are named below
    .allowUnknownOption()
    .action(lazyAction(() => import("../round.js").then((m) => m.runRound)));
};
