import { realpathSync } from "node:fs";
import { pathToFileURL } from "node:url";
import { Command, CommanderError } from "commander";
import { didYouMean } from "../spec/issues.js";
import { OutputError, UserError, EXIT, takeExitCode } from "./errors.js";
import { commands } from "./commands.js";
import { commandPath, refuseRepeatedOptions, unknownOptionMessage } from "./commands/define.js";

/**
 * Build the commander program with every command registered. The parser's own errors (an unknown option or
 * command, a missing argument) reach the user as headroom's other errors do: one line `headroom: <message>`, with
 * our did-you-mean, exit code 2. Commander prints none of them (`outputError`) and suggests nothing itself; each
 * command's exit hook turns them into a UserError that knows the command (its options, its usage). Help and
 * version still print as commander writes them.
 */
export function buildProgram(): Command {
  const program = new Command("headroom")
    .description(
      "Predict, before training, whether a network fits reduced-precision formats: which tensors " +
        "flush to zero or overflow, and which loss scale to use. Predictions are estimates; confirm with a short run.",
    )
    .version(VERSION, "-V, --version")
    // set before the commands are added: each command copies these from the program
    .configureOutput({ outputError: () => {} })
    .showSuggestionAfterError(false)
    .exitOverride();
  for (const register of commands) register(program);
  for (const command of [program, ...program.commands]) {
    refuseRepeatedOptions(command);
    command.exitOverride((error) => {
      throw isUsageError(error) ? new UserError(parserMessage(error, command, program)) : error;
    });
  }
  return program;
}

/** Help shown on request or for a bare `headroom` (exit 2, as before) and the version are not usage errors. */
function isUsageError(error: CommanderError): boolean {
  return error.exitCode !== 0 && error.code !== "commander.help" && error.code !== "commander.helpDisplayed" && error.code !== "commander.version";
}

/** What a parser error says, in headroom's words: the names quoted as our messages quote them, no trailing period. */
function parserMessage(error: CommanderError, command: Command, program: Command): string {
  const text = error.message.replace(/^error: /, "");
  // commander quotes the name it refuses in single quotes: 'chek', '--formt', '--to <formats>'
  const quoted = [...text.matchAll(/'([^']*)'/g)].map((match) => match[1] ?? "");
  const path = commandPath(command);
  const usage = `usage: ${path} ${command.usage()}`;
  switch (error.code) {
    case "commander.unknownOption":
      return unknownOptionMessage(quoted[0] ?? "", command);
    case "commander.unknownCommand":
      return unknownCommandMessage(quoted[0] ?? "", program);
    case "commander.missingArgument":
      return `missing argument ${JSON.stringify(quoted[0] ?? "")}; ${usage}`;
    case "commander.optionMissingArgument": {
      const flags = quoted[0] ?? "";
      return `${longFlag(flags)}: no value given (${flags})`;
    }
    case "commander.invalidArgument": {
      const choices = invalidChoice(text, command);
      if (choices !== undefined) return choices;
      break;
    }
    case "commander.excessArguments": {
      const [, expected = "", got = ""] = /Expected (\d+) arguments? but got (\d+)/.exec(text) ?? [];
      return `too many arguments: ${path} takes ${expected}, got ${got}; ${usage}`;
    }
    case "commander.conflictingOption":
      return quoted.map(longFlag).join(" cannot be used with ");
  }
  return text.replace(/'([^']*)'/g, (_, name: string) => JSON.stringify(name)).replace(/\s*\n\s*/g, " ").replace(/\.$/, "");
}

/** `unknown command "chek" (did you mean "check"?)`, or with no near name, where the commands are listed. */
function unknownCommandMessage(name: string, program: Command): string {
  const names = program.commands.map((c) => c.name()).concat("help");
  const hint = didYouMean(name, names);
  return `unknown command ${JSON.stringify(name)}${hint === "" ? `; see ${program.name()} --help` : hint}`;
}

/**
 * A command name headroom does not know, asked for help (`headroom measure --help`, `headroom help measure`): commander
 * would print the program's help and exit 0, as if the command existed, while `headroom measure` alone is an input
 * error. It is the same error with help asked for. Undefined when the arguments name a known command or none.
 */
function unknownCommandAskedForHelp(argv: readonly string[], program: Command): string | undefined {
  const operands = argv.slice(2);
  const [first, second] = operands;
  if (first === undefined || first.startsWith("-")) return undefined;
  const known = (name: string): boolean => program.commands.some((c) => c.name() === name || c.aliases().includes(name));
  if (first === "help") return second !== undefined && !second.startsWith("-") && !known(second) ? unknownCommandMessage(second, program) : undefined;
  const help = operands.slice(1, operands.includes("--") ? operands.indexOf("--") : undefined).some((a) => a === "--help" || a === "-h");
  return help && !known(first) ? unknownCommandMessage(first, program) : undefined;
}

