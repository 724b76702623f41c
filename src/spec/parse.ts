/** YAML (or JSON) text in; a validated, normalized NetworkSpec out, or every problem of the file with its position. */
import { readFile, stat } from "node:fs/promises";
import type { Stats } from "node:fs";
import type { Document, LineCounter } from "yaml";
import { crossChecks } from "./checks.js";
import { formatSpecPath, type SpecIssue, type SpecPosition } from "./issues.js";
import { locateIn } from "./locate.js";
import { errorMap, flattenIssues, type RawIssue } from "./messages.js";
import { normalizeSpec } from "./normalize.js";
import { readPlainYaml } from "./plain-yaml.js";
import { yamlLib } from "./yaml-lib.js";
import { keepProtoEntries, specSchema, type RawSpec } from "./schema.js";
import { decodeSpecBytes } from "./text.js";
import { validPlainSpec } from "./validate.js";
import type { NetworkSpec, SpecPath } from "./types.js";

/** What parsing a spec gives: the spec with a way back to positions, or every problem found. */
export type SpecResult =
  | { ok: true; spec: NetworkSpec; locate: (path: SpecPath) => SpecPosition; warnings: SpecIssue[] }
  | { ok: false; issues: SpecIssue[] };

/** Largest spec file accepted, in bytes (YAML parses at about 1.5 MB/s; real specs are a few kB). */
export const MAX_SPEC_BYTES = 10 * 1024 * 1024;

/**
 * How many alias expansions a document may make. The yaml library's default (100) refuses "billion laughs"
 * documents within milliseconds; specs have no need for more (reuse layers through `blocks` instead).
 */
const MAX_ALIAS_COUNT = 100;

/** An issue of the file as a whole: no position (line 0), no key path. */
function wholeFileIssue(file: string, message: string): SpecIssue {
  return { file, line: 0, column: 0, path: "", message };
}

/** The first line of a yaml library message, without its own position suffix, lowercase. */
function yamlMessage(message: string): string {
  const first = (message.split("\n")[0] ?? message).replace(/ at line \d+, column \d+:?\s*$/, "").replace(/[.:]\s*$/, "");
  return first.charAt(0).toLowerCase() + first.slice(1);
}

function byPosition(a: SpecIssue, b: SpecIssue): number {
  return a.line - b.line || a.column - b.column || a.path.localeCompare(b.path);
}

/**
 * Parse and validate a spec from its text. `source` names the file in messages (and gives the spec's
 * default name). Never throws for bad input: problems come back as issues, all of them at once.
 * @example parseSpec("input: { features: 784 }\n...", "mlp.yaml") // => { ok: true, spec, locate, warnings }
 */
export function parseSpec(text: string, source: string): SpecResult {
  if (typeof text !== "string") throw new TypeError(`parseSpec needs the text of a spec, got ${typeof text}`);
  if (typeof source !== "string") throw new TypeError(`parseSpec needs the file name the text comes from, for messages, got ${typeof source}`);
  // most specs are plain YAML: read them fast and build the positioned document only when a position is asked
  // for; a spec with any problem goes the full way, so its issues are exactly those of the yaml library's path
  const plain = readPlainYaml(text);
  let parsed: Parsed | undefined;
  if (plain !== null && typeof plain === "object" && !Array.isArray(plain)) {
    const fast = validateSpec(plain as Record<string, unknown>, source, () => (parsed ??= parseWithPositions(text)));
    if (fast.ok) return fast;
  }
  return parseYaml(text, source, parsed);
}

interface Parsed {
  doc: Document;
  counter: LineCounter;
}

function parseWithPositions(text: string, uniqueKeys = true): Parsed {
  const yaml = yamlLib();
  const counter = new yaml.LineCounter();
  const doc = yaml.parseDocument(text, { lineCounter: counter, merge: true, uniqueKeys, prettyErrors: true });
  return { doc: doc as Document, counter };
}

