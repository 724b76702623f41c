/**
 * Problems found in a network spec, as plain values, and their one-line rendering.
 * Messages are not sentences: lowercase start, no trailing period.
 */
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

/**
 * The closest candidate to a misspelt word, or undefined when none is close enough to be a likely typo.
 * Comparison ignores case, "_" versus "-", and camelCase versus kebab-case.
 */
export function closestWord(word: string, candidates: readonly string[]): string | undefined {
  const fold = (text: string) => text.replace(/([a-z0-9])([A-Z])/g, "$1-$2").toLowerCase().replace(/_/g, "-");
  const target = fold(word);
  let best: string | undefined;
  let bestDistance = Infinity;
  for (const candidate of candidates) {
    const folded = fold(candidate);
    const distance = folded === target ? 0 : editDistance(target, folded);
    // a prefix or suffix of a long key ("learning" for "learning-rate") is a likely slip as well
    const partial = target.length >= 4 && (folded.startsWith(target) || target.startsWith(folded)) ? 1 : Infinity;
    const score = Math.min(distance, partial);
    if (score < bestDistance) {
      bestDistance = score;
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
