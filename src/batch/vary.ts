/**
 * Variations without writing files: `--vary KEY=V1,V2,...` sets a value in the spec document before
 * validation; several options give their cross product. KEY is a dotted path with [index] for lists,
 * e.g. `training.batch`, `layers[2].width`, `precision.activations`; values are read as YAML scalars.
 */
import { isMap, isScalar, isSeq, parse as parseYaml, type Document } from "yaml";

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

/** Read one `KEY=V1,V2,...` option. */
export function parseVaryOption(option: string): VaryAxis {
  const equals = option.indexOf("=");
  if (equals < 0) throw new VaryError(`--vary ${option}: expected KEY=VALUE1,VALUE2,... e.g. training.batch=8,16,32`);
  const key = option.slice(0, equals).trim();
  const path = parseKeyPath(key);
  const texts = option
    .slice(equals + 1)
    .split(",")
    .map((text) => text.trim());
  const values = texts.map((text): VaryValue => {
    if (text === "") throw new VaryError(`--vary ${key}: an empty value; list values separated by commas`);
    let value: unknown;
    try {
      value = parseYaml(text);
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

/** Whether a JSON Schema (draft-07, as the spec module exports it) has a place for `path`. */
export function schemaHasPath(schema: Schema, path: readonly (string | number)[]): boolean {
  let schemas = resolve(schema, schema);
  for (const key of path) {
    schemas = childSchemas(schema, schemas, key);
    if (schemas.length === 0) return false;
  }
  return true;
}

function describePath(path: readonly (string | number)[]): string {
  return path.map((p, i) => (typeof p === "number" ? `[${p}]` : i === 0 ? p : `.${p}`)).join("") || "(the document)";
}

/**
 * Apply a variant to a copy of a parsed spec document; the original is not changed. An existing
 * scalar keeps its place in the file (so validation errors point at the line being varied); a key the
 * file leaves out is added when `schema` has a place for it. A list index past the end, a key the
 * schema does not know, or a path through a plain value is a VaryError naming the key.
 */
export function applyVariant(doc: Document, variant: Variant, schema?: Schema): Document {
  const copy = doc.clone();
  for (const setting of variant.settings) setIn(copy, setting.key, setting.path, setting.value, schema);
  return copy;
}

function setIn(
  doc: Document,
  key: string,
  path: readonly (string | number)[],
  value: VaryValue["value"],
  schema: Schema | undefined,
): void {
  let node: unknown = doc.contents;
  for (let depth = 0; depth < path.length; depth++) {
    const part = path[depth]!;
    const last = depth === path.length - 1;
    const here = describePath(path.slice(0, depth));
    if (isMap(node)) {
      if (typeof part !== "string") throw new VaryError(`--vary ${key}: ${here} is a map of keys, not a list`);
      const pair = node.items.find((p) => (isScalar(p.key) ? p.key.value : p.key) === part);
      if (!pair) {
        if (schema && !schemaHasPath(schema, path.slice(0, depth + 1))) {
          throw new VaryError(`--vary ${key}: the spec has no key ${describePath(path.slice(0, depth + 1))}`);
        }
        if (!schema) {
          const keys = node.items.map((p) => String(isScalar(p.key) ? p.key.value : p.key));
          throw new VaryError(`--vary ${key}: ${describePath(path.slice(0, depth + 1))} is not in the spec (${here} has ${keys.join(", ")})`);
        }
        // build the missing rest of the path as nested maps
        let fresh: unknown = value;
        for (let i = path.length - 1; i > depth; i--) {
          const p = path[i]!;
          if (typeof p === "number") throw new VaryError(`--vary ${key}: ${describePath(path.slice(0, i))} is not in the spec, so it has no item [${p}]`);
          fresh = { [p]: fresh };
        }
        node.set(doc.createNode(part), doc.createNode(fresh));
        return;
      }
      if (last) {
        if (isScalar(pair.value)) pair.value.value = value;
        else if (pair.value === null || pair.value === undefined) pair.value = doc.createNode(value);
        else throw new VaryError(`--vary ${key}: ${describePath(path)} holds a map or list; --vary sets single values`);
        return;
      }
      node = pair.value;
      continue;
    }
    if (isSeq(node)) {
      if (typeof part !== "number") throw new VaryError(`--vary ${key}: ${here} is a list; use ${here}[index]`);
      if (part >= node.items.length) {
        throw new VaryError(`--vary ${key}: ${here} has ${node.items.length} items, so there is no ${here}[${part}]`);
      }
      const item = node.items[part];
      if (last) {
        if (isScalar(item)) item.value = value;
        else throw new VaryError(`--vary ${key}: ${describePath(path)} holds a map or list; --vary sets single values`);
        return;
      }
      node = item;
      continue;
    }
    const shown = isScalar(node) ? ` (${JSON.stringify(node.value)})` : "";
    throw new VaryError(`--vary ${key}: ${here} is a single value${shown}, so it has no ${typeof part === "number" ? `[${part}]` : part}`);
  }
}
