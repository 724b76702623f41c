/**
 * One batch task: a spec file (and a variant of it), read, varied, validated and judged, always
 * ending in a row, never in an exception. The reading and the judging are passed in, so the worker
 * thread, the library and the tests share this code.
 */
import { formatSpecIssue, formatSpecPath, parseSpec, type NetworkSpec, type SpecIssue, type SpecPath, type SpecPosition } from "../spec/index.js";
import type { RowError, SpecSummary } from "./types.js";
import { varyText, VaryError, type Variant } from "./vary.js";

/** What a worker is asked to evaluate. */
export interface SpecTask {
  /** the spec file, as the user named it */
  file: string;
  /** the variant to apply, or null for the file as it is */
  variant: Variant | null;
}

/** What evaluating a task gives: a summary, or the error that stopped it. */
export type TaskResult = { status: "ok"; summary: SpecSummary } | { status: "error"; error: RowError };

/** How a task gets its pieces. */
export interface EvaluateHooks {
  /** the text of a spec file; a thrown error with a `code` (ENOENT…) becomes an input error */
  readText(file: string): Promise<string> | string;
  /** the spec's JSON Schema (or a function giving it, called only when a task has a variant), so --vary can add keys the file leaves to their defaults */
  schema?: Record<string, unknown> | (() => Record<string, unknown>);
  /** judge a valid spec */
  judge(spec: NetworkSpec): Promise<SpecSummary> | SpecSummary;
}

/** Files larger than this are refused before reading (the spec loader's limit). */
const MAX_SPEC_BYTES = 10 * 1024 * 1024;

function inputError(message: string, position?: RowError["position"]): TaskResult {
  return { status: "error", error: position ? { kind: "input", message, position } : { kind: "input", message } };
}

/** The row error for a spec's issues: the first one with its position, and how many more there are. */
export function issuesError(issues: readonly SpecIssue[], originalLine: (line: number) => number = (line) => line): RowError {
  const mapped = issues.map((issue) => (issue.line > 0 ? { ...issue, line: originalLine(issue.line) } : issue));
  const first = mapped[0];
  if (!first) return { kind: "input", message: "the spec is not valid" };
  const more = mapped.length - 1;
  const message = formatSpecIssue(first) + (more > 0 ? ` (and ${more} more ${more === 1 ? "problem" : "problems"})` : "");
  return first.line > 0
    ? { kind: "input", message, position: { file: first.file, line: first.line, column: first.column } }
    : { kind: "input", message, position: { file: first.file } };
}

function readError(file: string, error: unknown): TaskResult {
  const code = (error as { code?: unknown } | null)?.code;
  const words: Record<string, string> = {
    ENOENT: "no such file",
    EACCES: "permission denied",
    EPERM: "permission denied",
    EISDIR: "not a file",
    ERR_FS_FILE_TOO_LARGE: "the file is too large",
  };
  if (typeof code === "string") return inputError(`${file}: ${words[code] ?? `cannot read the file (${code})`}`, { file });
  return { status: "error", error: { kind: "internal", message: `${file}: ${error instanceof Error ? error.message : String(error)}` } };
}

/**
 * An error that names spec paths (check's CheckInputError carries `issues: { path, message }[]`), as
 * positioned issues; undefined for any other error.
 */
function positionedIssues(error: unknown, locate: (path: SpecPath) => SpecPosition, file: string): SpecIssue[] | undefined {
  const issues = (error as { issues?: unknown } | null)?.issues;
  if (!Array.isArray(issues) || issues.length === 0) return undefined;
  const out: SpecIssue[] = [];
  for (const issue of issues as unknown[]) {
    const path = (issue as { path?: unknown }).path;
    const message = (issue as { message?: unknown }).message;
    if (!Array.isArray(path) || typeof message !== "string") return undefined;
    const at = locate(path as SpecPath);
    out.push({ ...at, file: at.file || file, path: formatSpecPath(path as SpecPath), message });
  }
  return out;
}

/**
 * Evaluate one task. Bad files, bad specs and bad --vary keys give input errors with positions;
 * a failure inside the judge gives an internal error. Never throws.
 */
export async function evaluateTask(task: SpecTask, hooks: EvaluateHooks): Promise<TaskResult> {
  if (!/\.(ya?ml|json)$/i.test(task.file)) {
    return inputError(`${task.file}: a spec is a .yaml, .yml or .json file`, { file: task.file });
  }
  let text: string;
  try {
    text = await hooks.readText(task.file);
  } catch (error) {
    return readError(task.file, error);
  }
  if (text.length > MAX_SPEC_BYTES) {
    return inputError(`${task.file}: the file is above the limit of ${MAX_SPEC_BYTES} bytes (10 MiB) for a spec`, { file: task.file });
  }
  if (text.charCodeAt(0) === 0xfeff) text = text.slice(1);
  let originalLine = (line: number): number => line;
  if (task.variant) {
    try {
      const schema = typeof hooks.schema === "function" ? hooks.schema() : hooks.schema;
      const varied = varyText(text, task.variant, schema);
      text = varied.text;
      originalLine = varied.originalLine;
    } catch (error) {
      if (error instanceof VaryError) return inputError(`${task.file}: ${error.message}`, { file: task.file });
      throw error;
    }
  }
  const parsed = parseSpec(text, task.file);
  if (!parsed.ok) return { status: "error", error: issuesError(parsed.issues, originalLine) };
  try {
    return { status: "ok", summary: await hooks.judge(parsed.spec) };
  } catch (error) {
    const located = positionedIssues(error, parsed.locate, task.file);
    if (located) return { status: "error", error: issuesError(located, originalLine) };
    const message = error instanceof Error ? error.message : String(error);
    // library functions throw RangeError for values the spec allowed but the model cannot take;
    // anything else is a failure of headroom itself
    const kind = error instanceof RangeError ? "input" : "internal";
    return { status: "error", error: { kind, message: `${task.file}: ${message}` } };
  }
}
