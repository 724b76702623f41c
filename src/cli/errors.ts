/**
 * An error caused by what the user gave us (arguments, files, specs).
 * The CLI prints its message on one line, with no stack trace, and exits with `exitCode`.
 */
export class UserError extends Error {
  readonly exitCode: number;
  constructor(message: string, exitCode = EXIT.inputError) {
    super(message);
    this.name = "UserError";
    this.exitCode = exitCode;
  }
}

/** Exit codes shared by every command; documented in README.md. */
export const EXIT = {
  /** everything fits (or the command had nothing to judge) */
  ok: 0,
  /** findings: a verdict of "fails" (check, compare), "at risk" or "fails" (batch), values a cast would lose (scan) */
  findings: 1,
  /** bad input: arguments, a spec, a tensor file */
  inputError: 2,
  /** a bug or an unexpected failure inside headroom */
  internal: 3,
} as const;

let pendingExitCode: number = EXIT.ok;

/** Record the exit code a command wants; the strictest (largest) code of a run wins. */
export function raiseExitCode(code: number): void {
  if (code > pendingExitCode) pendingExitCode = code;
}

/** Read and reset the recorded exit code (called once per CLI run by main). */
export function takeExitCode(): number {
  const code = pendingExitCode;
  pendingExitCode = EXIT.ok;
  return code;
}