/** The yaml library's way: every YAML problem with its position, then the spec's. */
function parseYaml(text: string, source: string, parsed = parseWithPositions(text)): SpecResult {
  const { doc, counter } = parsed;
  if (doc.errors.length > 0) {
    const issues = doc.errors.map((error) => {
      const issue = {
        file: source,
        line: error.linePos?.[0]?.line ?? 0,
        column: error.linePos?.[0]?.col ?? 0,
        path: "",
        message:
          error.code === "MULTIPLE_DOCS"
            ? "yaml: a spec is one document, and this file has more than one (a second '---' line)"
            : /maximum call stack size exceeded/i.test(error.message)
              ? "yaml: the document nests too deeply to read here (a spec needs a few levels of lists and mappings)"
              : `yaml: ${yamlMessage(error.message)}`,
      };
      return error.code === "DUPLICATE_KEY" ? { ...issue, ...duplicateKey(doc, counter, error.pos[0]) } : issue;
    })
      // the library can report one place once per construct it lies in (an unclosed `{` of a truncated JSON file: "flow
      // map in block collection must ... end with a }", then "flow map must end with a }"): one line per place, the first
      .filter((issue, index, all) => all.findIndex((other) => other.line === issue.line && other.column === issue.column) === index);
    // a key written twice leaves the document readable: the rest of the spec is still checked, so every problem of the
    // file is reported at once (the later value of the key is the one checked, as a YAML reader keeping one would)
    if (doc.errors.every((error) => error.code === "DUPLICATE_KEY")) {
      const relaxed = parseWithPositions(text, false);
      if (relaxed.doc.errors.length === 0) {
        const rest = parseYaml(text, source, relaxed);
        if (!rest.ok) issues.push(...rest.issues.filter((other) => !issues.some((i) => i.line === other.line && i.column === other.column)));
      }
    }
    return { ok: false, issues: issues.sort(byPosition) };
  }
  let data: unknown;
  try {
    data = doc.toJS({ maxAliasCount: MAX_ALIAS_COUNT });
  } catch (error) {
    // the yaml library finds an alias without an anchor and a merge of a non-map only while building values, and
    // names no position: find them in the document, each where it is written
    const structural = aliasAndMergeIssues(doc, counter, source);
    if (structural.length > 0) return { ok: false, issues: structural };
    if (error instanceof ReferenceError || error instanceof RangeError) {
      return { ok: false, issues: [wholeFileIssue(source, `refused: the document expands aliases too many times (more than ${MAX_ALIAS_COUNT}); reuse layers with blocks instead`)] };
    }
    // the YAML library checks merge keys (`<<`) only while building values, e.g. a merge of a scalar
    const reason = error instanceof Error ? error.message : String(error);
    return { ok: false, issues: [wholeFileIssue(source, `yaml: ${reason.charAt(0).toLowerCase()}${reason.slice(1).replace(/\.$/, "")}`)] };
  }
  if (data === null || data === undefined) {
    return { ok: false, issues: [{ file: source, line: 1, column: 1, path: "", message: "the spec is empty: it needs at least input, training and layers" }] };
  }
  if (typeof data !== "object" || Array.isArray(data)) {
    const at = locateIn(doc, counter, []);
    const got = Array.isArray(data) ? "a list" : `${JSON.stringify(data)}`;
    return {
      ok: false,
      issues: [{ file: source, line: at.line, column: at.column, path: "", message: `a spec is a mapping of keys (input, training, layers, …), got ${got}` }],
    };
  }
  return validateSpec(data as Record<string, unknown>, source, () => parsed);
}

/** Every node of the document with its key path (aliases not followed). */
function* nodesOf(node: unknown, path: SpecPath = [], mergeSource = false): Generator<{ node: unknown; path: SpecPath; mergeSource: boolean }> {
  yield { node, path, mergeSource };
  const yaml = yamlLib();
  if (yaml.isMap(node)) {
    for (const pair of node.items) {
      const key = yaml.isScalar(pair.key) ? pair.key : undefined;
      // with merge keys on, `<<` has a symbol value; its source text stays "<<"
      if (key !== undefined && (key as { source?: unknown }).source === "<<" && typeof key.value !== "string") {
        const sources = yaml.isSeq(pair.value) ? pair.value.items.map((item, index) => ({ item, at: [...path, "<<", index] })) : [{ item: pair.value, at: [...path, "<<"] }];
        for (const { item, at } of sources) yield* nodesOf(item, at, true);
        continue;
      }
      yield* nodesOf(pair.value, [...path, key === undefined ? String(pair.key) : String(key.value)]);
    }
  } else if (yaml.isSeq(node)) {
    for (let index = 0; index < node.items.length; index++) yield* nodesOf(node.items[index], [...path, index]);
  }
}

