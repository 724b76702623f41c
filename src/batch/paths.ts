/**
 * Turning batch arguments into a list of spec files: files as given, folders searched recursively for
 * *.yaml / *.yml and JSON specs, globs, and `-` for a list of paths read from stdin. The file system is passed in,
 * so this stays pure and testable; the CLI passes node:fs.
 */
import { resolve } from "node:path";
import { globBase, globToRegExp, hasGlob } from "./glob.js";

/** What expansion needs from a file system. */
export interface PathHost {
  /** "file", "folder", or undefined when nothing is there (symbolic links are followed) */
  kind(path: string): "file" | "folder" | "other" | undefined;
  /** the entries of a folder: names only, with whether each is a folder (symbolic links to folders count as "link") */
  list(path: string): readonly { name: string; kind: "file" | "folder" | "link" | "other" }[];
  /**
   * the text of a file, to tell a JSON spec in a folder from the other JSON kept beside specs ({@link isJsonSpec});
   * undefined when it cannot be read. A host without it has every .json file a folder holds read as a spec
   */
  read?(path: string): string | undefined;
}

/** One spec file to evaluate, or an argument that gave none. */
export type BatchInput =
  | { kind: "file"; path: string; argument: string }
  | { kind: "error"; argument: string; message: string };

/** Options of {@link expandInputs}. */
export interface ExpandOptions {
  /** the paths listed on stdin, used for the argument `-` */
  stdinPaths?: readonly string[];
}

// the extensions a spec file may have, as every command reads them (src/spec/parse.ts: JSON is YAML)
const SPEC_FILE = /\.(?:ya?ml|json)$/i;
// a JSON Schema, such as the one `headroom schema` writes beside the specs (specs/network-spec.schema.json): not a spec
const SCHEMA_FILE = /\.schema\.json$/i;
const JSON_FILE = /\.json$/i;

/**
 * Whether a .json file a folder holds is read as a spec: when its top level is a mapping with `layers`, the key every
 * spec has, or when it is not JSON (read as YAML, its row then says what is wrong with it, as for a file that cannot be
 * read: `undefined`). JSON of any other shape kept beside the specs is left out: results saved by `check --json`,
 * `simulate --json` or `scan --json`, recorded statistics, a package.json.
 * @example isJsonSpec('{"name": "mlp", "layers": []}') // => true; isJsonSpec('{"version": 2, "verdict": "fits"}') // => false
 */
export function isJsonSpec(text: string | undefined): boolean {
  if (text === undefined) return true;
  let value: unknown;
  try {
    value = JSON.parse(text.charCodeAt(0) === 0xfeff ? text.slice(1) : text);
  } catch {
    return true;
  }
  return typeof value === "object" && value !== null && !Array.isArray(value) && Object.hasOwn(value, "layers");
}

/** Split text read from stdin into paths: one per line; blank lines and lines starting with `#` are skipped. */
export function pathsFromText(text: string): string[] {
  return text
    .split(/\r?\n/)
    .map((line) => line.trim())
    .filter((line) => line !== "" && !line.startsWith("#"));
}

function joinPath(folder: string, name: string): string {
  if (folder === ".") return name;
  return folder.endsWith("/") ? folder + name : `${folder}/${name}`;
}

// byte order, not locale order: the same listing on every machine
const byName = (a: { name: string }, b: { name: string }): number => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0);

/**
 * Every *.yaml / *.yml file below `folder` and every *.json file that is a spec ({@link isJsonSpec}; never a JSON
 * Schema, *.schema.json), sorted, depth first. Folders whose names start with "." and node_modules are skipped;
 * symbolic links to folders are not followed (they could loop).
 */
export function specFilesIn(host: PathHost, folder: string): string[] {
  const found: string[] = [];
  const walk = (dir: string): void => {
    for (const entry of [...host.list(dir)].sort(byName)) {
      const path = joinPath(dir, entry.name);
      if (entry.kind === "folder") {
        if (!entry.name.startsWith(".") && entry.name !== "node_modules") walk(path);
      } else if (SPEC_FILE.test(entry.name) && !SCHEMA_FILE.test(entry.name) && (entry.kind === "file" || (entry.kind === "link" && host.kind(path) === "file"))) {
        if (!JSON_FILE.test(entry.name) || host.read === undefined || isJsonSpec(host.read(path))) found.push(path);
      }
    }
  };
  walk(folder);
  return found;
}

/** Every path matching a glob, sorted. A folder matched by the glob contributes its spec files. */
export function globFiles(host: PathHost, pattern: string): string[] {
  const normalized = pattern.replaceAll("\\", "/").replace(/^(?:\.\/)+/, "");
  const { base } = globBase(normalized);
  if (host.kind(base) !== "folder") return [];
  const matcher = globToRegExp(normalized);
  const found: string[] = [];
  const walk = (dir: string): void => {
    for (const entry of [...host.list(dir)].sort(byName)) {
      const path = joinPath(dir, entry.name);
      if (entry.kind === "folder") {
        if (matcher.test(path)) found.push(...specFilesIn(host, path));
        else if (!entry.name.startsWith(".") && entry.name !== "node_modules") walk(path);
      } else if (matcher.test(path) && (entry.kind === "file" || host.kind(path) === "file")) {
        found.push(path);
      }
    }
  };
  walk(base === "." ? "." : base);
  return found;
}

/**
 * Expand batch arguments in order. A path that exists is used as it is (a file, even without a
 * .yaml extension, or a folder); otherwise an argument with `*` or `?` is a glob. An argument that
 * gives no file becomes an error entry, so one bad argument never stops the others.
 * A file reached twice is listed once, at its first place.
 */
export function expandInputs(host: PathHost, args: readonly string[], options: ExpandOptions = {}): BatchInput[] {
  const out: BatchInput[] = [];
  const seen = new Set<string>();
  const addFile = (path: string, argument: string): void => {
    // one file however it is written: ./a.yaml, specs//a.yaml, specs/../specs/a.yaml, or its absolute path
    const key = resolve(path);
    if (seen.has(key)) return;
    seen.add(key);
    out.push({ kind: "file", path, argument });
  };
  const expandOne = (argument: string): void => {
    const kind = host.kind(argument);
    if (kind === "file") return addFile(argument, argument);
    if (kind === "folder") {
      const files = specFilesIn(host, argument);
      if (files.length === 0) {
        out.push({ kind: "error", argument, message: `${argument}: the folder holds no .yaml or .yml files, nor .json specs` });
      }
      for (const file of files) addFile(file, argument);
      return;
    }
    if (kind === "other") {
      out.push({ kind: "error", argument, message: `${argument}: not a file or folder` });
      return;
    }
    if (hasGlob(argument)) {
      const files = globFiles(host, argument);
      if (files.length === 0) out.push({ kind: "error", argument, message: `${argument}: no file matches this pattern` });
      for (const file of files) addFile(file, argument);
      return;
    }
    out.push({ kind: "error", argument, message: `${argument}: no such file or folder` });
  };
  let stdinUsed = false;
  for (const argument of args) {
    if (argument === "-") {
      if (stdinUsed) continue;
      stdinUsed = true;
      for (const path of options.stdinPaths ?? []) expandOne(path);
    } else {
      expandOne(argument);
    }
  }
  return out;
}
