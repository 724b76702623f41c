/**
 * Problems found in a network spec, as plain values, and their one-line rendering.
 * Messages are not sentences: lowercase start, no trailing period.
 */
import { findAlias } from "../formats/names.js";
import type { SpecPath } from "./types.js";

/** A place in a spec file; line and column are 1-based (0 when the problem concerns the file as a whole). */
export interface SpecPosition {
  file: string;
  line: number;
  column: number;
}

/** One problem (or warning) in a spec, with where it is and the key path it concerns. */
export interface SpecIssue extends SpecPosition {
  /** the YAML key path, e.g. "layers[3].head-width"; "" for the document as a whole */
  path: string;
  message: string;
}

/**
 * Render a key path the way a reader finds it in the YAML: `layers[3].head-width`.
 * @example formatSpecPath(["layers", 3, "width"]) // => "layers[3].width"
 */
export function formatSpecPath(path: SpecPath): string {
  let text = "";
  for (const segment of path) {
    if (typeof segment === "number") text += `[${segment}]`;
    else if (/^[A-Za-z0-9_$-]+$/.test(segment)) text += text === "" ? segment : `.${segment}`;
    else text += `[${JSON.stringify(segment)}]`;
  }
  return text;
}

/**
 * One line per issue: `file:line:column: path: message`; the position is left out when it is unknown (line 0)
 * and the path when the issue concerns the whole document.
 * @example formatSpecIssue({ file: "a.yaml", line: 4, column: 12, path: "layers[1].width", message: "must be at least 1, got 0" })
 * // => "a.yaml:4:12: layers[1].width: must be at least 1, got 0"
 */
export function formatSpecIssue(issue: SpecIssue): string {
  const where = issue.line > 0 ? `${issue.file}:${issue.line}:${issue.column}` : issue.file;
  return issue.path === "" ? `${where}: ${issue.message}` : `${where}: ${issue.path}: ${issue.message}`;
}

/**
 * Issues that name spec paths (the problems of a network that cannot be built: check's CheckInputError, the graph's
 * issues), positioned in the spec's file by the loaded spec's `locate` (file:line:column) and their paths rendered.
 * @example positionIssues(loaded.locate, [{ path: ["layers", 1, "width"], message: "must be at least 1, got 0" }])
 * // => [{ file: "a.yaml", line: 4, column: 12, path: "layers[1].width", message: "must be at least 1, got 0" }]
 */
export function positionIssues(locate: (path: SpecPath) => SpecPosition, issues: readonly { path: SpecPath; message: string }[]): SpecIssue[] {
  return issues.map((issue) => ({ ...locate(issue.path), path: formatSpecPath(issue.path), message: issue.message }));
}

/** Edit distance (insertions, deletions, substitutions, adjacent swaps), for "did you mean" hints. */
function editDistance(a: string, b: string): number {
  const rows = a.length + 1;
  const cols = b.length + 1;
  const d: number[][] = Array.from({ length: rows }, (_, i) => Array.from({ length: cols }, (_, j) => (i === 0 ? j : j === 0 ? i : 0)));
  for (let i = 1; i < rows; i++) {
    for (let j = 1; j < cols; j++) {
      const cost = a[i - 1] === b[j - 1] ? 0 : 1;
      let best = Math.min(d[i - 1]![j]! + 1, d[i]![j - 1]! + 1, d[i - 1]![j - 1]! + cost);
      if (i > 1 && j > 1 && a[i - 1] === b[j - 2] && a[i - 2] === b[j - 1]) best = Math.min(best, d[i - 2]![j - 2]! + 1);
      d[i]![j] = best;
    }
  }
  return d[a.length]![b.length]!;
}

/** How many leading characters two strings share. */
function sharedPrefix(a: string, b: string): number {
  let i = 0;
  while (i < a.length && i < b.length && a[i] === b[i]) i++;
  return i;
}

/**
 * The closest candidate to a misspelt word, or undefined when none is close enough to be a likely typo.
 * Comparison ignores case, "_" versus "-", and camelCase versus kebab-case. Of equally close candidates, one with
 * the word's own letters wins (a swap: "binary61" → "binary16", not "binary64"), then the one sharing the longest
 * start with the word ("e4m2" → "e4m3", not "e5m2": a slip is likelier late in a word than in its first letters;
 * common practice), then the first in the list.
 */
export function closestWord(word: string, candidates: readonly string[]): string | undefined {
  const fold = (text: string) => text.replace(/([a-z0-9])([A-Z])/g, "$1-$2").toLowerCase().replace(/_/g, "-");
  const target = fold(word);
  const letters = (text: string) => [...text].sort().join("");
  const targetLetters = letters(target);
  let best: string | undefined;
  let bestDistance = Infinity;
  let bestSameLetters = false;
  let bestPrefix = -1;
  for (const candidate of candidates) {
    const folded = fold(candidate);
    const distance = folded === target ? 0 : editDistance(target, folded);
    // a prefix or suffix of a long key ("learning" for "learning-rate") is a likely slip as well
    const partial = target.length >= 4 && (folded.startsWith(target) || target.startsWith(folded)) ? 1 : Infinity;
    const score = Math.min(distance, partial);
    if (score > bestDistance) continue;
    const sameLetters = letters(folded) === targetLetters;
    const prefix = sharedPrefix(target, folded);
    const better =
      score < bestDistance ||
      (sameLetters && !bestSameLetters) ||
      (sameLetters === bestSameLetters && prefix > bestPrefix);
    if (better) {
      bestDistance = score;
      bestSameLetters = sameLetters;
      bestPrefix = prefix;
      best = candidate;
    }
  }
  const allowed = Math.max(1, Math.min(3, Math.floor(target.length / 3)));
  return bestDistance <= allowed ? best : undefined;
}

/** ` (did you mean "x"?)` or "" when nothing is close. */
export function didYouMean(word: string, candidates: readonly string[]): string {
  const near = closestWord(word, candidates);
  return near === undefined ? "" : ` (did you mean "${near}"?)`;
}

/**
 * ` (did you mean "x"?)` for a misspelt format name, or "": another spelling of a format (FORMAT_ALIASES, accepted
 * or not) names it, else the nearest of `candidates`. One hint for specs and command-line lists alike.
 * @example didYouMeanFormat("f16", FORMAT_NAMES) // => ' (did you mean "binary16"?)'
 */
export function didYouMeanFormat(word: string, candidates: readonly string[]): string {
  const alias = findAlias(word)?.format;
  if (alias !== undefined && candidates.includes(alias)) return ` (did you mean "${alias}"?)`;
  return didYouMean(word, candidates);
}
