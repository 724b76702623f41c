import { Command, CommanderError } from "commander";
import { UserError, EXIT, takeExitCode } from "./errors.js";
import { commands } from "./commands.js";

/** Build the commander program with every command registered. */
export function buildProgram(): Command {
  const program = new Command("headroom")
    .description(
      "Predict, before training, whether a network fits reduced-precision formats: which tensors " +
        "flush to zero or overflow, and which loss scale to use. Predictions are estimates; confirm with a short run.",
    )
    .version(VERSION, "-V, --version")
    .exitOverride();
  for (const register of commands) register(program);
  return program;
}

const VERSION = "0.1.0";

/** Run the CLI; resolves to the process exit code. Never throws. */
export async function main(argv: readonly string[]): Promise<number> {
  // A reader that goes away (`| head`) makes stdout emit EPIPE as an event: without a listener Node throws it with a
  // stack. Writes through writeOut (and round's buffered output) get the error back and end the command at it
  // (reportError: quiet for a broken pipe); plain writes of the other commands fail silently to their end.
  if (process.stdout.listenerCount("error") === 0) process.stdout.on("error", () => {});
  const program = buildProgram();
  takeExitCode();
  try {
    await program.parseAsync([...argv]);
    return takeExitCode();
  } catch (error) {
    takeExitCode();
    return reportError(error);
  }
}

function reportError(error: unknown): number {
  if (error instanceof CommanderError) {
    // help and version are not errors; usage errors are input errors
    if (error.code === "commander.helpDisplayed" || error.code === "commander.version" || error.exitCode === 0) {
      return EXIT.ok;
    }
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
