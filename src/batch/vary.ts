/**
 * Variations without writing files: `--vary KEY=V1,V2,...` sets a value in the spec document before
 * validation; several options give their cross product. KEY is a dotted path with [index] for lists,
 * e.g. `training.batch`, `layers[2].width`, `precision.activations`; values are read as YAML scalars.
 *
 * A variant is applied to the spec's text, not to a re-serialised document: a varied value is
 * replaced where it stands, and a key the file leaves out is added as one line (or inside its flow
 * map), so the spec loader's line:column positions still point into the user's file (after
 * `originalLine` maps back the lines an added key shifted).
 */
import type { LineCounter } from "yaml";
import { closestWord } from "../spec/issues.js";
import { isAlias, isMap, isScalar, isSeq, yamlLib } from "../spec/yaml-lib.js";

/** One --vary option, parsed. */
export interface VaryAxis {
  /** the key as written, e.g. "layers[2].width" */
  key: string;
  path: readonly (string | number)[];
  values: readonly VaryValue[];
}

/** One value of an axis: the text as written and the YAML scalar it reads as. */
export interface VaryValue {
  text: string;
  value: string | number | boolean | null;
}

/** One point of the cross product: a value for each axis. */
export interface Variant {
  /** `key=value,key=value`, in the order the options were given */
  name: string;
  settings: readonly { key: string; path: readonly (string | number)[]; text: string; value: VaryValue["value"] }[];
}

/** A bad --vary option or a key the spec cannot take; the message names the key. */
export class VaryError extends Error {
  constructor(message: string) {
    super(message);
    this.name = "VaryError";
  }
}

const SEGMENT = /^([^.[\]=\s]+)?((?:\[\d+\])*)$/;

/**
 * Read a key path: `a.b[2].c` gives ["a", "b", 2, "c"].
 * @example parseKeyPath("layers[2].width") // => ["layers", 2, "width"]
 */
export function parseKeyPath(key: string): (string | number)[] {
  if (key.trim() === "") throw new VaryError(`--vary needs a key before "=", e.g. training.batch=8,16`);
  const path: (string | number)[] = [];
  for (const part of key.split(".")) {
    const match = SEGMENT.exec(part);
    if (!match || match[1] === undefined) {
      throw new VaryError(`--vary ${key}: "${part}" is not a key; write keys like training.batch or layers[2].width`);
    }
    path.push(match[1]);
    for (const index of (match[2] ?? "").matchAll(/\[(\d+)\]/g)) path.push(Number(index[1]));
  }
  return path;
}

/**
 * The values of an option, split at the commas outside quotes: a YAML quoted scalar may hold a comma
 * (`name="a,b"`; YAML 1.2.2 §7.3.1-2: `\"` escapes a double quote, `''` is a single quote in single quotes).
 */
function splitValues(list: string): string[] {
  const out: string[] = [];
  let start = 0;
  let quote = "";
  for (let at = 0; at < list.length; at++) {
    const c = list[at]!;
    if (quote === '"' && c === "\\") at++;
    else if (quote === "'" && c === "'" && list[at + 1] === "'") at++;
    else if (quote !== "" && c === quote) quote = "";
    else if (quote === "" && (c === '"' || c === "'") && list.slice(start, at).trim() === "") quote = c;
    else if (quote === "" && c === ",") {
      out.push(list.slice(start, at));
      start = at + 1;
    }
  }
  out.push(list.slice(start));
  return out;
}

