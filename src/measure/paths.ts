/**
 * Expanding the file arguments of a scan: plain paths pass through; a pattern with `*`, `?` or `[...]` (a sharded
 * checkpoint such as `shards/part-*.safetensors`, quoted so the shell leaves it alone) is matched against the folders,
 * and `**` matches any number of folders.
 */
import { readdir } from "node:fs/promises";
import { join } from "node:path";
import type { ScanIssue } from "./types.js";

/** Whether a path contains glob characters. */
export function isPattern(path: string): boolean {
  return /[*?[]/.test(path);
}

/** A glob segment as a regular expression: `*` any run within a name, `?` one character, `[...]` a class. */
export function segmentPattern(segment: string): RegExp {
  let source = "";
  for (let i = 0; i < segment.length; i++) {
    const c = segment[i]!;
    if (c === "*") source += "[^/]*";
    else if (c === "?") source += "[^/]";
    else if (c === "[") {
      const close = segment.indexOf("]", i + 2);
      if (close < 0) source += "\\[";
      else {
        let body = segment.slice(i + 1, close);
        if (body.startsWith("!")) body = "^" + body.slice(1);
        source += "[" + body.replace(/\\/g, "\\\\") + "]";
        i = close;
      }
    } else source += c.replace(/[.+^${}()|\\\]]/g, "\\$&");
  }
  return new RegExp(`^${source}$`);
}

/**
 * Expand patterns into files, in sorted order within each pattern, without duplicates.
 * A pattern matching nothing becomes an issue (the other arguments still count).
 */
export async function expandPaths(args: readonly string[]): Promise<{ paths: string[]; issues: ScanIssue[] }> {
  const paths: string[] = [];
  const seen = new Set<string>();
  const issues: ScanIssue[] = [];
  for (const arg of args) {
    const matches = isPattern(arg) ? await expand(arg) : [arg];
    if (matches.length === 0) issues.push({ file: arg, message: "no file matches this pattern" });
    for (const match of matches) {
      if (!seen.has(match)) {
        seen.add(match);
        paths.push(match);
      }
    }
  }
  return { paths, issues };
}

async function expand(pattern: string): Promise<string[]> {
  const absolute = pattern.startsWith("/");
  const segments = pattern.split(/[\\/]+/).filter((s) => s !== "");
  // a trailing ** means every file below
  if (segments[segments.length - 1] === "**") segments.push("*");
  const results: string[] = [];
  await walk(absolute ? "/" : "", segments, results);
  return results.sort();
}

async function walk(base: string, segments: readonly string[], out: string[]): Promise<void> {
  if (segments.length === 0) {
    if (base !== "") out.push(base);
    return;
  }
  const [segment, ...rest] = segments as [string, ...string[]];
  if (!isPattern(segment)) {
    await walk(base === "" ? segment : join(base, segment), rest, out);
    return;
  }
  let entries;
  try {
    entries = await readdir(base === "" ? "." : base, { withFileTypes: true });
  } catch {
    return;
  }
  entries.sort((a, b) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
  if (segment === "**") {
    await walk(base, rest, out);
    for (const entry of entries) {
      if (entry.isDirectory() && !entry.name.startsWith(".")) await walk(join(base, entry.name), segments, out);
    }
    return;
  }
  const regex = segmentPattern(segment);
  for (const entry of entries) {
    if (entry.name.startsWith(".") && !segment.startsWith(".")) continue;
    if (!regex.test(entry.name)) continue;
    const path = base === "" ? entry.name : join(base, entry.name);
    if (rest.length === 0) {
      if (!entry.isDirectory()) out.push(path);
    } else if (entry.isDirectory()) await walk(path, rest, out);
  }
}
