/**
 * One batch task: a spec file (and a variant of it), read, varied, validated and judged, always
 * ending in a row, never in an exception. The reading and the judging are passed in, so the worker
 * thread, the library and the tests share this code.
 */
import { UnknownPlanError } from "../check.js";
import { formatSpecIssue, parseSpec, positionIssues, type NetworkSpec, type SpecIssue, type SpecPath, type SpecPosition } from "../spec/index.js";
import { readSpecFile } from "../spec/parse.js";
import { oneProblem, type ErrorPosition, type RowError, type SpecSummary } from "./types.js";
import { varyText, VaryError, type Variant, type VariedText } from "./vary.js";

/** What a worker is asked to evaluate. */
export interface SpecTask {
  /** the spec file, as the user named it */
  file: string;
  /** the variant to apply, or null for the file as it is */
  variant: Variant | null;
}

/**
 * What evaluating a task gives: a summary (or what the judge gave), with the spec's warnings when it has any (each a
 * `file:line:column: key.path: message` line, at the line of the user's file), or the error that stopped it.
 */
export type TaskResult<T = SpecSummary> = { status: "ok"; summary: T; warnings?: string[] } | TaskFailure;

/** The error that stopped a task. */
export type TaskFailure = { status: "error"; error: RowError };

/** How a task gets its pieces; `T` is what the judge gives (a batch row's summary). */
export interface EvaluateHooks<T = SpecSummary> {
  /**
   * the text of a spec file, or its bytes (decoded as UTF-8 here, so that bytes that are not UTF-8 are an input error
   * at their position); a thrown error with a `code` (ENOENT…) becomes an input error
   */
  readText(file: string): Promise<string | Uint8Array> | string | Uint8Array;
  /** the spec's JSON Schema (or a function giving it, called only when a task has a variant), so --vary can add keys the file leaves to their defaults */
  schema?: Record<string, unknown> | (() => Record<string, unknown>);
  /** judge a valid spec; `locate` gives positions in the user's file (lines a variant added mapped back) */
  judge(spec: NetworkSpec, locate: (path: SpecPath) => SpecPosition): Promise<T> | T;
}

/** How {@link evaluateText} gets its pieces: those of a task but the reading, and optionally how variants apply. */
export interface TextHooks<T = SpecSummary> extends Omit<EvaluateHooks<T>, "readText"> {
  /** the variant applied to the text (default: varyText with `schema`); `textVarier` parses the text once for many variants */
  vary?: (variant: Variant) => VariedText;
}

function inputError(message: string, position: ErrorPosition): TaskFailure {
  return { status: "error", error: oneProblem("input", message, position) };
}

/**
 * The row error for a spec's issues: the first one with its position and how many more there are, and every one of
 * them (a user fixing a file wants them all at once, as `check` prints them).
 */
export function issuesError(issues: readonly SpecIssue[], originalLine: (line: number) => number = (line) => line): RowError {
  const mapped = issues.map((issue) => (issue.line > 0 ? { ...issue, line: originalLine(issue.line) } : issue));
  const first = mapped[0];
  // a failed parse always carries an issue; the fallback keeps the row's shape
  if (!first) return oneProblem("input", "the spec is not valid", { file: "" });
  const more = mapped.length - 1;
  const message = formatSpecIssue(first) + (more > 0 ? ` (and ${more} more ${more === 1 ? "problem" : "problems"})` : "");
  // on every row of spec problems, one or several, so that a script reads one shape
  const all = mapped.map((issue) => ({ message: formatSpecIssue(issue), position: issuePosition(issue) }));
  return { kind: "input", message, position: issuePosition(first), issues: all };
}

function issuePosition(issue: SpecIssue): ErrorPosition {
  return issue.line > 0 ? { file: issue.file, line: issue.line, column: issue.column } : { file: issue.file };
}

/**
 * An error that names spec paths (check's CheckInputError carries `issues: { path, message }[]`), as
 * positioned issues; undefined for any other error.
 */