/** Read one `KEY=V1,V2,...` option. */
export function parseVaryOption(option: string): VaryAxis {
  const equals = option.indexOf("=");
  if (equals < 0) throw new VaryError(`--vary ${option}: expected KEY=VALUE1,VALUE2,... e.g. training.batch=8,16,32`);
  const key = option.slice(0, equals).trim();
  const path = parseKeyPath(key);
  const texts = splitValues(option.slice(equals + 1)).map((text) => text.trim());
  const values = texts.map((text): VaryValue => {
    if (text === "") throw new VaryError(`--vary ${key}: an empty value; list values separated by commas`);
    // YAML reads "#x" as a comment (no value), "&a b" and "!t b" as "b" with an anchor or a tag (YAML 1.2.2 §6.6, §6.9):
    // none is the value the user typed, so say how to write it
    const mark = /^["']/.test(text) ? undefined : (/^[#&!]/.exec(text)?.[0] ?? (/\s#/.test(text) ? " #" : undefined));
    if (mark !== undefined) {
      const what = mark === "&" ? "an anchor" : mark === "!" ? "a tag" : "a comment";
      throw new VaryError(`--vary ${key}: YAML reads ${JSON.stringify(mark.trim())} in ${JSON.stringify(text)} as ${what}; quote the value ('${text.replaceAll("'", "''")}')`);
    }
    let value: unknown;
    try {
      value = yamlLib().parse(text);
    } catch {
      throw new VaryError(`--vary ${key}: ${JSON.stringify(text)} is not a YAML scalar`);
    }
    if (value !== null && typeof value === "object") {
      throw new VaryError(`--vary ${key}: ${JSON.stringify(text)} is not a single value (numbers, words, true/false)`);
    }
    if (typeof value !== "string" && typeof value !== "number" && typeof value !== "boolean" && value !== null) {
      throw new VaryError(`--vary ${key}: ${JSON.stringify(text)} is not a single value (numbers, words, true/false)`);
    }
    return { text, value };
  });
  const seen = new Set<string>();
  for (const { text } of values) {
    if (seen.has(text)) throw new VaryError(`--vary ${key}: the value ${text} is listed twice`);
    seen.add(text);
  }
  return { key, path, values };
}

/**
 * The cross product of the axes, the first axis varying slowest. No axes give no variants.
 * Two axes with the same key are a VaryError.
 */
export function variantsOf(axes: readonly VaryAxis[]): Variant[] {
  if (axes.length === 0) return [];
  const keys = new Set<string>();
  for (const axis of axes) {
    const canonical = axis.path.map((p) => (typeof p === "number" ? `[${p}]` : `.${p}`)).join("");
    if (keys.has(canonical)) throw new VaryError(`--vary ${axis.key}: the key is varied twice; list all its values in one option`);
    keys.add(canonical);
  }
  let variants: Variant["settings"][] = [[]];
  for (const axis of axes) {
    variants = variants.flatMap((settings) =>
      axis.values.map((v) => [...settings, { key: axis.key, path: axis.path, text: v.text, value: v.value }]),
    );
  }
  return variants.map((settings) => ({
    name: settings.map((s) => `${s.key}=${s.text}`).join(","),
    settings,
  }));
}

// ---------------------------------------------------------------------------------------------
// the spec's JSON Schema says which keys exist, so a key the file leaves to its default can be varied
// while a misspelt key is refused by name

type Schema = Record<string, unknown>;

function resolve(root: Schema, schema: unknown): Schema[] {
  if (schema === true || schema === undefined) return [{}];
  if (schema === false || typeof schema !== "object" || schema === null) return [];
  const s = schema as Schema;
  const ref = s["$ref"];
  if (typeof ref === "string" && ref.startsWith("#/")) {
    let target: unknown = root;
    for (const part of ref.slice(2).split("/")) target = (target as Schema | undefined)?.[part.replaceAll("~1", "/").replaceAll("~0", "~")];
    return resolve(root, target);
  }
  const branches = [s["oneOf"], s["anyOf"], s["allOf"]].filter(Array.isArray).flat() as unknown[];
  if (branches.length > 0) return branches.flatMap((b) => resolve(root, b));
  return [s];
}

function childSchemas(root: Schema, schemas: Schema[], key: string | number): Schema[] {
  const out: Schema[] = [];
  for (const s of schemas) {
    const typeless = s["type"] === undefined && s["properties"] === undefined && s["items"] === undefined;
    if (typeless && s["const"] === undefined && s["enum"] === undefined) {
      out.push({});
      continue;
    }
    if (typeof key === "string") {
      const properties = s["properties"] as Schema | undefined;
      if (properties && key in properties) out.push(...resolve(root, properties[key]));
      else if (s["type"] === "object" && s["additionalProperties"] !== false) out.push(...resolve(root, s["additionalProperties"]));
    } else {
      const items = s["items"] ?? s["prefixItems"];
      if (Array.isArray(items)) out.push(...resolve(root, items[key]));
      else if (items !== undefined) out.push(...resolve(root, items));
    }
  }
  return out;
}

/** The branches of a JSON Schema that may hold the value at `path`; none once a step has no place. */
function schemasAt(schema: Schema, path: readonly (string | number)[]): Schema[] {
  let schemas = resolve(schema, schema);
  for (const key of path) {
    schemas = childSchemas(schema, schemas, key);
    if (schemas.length === 0) break;
  }
  return schemas;
}

/** Whether a JSON Schema (draft-07, as the spec module exports it) has a place for `path`. */
export function schemaHasPath(schema: Schema, path: readonly (string | number)[]): boolean {
  return path.length === 0 || schemasAt(schema, path).length > 0;
}

/** The keys a JSON Schema names for the map at `path` (its properties, over every branch of a union). */
function schemaKeysAt(schema: Schema, path: readonly (string | number)[]): string[] {
  const keys = new Set<string>();
  for (const s of schemasAt(schema, path)) {
    const properties = s["properties"];
    if (properties !== null && typeof properties === "object") for (const key of Object.keys(properties)) keys.add(key);
  }
  return [...keys];
}

/**
 * `did you mean "training.batch"?` for a missing key at `path[depth]`: the nearest of `keys` (src/spec/issues.ts
 * closestWord, as the spec loader's hints), shown as the whole key with that part spelt so; undefined when none is near.
 */
function keyHint(path: readonly (string | number)[], depth: number, keys: readonly string[]): string | undefined {
  const part = path[depth];
  const near = typeof part === "string" ? closestWord(part, keys) : undefined;
  if (near === undefined) return undefined;
  return `did you mean "${describePath([...path.slice(0, depth), near, ...path.slice(depth + 1)])}"?`;
}

function describePath(path: readonly (string | number)[]): string {
  return path.map((p, i) => (typeof p === "number" ? `[${p}]` : i === 0 ? p : `.${p}`)).join("") || "(the document)";
}

/** A value as YAML text that reads back as the same scalar in block and flow context alike. */
export function yamlScalarText(value: VaryValue["value"]): string {
  if (value === null) return "null";
  if (typeof value === "boolean") return String(value);
  if (typeof value === "number") {
    if (Number.isNaN(value)) return ".nan";
    if (!Number.isFinite(value)) return value > 0 ? ".inf" : "-.inf";
    return String(value);
  }
  // a JSON string is a valid YAML double-quoted scalar (YAML 1.2.2 §7.3.1)
  return JSON.stringify(value);
}

/** One text edit: replace [start, end) with `text`. */
interface TextEdit {
  start: number;
  end: number;
  text: string;
}

/** A spec's text with a variant applied, and how to map its lines back to the original file. */
export interface VariedText {
  text: string;
  /** the original file's line (1-based) for a line of the varied text */
  originalLine: (line: number) => number;
}

/**
 * Apply a variant to the text of a spec. Throws a VaryError naming the key for a list index past the
 * end, a key the schema does not know (or, without a schema, a key the file does not have), a path
 * through a plain value or an alias, or a key that holds a map or list. A text that is not valid YAML
 * is returned unchanged: the spec loader reports its errors with their positions.
 */
export function varyText(text: string, variant: Variant, schema?: Schema): VariedText {
  return textVarier(text, schema)(variant);
}

/**
 * {@link varyText} for many variants of one text (`check --vary`): the text's YAML document is parsed once, on the
 * first variant, and each variant's first setting is found in it; further settings of a variant edit the text that
 * the ones before made, so they parse that.
 */
export function textVarier(text: string, schema?: Schema): (variant: Variant) => VariedText {
  let original: { doc: ReturnType<ReturnType<typeof yamlLib>["parseDocument"]>; counter: LineCounter } | undefined;
  const parse = (current: string) => {
    const yaml = yamlLib();
    const counter = new yaml.LineCounter();
    return { doc: yaml.parseDocument(current, { lineCounter: counter, merge: true, uniqueKeys: true }), counter };
  };
  return (variant) => {
    let current = text;
    // line maps from each edit, applied newest first to go back to the original
    const maps: ((line: number) => number)[] = [];
    for (const setting of variant.settings) {
      // editFor only reads the document, so the original's serves every variant
      const { doc, counter } = current === text ? (original ??= parse(text)) : parse(current);
      if (doc.errors.length > 0) break;
      const edit = editFor(doc.contents, current, counter, setting.key, setting.path, setting.value, schema);
      const editLine = counter.linePos(edit.start).line;
      const added = countNewlines(edit.text) - countNewlines(current.slice(edit.start, edit.end));
      current = current.slice(0, edit.start) + edit.text + current.slice(edit.end);
      if (added !== 0) {
        maps.push((line) => (line <= editLine ? line : line <= editLine + added ? editLine : line - added));
      }
    }
    return { text: current, originalLine: (line) => maps.reduceRight((l, map) => map(l), line) };
  };
}

function countNewlines(text: string): number {
  let count = 0;
  for (const c of text) if (c === "\n") count += 1;
  return count;
}

function keyName(key: unknown): unknown {
  return isScalar(key) ? key.value : key;
}

function editFor(
  root: unknown,
  text: string,
  counter: LineCounter,
  key: string,
  path: readonly (string | number)[],
  value: VaryValue["value"],
  schema: Schema | undefined,
): TextEdit {
  let node: unknown = root;
  for (let depth = 0; depth < path.length; depth++) {
    const part = path[depth]!;
    const last = depth === path.length - 1;
    const here = describePath(path.slice(0, depth));
    if (isAlias(node)) throw new VaryError(`--vary ${key}: ${here} is an alias (*${node.source}); vary the anchored value instead`);
    if (isMap(node)) {
      if (typeof part !== "string") throw new VaryError(`--vary ${key}: ${here} is a map of keys, not a list`);
      const pair = node.items.find((p) => keyName(p.key) === part);
      if (!pair) {
        const missing = path.slice(0, depth + 1);
        const keys = node.items.map((p) => String(keyName(p.key)));
        if (schema && !schemaHasPath(schema, missing)) {
          // the hint is among the keys the file has there and those the schema allows it to add (README, --vary)
          const allowed = [...new Set([...keys, ...schemaKeysAt(schema, path.slice(0, depth))])];
          const hint = keyHint(path, depth, allowed);
          throw new VaryError(`--vary ${key}: the spec has no key ${describePath(missing)}${hint === undefined ? "" : ` (${hint})`}`);
        }
        if (!schema) {
          const hint = keyHint(path, depth, keys);
          throw new VaryError(`--vary ${key}: ${describePath(missing)} is not in the spec (${here} has ${keys.join(", ")}${hint === undefined ? "" : `; ${hint}`})`);
        }
        let fresh = yamlScalarText(value);
        for (let i = path.length - 1; i > depth; i--) {
          const p = path[i]!;
          if (typeof p === "number") {
            throw new VaryError(`--vary ${key}: ${describePath(path.slice(0, i))} is not in the spec, so it has no item [${p}]`);
          }
          fresh = `{ ${JSON.stringify(p)}: ${fresh} }`;
        }
        return insertPair(node, text, counter, `${JSON.stringify(part)}: ${fresh}`);
      }
      if (last) return replaceValue(pair.value, pair.key, text, key, path, value);
      node = pair.value;
      continue;
    }
    if (isSeq(node)) {
      if (typeof part !== "number") throw new VaryError(`--vary ${key}: ${here} is a list; use ${here}[index]`);
      if (part >= node.items.length) {
        throw new VaryError(`--vary ${key}: ${here} has ${node.items.length} items, so there is no ${here}[${part}]`);
      }
      const item = node.items[part];
      if (last) return replaceValue(item, undefined, text, key, path, value);
      node = item;
      continue;
    }
    const shown = isScalar(node) ? ` (${JSON.stringify(node.value)})` : "";
    throw new VaryError(`--vary ${key}: ${here} is a single value${shown}, so it has no ${typeof part === "number" ? `[${part}]` : part}`);
  }
  throw new VaryError(`--vary ${key}: the key is empty`);
}

function replaceValue(
  node: unknown,
  keyNode: unknown,
  text: string,
  key: string,
  path: readonly (string | number)[],
  value: VaryValue["value"],
): TextEdit {
  if (isAlias(node)) throw new VaryError(`--vary ${key}: ${describePath(path)} is an alias (*${node.source}); vary the anchored value instead`);
  if (node !== null && node !== undefined && !isScalar(node)) {
    // the precision plan is the map a sweep most often means to swap: the option that does that is --plan
    const plan = path.length === 1 && path[0] === "precision" ? "; to judge one of the spec's plans use --plan NAME, or vary precision.activations and the other entries" : "";
    throw new VaryError(`--vary ${key}: ${describePath(path)} holds a map or list; --vary sets single values${plan}`);
  }
  const scalarText = yamlScalarText(value);
  const range = isScalar(node) ? node.range : undefined;
  if (range && range[1] > range[0]) {
    // keep an anchor (&name) in front of the value: replace the value's own text only; a block scalar's range
    // (`|`, `>`) takes in its last line break, which the next key needs
    const end = range[0] + trimLineEnds(text.slice(range[0], range[1])).length;
    return { start: range[0], end, text: scalarText };
  }
  // an empty value (`width:`): write after the key's colon
  const keyEnd = isScalar(keyNode) && keyNode.range ? keyNode.range[1] : range?.[0];
  if (keyEnd === undefined) throw new VaryError(`--vary ${key}: cannot find ${describePath(path)} in the text`);
  const colon = text.indexOf(":", keyEnd);
  const at = colon >= 0 ? colon + 1 : keyEnd;
  return { start: at, end: at, text: ` ${scalarText}` };
}

/** Text without the spaces and line breaks at its end. */
function trimLineEnds(text: string): string {
  return text.replace(/[ \t\r\n]+$/, "");
}

function insertPair(map: unknown, text: string, counter: LineCounter, pairText: string): TextEdit {
  if (!isMap(map) || !map.range) throw new VaryError(`cannot add ${pairText} here`);
  if (map.flow) {
    // `{ a: 1 }` → `{ a: 1, "k": v }`: right after the last entry, so a trailing comma or a comment stays valid
    const last = map.items[map.items.length - 1];
    const lastEnd = (last?.value as { range?: number[] } | null)?.range?.[1] ?? (last?.key as { range?: number[] } | null)?.range?.[1];
    if (lastEnd !== undefined) {
      const at = trimLineEnds(text.slice(0, lastEnd)).length;
      return { start: at, end: at, text: `, ${pairText}` };
    }
    const close = text.lastIndexOf("}", map.range[1] - 1);
    return { start: close, end: close, text: ` ${pairText} ` };
  }
  // a block map: a new line before its first key, at the same indentation
  const first = map.items[0];
  const keyStart = isScalar(first?.key) && first.key.range ? first.key.range[0] : map.range[0];
  const column = counter.linePos(keyStart).col;
  return { start: keyStart, end: keyStart, text: `${pairText}\n${" ".repeat(column - 1)}` };
}
