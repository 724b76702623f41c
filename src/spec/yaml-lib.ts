/**
 * The yaml library, loaded on first use: most specs are read by the plain reader (plain-yaml.ts), and
 * loading the library's 70-odd modules costs each batch worker a noticeable part of its start.
 * The node tests below load it too, but only code that already holds a yaml node calls them.
 */
import { createRequire } from "node:module";
import type * as Yaml from "yaml";

let loaded: typeof Yaml | undefined;

/** The yaml library's exports (loaded once, synchronously, on the first call). */
export function yamlLib(): typeof Yaml {
  return (loaded ??= createRequire(import.meta.url)("yaml") as typeof Yaml);
}

/** yaml's isMap. */
export function isMap<K = unknown, V = unknown>(node: unknown): node is Yaml.YAMLMap<K, V> {
  return yamlLib().isMap(node);
}

/** yaml's isSeq. */
export function isSeq<T = unknown>(node: unknown): node is Yaml.YAMLSeq<T> {
  return yamlLib().isSeq(node);
}

/** yaml's isScalar. */
export function isScalar<T = unknown>(node: unknown): node is Yaml.Scalar<T> {
  return yamlLib().isScalar(node);
}

/** yaml's isAlias. */
export function isAlias(node: unknown): node is Yaml.Alias {
  return yamlLib().isAlias(node);
}
