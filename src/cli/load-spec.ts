/** Loading one spec file for a command, with its problems reported the way every command reports them. */
import { formatSpecIssue, loadSpec, type SpecResult } from "../spec/index.js";
import { EXIT, raiseExitCode } from "./errors.js";

/**
 * Load a spec file. Its problems go to stderr, positioned, and set the input-error exit code (undefined comes
 * back); its warnings go to stderr too, and the loaded spec comes back.
 */
export async function loadSpecReporting(path: string): Promise<Extract<SpecResult, { ok: true }> | undefined> {
  const loaded = await loadSpec(path);
  if (!loaded.ok) {
    for (const issue of loaded.issues) process.stderr.write(formatSpecIssue(issue) + "\n");
    raiseExitCode(EXIT.inputError);
    return undefined;
  }
  for (const warning of loaded.warnings) process.stderr.write(`warning: ${formatSpecIssue(warning)}\n`);
  return loaded;
}
