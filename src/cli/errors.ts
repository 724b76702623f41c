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

/**
 * Standard output refused what a command wrote (a full disk, a closed pipe). main reports it once, as
 * `cannot write standard output: <reason>` with exit code 2, or says nothing for a broken pipe (the reader chose to stop).
 */
export class OutputError extends Error {
  /** the system's error code (ENOSPC, EPIPE…), when it gave one */
  readonly code: string | undefined;
  constructor(cause: unknown) {
    const code = (cause as { code?: unknown } | null)?.code;
    super(`cannot write standard output: ${typeof code === "string" ? systemProblem(code) : cause instanceof Error ? cause.message : String(cause)}`);
    this.name = "OutputError";
    this.code = typeof code === "string" ? code : undefined;
  }
}

/** A file system error code in words a user can act on (the code itself when it is none of these). */
export function systemProblem(code: string): string {
  if (code === "EACCES" || code === "EPERM") return "permission denied";
  if (code === "EROFS") return "the file system is read-only";
  if (code === "ENOSPC") return "no space left on the device";
  if (code === "EDQUOT") return "the disk quota is used up";
  if (code === "EFBIG") return "the file would be larger than the system allows";
  if (code === "EIO") return "the device reports an input/output error";
  return `the system reports ${code}`;
}

/** Exit codes shared by every command; documented in README.md. */
export const EXIT = {
  /** everything fits (or the command had nothing to judge) */
  ok: 0,
  /** findings: a verdict of "fails" (check, compare), "at risk" or "fails" (batch), values a cast would lose (scan) */
  findings: 1,
  /** bad input: arguments, a spec, a tensor file; or standard output that cannot be written */
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
