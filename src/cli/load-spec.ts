/** Loading one spec file for a command, with its problems reported the way every command reports them. */
import { loadSpecMeasurements, measuredIssues, measuredNetwork, type MeasuredNetwork } from "../check.js";
import type { GraphIssue } from "../graph/index.js";
import { formatSpecIssue, loadSpec, positionIssues, type SpecIssue, type SpecResult } from "../spec/index.js";
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

/** The problems of a loaded spec's network (it cannot be built), positioned in its file; sets the input-error exit code. */
export function reportGraphIssues(loaded: Extract<SpecResult, { ok: true }>, issues: readonly GraphIssue[]): void {
  for (const issue of positionIssues(loaded.locate, issues)) process.stderr.write(formatSpecIssue(issue) + "\n");
  raiseExitCode(EXIT.inputError);
}

/** Problems of a spec's measured data, positioned at its `measured` section: input errors (exit code 2), though the check still runs. */
export function reportMeasuredIssues(issues: readonly SpecIssue[]): void {
  for (const issue of issues) process.stderr.write(formatSpecIssue(issue) + "\n");
  if (issues.length > 0) raiseExitCode(EXIT.inputError);
}

/**
 * A loaded spec's measured data (its `measured` section) with its network built and the weights matched once, for the
 * problems and the check: unreadable data, and weights the network cannot use, are reported by reportMeasuredIssues.
 */
export async function loadMeasuredNetwork(loaded: Extract<SpecResult, { ok: true }>): Promise<MeasuredNetwork> {
  const measurements = await loadSpecMeasurements(loaded.spec);
  const network = measuredNetwork(loaded.spec, measurements);
  reportMeasuredIssues(measuredIssues([...(measurements?.problems ?? []), ...network.weightProblems], loaded.locate));
  return network;
}
