/** The parts several command definitions share, so each file of src/cli/commands/ says only what is its own. */
import { Option, type Command } from "commander";

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

/** An option that may be given several times: its values in the order given. */
export function repeatable(option: Option): Option {
  return option.argParser((value: string, previous: string[] | undefined) => [...(previous ?? []), value]);
}

/** The `--vary` option, as `check` and `batch` take it (repeatable). */
export function varyOption(): Option {
  return repeatable(
    new Option("--vary <KEY=V1,V2,...>", "check each value of a key in the spec (e.g. training.batch=8,16); repeat for the cross product"),
  );
}