/** `--to` of `--to <formats>`, `--version` of `-V, --version`. */
function longFlag(flags: string): string {
  return /--[^\s,]+/.exec(flags)?.[0] ?? flags;
}

/** `--rounding: unknown value "up"; accepted: nearest-even, ...` for a value outside an option's choices. */
function invalidChoice(text: string, command: Command): string | undefined {
  const match = /^option '([^']*)' argument '([^']*)' is invalid/.exec(text);
  if (match === null) return undefined;
  const [, flags = "", value = ""] = match;
  const choices = command.options.find((option) => option.flags === flags)?.argChoices;
  if (choices === undefined) return undefined;
  return `${longFlag(flags)}: unknown value ${JSON.stringify(value)}${didYouMean(value, choices)}; accepted: ${choices.join(", ")}`;
}

const VERSION = "0.1.0";

/** The first failure of standard output in this run (a broken pipe excepted), recorded by the listener below. */
let outputFailure: OutputError | undefined;
let listening = false;

/** Run the CLI; resolves to the process exit code. Never throws. */
export async function main(argv: readonly string[]): Promise<number> {
  // A stream error without a listener is thrown with a stack; writes to a full disk or a closed pipe fail this way,
  // after the command's plain `process.stdout.write` has returned. The listener keeps the first failure, and the run
  // ends with it once the output is handed over. A reader that goes away (`| head`, EPIPE) is its choice: no error.
  if (!listening) {
    listening = true;
    process.stdout.on("error", (error: unknown) => {
      if (!isBrokenPipe(error)) outputFailure ??= new OutputError(error);
    });
  }
  outputFailure = undefined;
  const program = buildProgram();
  takeExitCode();
  let code: number;
  try {
    const unknown = unknownCommandAskedForHelp(argv, program);
    if (unknown !== undefined) throw new UserError(unknown);
    await program.parseAsync([...argv]);
    code = takeExitCode();
  } catch (error) {
    takeExitCode();
    code = reportError(error);
    // a write that failed through writeOut or round's output has been reported with its reason already
    if (error instanceof OutputError) return code;
  }
  await outputSettled();
  // set by the listener while the command ran (TypeScript cannot see that assignment)
  const failure = outputFailure as OutputError | undefined;
  if (failure === undefined) return code;
  process.stderr.write(`headroom: ${failure.message}\n`);
  return Math.max(code, EXIT.inputError);
}

/**
 * Wait until what the command wrote is handed to the system (a pipe can still hold some) and the stream has reported a
 * failed write (its error event comes on the next tick). Writes nothing when nothing is pending: an empty write fails
 * on a full device too.
 */
async function outputSettled(): Promise<void> {
  if (process.stdout.writableLength > 0) await new Promise<void>((resolve) => process.stdout.write("", () => resolve()));
  await new Promise<void>((resolve) => setImmediate(resolve));
}

function reportError(error: unknown): number {
  if (error instanceof CommanderError) {
    // help and version are not errors; usage errors are input errors
    if (error.code === "commander.helpDisplayed" || error.code === "commander.version" || error.exitCode === 0) {
      return EXIT.ok;
    }
    return EXIT.inputError;
  }
  if (error instanceof OutputError) {
    if (error.code === "EPIPE") return EXIT.ok;
    process.stderr.write(`headroom: ${error.message}\n`);
    return EXIT.inputError;
  }
  if (error instanceof UserError) {
    process.stderr.write(`headroom: ${error.message}\n`);
    return error.exitCode;
  }
  if (isBrokenPipe(error)) return EXIT.ok;
  const message = error instanceof Error ? error.message : String(error);
  process.stderr.write(`headroom: internal error: ${message}\n`);
  if (process.env["HEADROOM_DEBUG"] && error instanceof Error && error.stack) {
    process.stderr.write(error.stack + "\n");
  }
  return EXIT.internal;
}

function isBrokenPipe(error: unknown): boolean {
  return typeof error === "object" && error !== null && (error as { code?: unknown }).code === "EPIPE";
}

// Run as a script too (`node dist/cli/main.js check SPEC`, as a contributor may try): bin/headroom.js imports main and
// calls it itself, so only a process whose own script is this file runs it here.
if (isEntry(import.meta.url)) {
  void main(process.argv).then((code) => {
    process.exitCode = code;
  });
}

function isEntry(url: string): boolean {
  const script = process.argv[1];
  if (script === undefined) return false;
  try {
    return url === pathToFileURL(realpathSync(script)).href;
  } catch {
    return false;
  }
}
