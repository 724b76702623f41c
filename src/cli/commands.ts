import type { Command } from "commander";
import { register as formats } from "./commands/formats.js";
import { register as round } from "./commands/round.js";
import { register as check } from "./commands/check.js";
import { register as explain } from "./commands/explain.js";
import { register as schema } from "./commands/schema.js";
import { register as compare } from "./commands/compare.js";
import { register as scan } from "./commands/scan.js";
import { register as batch } from "./commands/batch.js";
import { register as report } from "./commands/report.js";
import { register as simulate } from "./commands/simulate.js";

/**
 * Each file of src/cli/commands/ exports one `register` that adds its command to the program. It holds only the
 * definition (arguments, options, help); the action imports the command's implementation (src/cli/<command>.ts)
 * when the command runs (`lazyAction`), so `--help` and every command load only what they use. The parts several
 * definitions share (the `<spec>` argument, `--plan`, repeatable options) are in commands/define.ts.
 */
export type RegisterCommand = (program: Command) => void;

/** In the order `headroom --help` lists them. */
export const commands: RegisterCommand[] = [
  check,
  explain,
  compare,
  batch,
  report,
  simulate,
  scan,
  formats,
  round,
  schema,
];