/** The key path and message of a key written twice in one mapping (YAML 1.2.2 §3.2.1.1: keys are unique), found at `offset`. */
function duplicateKey(doc: Document, counter: LineCounter, offset: number): { path: string; message: string } | undefined {
  const yaml = yamlLib();
  for (const { node, path } of nodesOf(doc.contents)) {
    if (!yaml.isMap(node)) continue;
    const index = node.items.findIndex((pair) => (pair.key as { range?: number[] } | null)?.range?.[0] === offset);
    if (index < 0) continue;
    const key = node.items[index]!.key;
    const name = yaml.isScalar(key) ? key.value : undefined;
    if (typeof name !== "string" && typeof name !== "number" && typeof name !== "boolean") return undefined;
    const first = node.items.find((pair) => yaml.isScalar(pair.key) && pair.key.value === name)?.key as { range?: number[] } | undefined;
    const start = first?.range?.[0];
    const at = start === undefined ? undefined : counter.linePos(start);
    const where = at ? ` (first at line ${at.line}, column ${at.col})` : "";
    return { path: formatSpecPath([...path, String(name)]), message: `yaml: the key ${JSON.stringify(String(name))} is written twice in one mapping${where}; keep one` };
  }
  return undefined;
}

/** Aliases that name no anchor written before them, and merge keys (`<<`) given something else than mappings. */
function aliasAndMergeIssues(doc: Document, counter: LineCounter, source: string): SpecIssue[] {
  const yaml = yamlLib();
  const issues: SpecIssue[] = [];
  for (const { node, path, mergeSource } of nodesOf(doc.contents)) {
    const range = (node as { range?: [number, number, number] } | null)?.range;
    const at = counter.linePos(range?.[0] ?? 0);
    const issue = (message: string): void => {
      issues.push({ file: source, line: at.line, column: at.col, path: formatSpecPath(path), message });
    };
    const target = yaml.isAlias(node) ? node.resolve(doc) : node;
    if (yaml.isAlias(node) && target === undefined) {
      issue(`yaml: the alias *${node.source} names no anchor: write &${node.source} on a value before it`);
    } else if (mergeSource && !yaml.isMap(target)) {
      issue("yaml: merge sources must be maps or map aliases: `<<` takes a mapping, an alias of one, or a list of those");
    }
  }
  return issues.sort(byPosition);
}

/** Validate and normalize the plain data of a spec; `parsed` gives the positioned document when an issue needs it. */
function validateSpec(document: Record<string, unknown>, source: string, parsed: () => Parsed): SpecResult {
  // top-level keys starting with "x-" are the user's own (a place to keep YAML anchors); they are ignored
  const data = Object.fromEntries(Object.entries(document).filter(([key]) => !key.startsWith("x-")));
  const toIssue = (raw: RawIssue): SpecIssue => {
    const { doc, counter } = parsed();
    const at = locateIn(doc, counter, raw.path, raw.atKey);
    return { file: source, line: at.line, column: at.column, path: formatSpecPath(raw.path), message: raw.message };
  };
  const cross = crossChecks(data);
  // a valid spec needs no zod (validate.ts gives what zod's parse would); anything else gets zod's messages
  const fast = cross.errors.length === 0 ? validPlainSpec(data) : undefined;
  if (fast !== undefined) return validSpec(fast, source, parsed, cross.warnings.map(toIssue));
  const checked = specSchema().safeParse(data, { error: errorMap, reportInput: true });
  const kept = keepProtoEntries(data, checked.success ? checked.data : undefined, { error: errorMap, reportInput: true });
  const errors = [
    ...(checked.success ? [] : flattenIssues(checked.error.issues)),
    ...kept.flatMap((entry) => flattenIssues(entry.issues, entry.path)),
    ...cross.errors,
  ].map(toIssue);
  if (errors.length > 0 || !checked.success) return { ok: false, issues: dedupe(errors).sort(byPosition) };
  return validSpec(checked.data, source, parsed, cross.warnings.map(toIssue));
}

/** The result for a spec that passed validation and the cross-key checks. */
function validSpec(raw: RawSpec, source: string, parsed: () => Parsed, warnings: SpecIssue[]): SpecResult {
  return {
    ok: true,
    spec: normalizeSpec(raw, source),
    locate: (path: SpecPath) => {
      const { doc, counter } = parsed();
      const at = locateIn(doc, counter, path);
      return { file: source, line: at.line, column: at.column };
    },
    warnings: warnings.sort(byPosition),
  };
}

function dedupe(issues: SpecIssue[]): SpecIssue[] {
  const seen = new Set<string>();
  return issues.filter((issue) => {
    const key = `${issue.line}:${issue.column}:${issue.path}:${issue.message}`;
    if (seen.has(key)) return false;
    seen.add(key);
    return true;
  });
}

