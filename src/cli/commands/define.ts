/** The parts several command definitions share, so each file of src/cli/commands/ says only what is its own. */
import { Option, type Command } from "commander";
import { closestWord } from "../../spec/issues.js";
import { UserError } from "../errors.js";

/**
 * The action of a command: imports the command's run (src/cli/<command>.ts) only when the command runs, so `--help`
 * and every other command load none of it. `load` is written `() => import("../x.js").then((m) => m.runX)`.
 */
export function lazyAction<A extends unknown[]>(load: () => Promise<(...args: A) => Promise<void>>): (...args: A) => Promise<void> {
  return async (...args) => (await load())(...args);
}

/** `headroom NAME <spec>`: a command about one network spec file. */
export function specCommand(program: Command, name: string): Command {
  return program.command(name).argument("<spec>", "network spec file (.yaml, .yml or .json)");
}

/** `--plan <name>`: `use` says what the command does with the plan, `whose` whose `plans` it is taken from. */
export function planOption(use: string, whose = "the spec's"): Option {
  return new Option("--plan <name>", `${use} this plan of ${whose} \`plans\` instead of its \`precision\``);
}

/** Options that may be given several times (their values collected); every other option with a value is given once. */
const REPEATABLE = new WeakSet<Option>();

/** An option that may be given several times: its values in the order given. */
export function repeatable(option: Option): Option {
  REPEATABLE.add(option);
  return option.argParser((value: string, previous: string[] | undefined) => [...(previous ?? []), value]);
}

/**
 * Refuse an option with one value given twice (`--plan a --plan b`), which the parser would settle silently for the
 * last: which one the user meant is theirs to say. Flags (no value) and repeatable options may repeat. Listens on the
 * command being built, so each parse counts afresh.
 */
export function refuseRepeatedOptions(command: Command): void {
  for (const option of command.options) {
    if (REPEATABLE.has(option) || option.variadic || !(option.required || option.optional)) continue;
    let given: string | undefined;
    command.on(`option:${option.name()}`, (value: string) => {
      if (given !== undefined) {
        throw new UserError(`${option.long ?? option.flags} is given twice (${JSON.stringify(given)}, then ${JSON.stringify(value)}); give it once`);
      }
      given = value;
    });
  }
}

/** The `--vary` option, as `check` and `batch` take it (repeatable). */
export function varyOption(): Option {
  return repeatable(
    new Option("--vary <KEY=V1,V2,...>", "check each value of a key in the spec (e.g. training.batch=8,16); repeat for the cross product"),
  );
}

/** How a user types the command: `headroom`, `headroom check`. */
export function commandPath(command: Command): string {
  return command.parent === null ? command.name() : `${commandPath(command.parent)} ${command.name()}`;
}

/**
 * `unknown option "--formt" (did you mean "--format"?)`, or `unknown option "--x"; see headroom check --help` when no
 * long option of the command (or of those above it) is close, followed by `note`: the parser's message and round's
 * (which reads unknown options itself, as its values may start with "-") alike.
 */
export function unknownOptionMessage(flag: string, command: Command, note = ""): string {
  const names: string[] = [];
  for (let at: Command | null = command; at !== null; at = at.parent) {
    for (const option of at.createHelp().visibleOptions(at)) if (option.long !== undefined) names.push(option.long.slice(2));
  }
  // compared without the dashes every candidate shares (they would widen the distance allowed) and without a value
  const word = /^--([^=]+)/.exec(flag)?.[1];
  // a known option is only refused as a value: it came after "--", which ends the options
  if (word !== undefined && names.includes(word)) {
    return `${JSON.stringify(flag)} came after "--", where every word is a value; put the options before "--"`;
  }
  const near = word === undefined ? undefined : closestWord(word, names);
  return `unknown option ${JSON.stringify(flag)}${near === undefined ? `; see ${commandPath(command)} --help${note}` : ` (did you mean "--${near}"?)`}`;
}
