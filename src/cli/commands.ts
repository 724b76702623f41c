import type { Command } from "commander";
import { register as formats } from "./formats.js";
import { register as round } from "./round.js";
import { register as check } from "./check.js";
import { register as explain } from "./explain.js";
import { register as schema } from "./schema.js";
import { register as compare } from "./compare.js";
import { register as scan } from "./scan.js";
import { register as batch } from "./batch.js";
import { register as report } from "./report.js";
import { register as simulate } from "./simulate.js";

/** Each command file exports one `register` that adds its command to the program. */
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