const FOLDER_MESSAGE = "a folder, not a spec file: a spec is one .yaml, .yml or .json file (headroom batch checks every spec in a folder)";

/** What reading a spec file gives: its text (without a byte-order mark), or the issue that stops it. */
export type SpecFileText = { ok: true; text: string } | { ok: false; issue: SpecIssue };

/**
 * How a spec file's bytes (or text) are read when not from the file system as loadSpec reads them (a batch worker's
 * synchronous read, a test's files in memory); a thrown error with a `code` (ENOENT…) is an issue of the file.
 */
export type SpecFileRead = (path: string) => Promise<string | Uint8Array> | string | Uint8Array;

function fileIssue(file: string, message: string): SpecFileText {
  return { ok: false, issue: wholeFileIssue(file, message) };
}

function tooLarge(file: string, bytes: number): SpecFileText {
  return fileIssue(file, `the file has ${bytes} bytes, above the limit of ${MAX_SPEC_BYTES} bytes (10 MiB) for a spec`);
}

/**
 * The text of a spec file (.yaml, .yml or .json, at most 10 MiB, UTF-8, without a byte-order mark), or the issue that
 * stops it, for every command and the batch workers alike. The file system is looked at first, so that a folder and
 * a file above the limit are said without reading them; `read` replaces the reading (and that look). Never throws for
 * a bad or missing file; an error without a `code` from the reading is thrown on.
 */
export async function readSpecFile(path: string, read?: SpecFileRead): Promise<SpecFileText> {
  // one look at the path serves every answer below; a failed look is answered as the read would be
  let info: Stats | undefined;
  let statError: unknown;
  if (read === undefined) {
    try {
      info = await stat(path);
    } catch (error) {
      statError = error;
    }
  }
  // a folder given where a spec is expected: say so, not that it lacks an extension
  if (info?.isDirectory()) return fileIssue(path, FOLDER_MESSAGE);
  if (!/\.(ya?ml|json)$/i.test(path)) {
    const extension = /\.[^./\\]*$/.exec(path)?.[0];
    // a path with no extension that is not there at all is more likely a mistyped folder than a spec without extension
    if (extension === undefined && read === undefined && info === undefined) return fileIssue(path, "no such file or folder");
    return fileIssue(path, `${extension ? `unsupported extension "${extension}"` : "no file extension"}: a spec is a .yaml, .yml or .json file`);
  }
  let content: string | Uint8Array;
  try {
    if (read !== undefined) {
      content = await read(path);
    } else {
      if (info === undefined) throw statError;
      if (!info.isFile()) return fileIssue(path, "not a file");
      if (info.size > MAX_SPEC_BYTES) return tooLarge(path, info.size);
      content = await readFile(path);
    }
  } catch (error) {
    const code = (error as { code?: unknown } | null)?.code;
    if (code === "ENOENT") return fileIssue(path, "no such file");
    if (code === "EACCES" || code === "EPERM") return fileIssue(path, "permission denied");
    if (code === "EISDIR") return fileIssue(path, FOLDER_MESSAGE);
    // Node's own limit on a whole-file read (2 GiB), far above the spec's
    if (code === "ERR_FS_FILE_TOO_LARGE") return fileIssue(path, `the file is above the limit of ${MAX_SPEC_BYTES} bytes (10 MiB) for a spec`);
    if (typeof code === "string") return fileIssue(path, `cannot read the file (${code})`);
    throw error;
  }
  if (typeof content === "string") {
    const bytes = Buffer.byteLength(content, "utf8");
    if (bytes > MAX_SPEC_BYTES) return tooLarge(path, bytes);
    return { ok: true, text: content.charCodeAt(0) === 0xfeff ? content.slice(1) : content };
  }
  if (content.length > MAX_SPEC_BYTES) return tooLarge(path, content.length);
  const decoded = decodeSpecBytes(content, path);
  return decoded.ok ? { ok: true, text: decoded.text } : { ok: false, issue: decoded.issue };
}

/**
 * Read a spec file (.yaml, .yml or .json, at most 10 MiB) and parse it. Never throws for a bad or missing
 * file: that too comes back as an issue; a path that is not a string is a TypeError.
 */
export async function loadSpec(path: string): Promise<SpecResult> {
  if (typeof path !== "string") throw new TypeError(`loadSpec needs the path of a spec file, got ${path === null ? "null" : typeof path}`);
  const read = await readSpecFile(path);
  return read.ok ? parseSpec(read.text, path) : { ok: false, issues: [read.issue] };
}