function positionedIssues(error: unknown, locate: (path: SpecPath) => SpecPosition, file: string): SpecIssue[] | undefined {
  const issues = (error as { issues?: unknown } | null)?.issues;
  if (!Array.isArray(issues) || issues.length === 0) return undefined;
  for (const issue of issues as unknown[]) {
    const { path, message } = issue as { path?: unknown; message?: unknown };
    if (!Array.isArray(path) || typeof message !== "string") return undefined;
  }
  return positionIssues(locate, issues as { path: SpecPath; message: string }[]).map((issue) => (issue.file ? issue : { ...issue, file }));
}

/**
 * Evaluate one task. Bad files, bad specs and bad --vary keys give input errors with positions;
 * a failure inside the judge gives an internal error. Never throws.
 */
export async function evaluateTask(task: SpecTask, hooks: EvaluateHooks): Promise<TaskResult> {
  const read = await readSpecText(task.file, hooks.readText);
  return typeof read === "string" ? evaluateText(task.file, read, task.variant, hooks) : read;
}

/**
 * The text of a spec file (without a byte-order mark), or the input error that stops it, as every command reads a spec
 * (src/spec's readSpecFile: not a spec's extension, missing, a folder, above the size limit, not UTF-8); `readText`
 * replaces the file system. An error from the reading that is not the file's (no `code`) is an internal error. Never
 * throws.
 */
export async function readSpecText(file: string, readText?: EvaluateHooks["readText"]): Promise<string | TaskFailure> {
  try {
    const read = await readSpecFile(file, readText);
    return read.ok ? read.text : { status: "error", error: issuesError([read.issue]) };
  } catch (error) {
    return { status: "error", error: oneProblem("internal", `${file}: ${error instanceof Error ? error.message : String(error)}`, { file }) };
  }
}

/**
 * Evaluate a spec file's text (from {@link readSpecText}) with a variant applied in memory: `check --vary` reads
 * the file once and evaluates each variant from its text. Never throws.
 */
export async function evaluateText<T = SpecSummary>(file: string, original: string, variant: Variant | null, hooks: TextHooks<T>): Promise<TaskResult<T>> {
  let text = original;
  let originalLine = (line: number): number => line;
  if (variant) {
    try {
      const varied = hooks.vary ? hooks.vary(variant) : varyText(text, variant, typeof hooks.schema === "function" ? hooks.schema() : hooks.schema);
      text = varied.text;
      originalLine = varied.originalLine;
    } catch (error) {
      if (error instanceof VaryError) return inputError(`${file}: ${error.message}`, { file });
      throw error;
    }
  }
  const parsed = parseSpec(text, file);
  if (!parsed.ok) return { status: "error", error: issuesError(parsed.issues, originalLine) };
  const locate = (path: SpecPath): SpecPosition => {
    const at = parsed.locate(path);
    return at.line > 0 ? { ...at, line: originalLine(at.line) } : at;
  };
  try {
    const summary = await hooks.judge(parsed.spec, locate);
    // a spec that loads with a warning (a warm-up past the horizon, a final loss not below ln(classes)) is judged as
    // written; the warning travels with its row, as a plain check prints it
    if (parsed.warnings.length === 0) return { status: "ok", summary };
    const warnings = parsed.warnings.map((issue) => formatSpecIssue(issue.line > 0 ? { ...issue, line: originalLine(issue.line) } : issue));
    return { status: "ok", summary, warnings };
  } catch (error) {
    const located = positionedIssues(error, locate, file);
    if (located) return { status: "error", error: issuesError(located) };
    // a plan option the spec lacks (`batch --plan`, `check --vary --plan`) is the caller's input, as a plain check says
    if (error instanceof UnknownPlanError) return inputError(`${file}: ${error.message}`, { file });
    // the spec's own problems come with positions (above: its graph's issues, a prediction leaving binary64's range);
    // any other error is a failure of headroom itself, as the CLI's commands count it (exit code 3)
    const message = error instanceof Error ? error.message : String(error);
    return { status: "error", error: oneProblem("internal", `${file}: ${message}`, { file }) };
  }
}
