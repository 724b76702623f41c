/** Key paths to line:column in the YAML source, through the yaml library's node ranges. */
import type { Document, LineCounter, Node } from "yaml";
import { isAlias, isMap, isScalar, isSeq } from "./yaml-lib.js";
import type { SpecPath } from "./types.js";

/** Where a path points: the value's first character, or the key's when `atKey`. */
export interface Located {
  line: number;
  column: number;
  /** false when the path goes past what the file has: the position is that of the deepest node found */
  exact: boolean;
}

function keyOf(node: unknown): unknown {
  return isScalar(node) ? node.value : node;
}

/**
 * Find the node at `path` (aliases followed, merge keys searched) and return its position;
 * for a missing path, the position of the deepest node that exists.
 */
export function locateIn(doc: Document, counter: LineCounter, path: SpecPath, atKey = false): Located {
  let node: unknown = doc.contents;
  let offset = firstOffset(node) ?? 0;
  let exact = true;
  for (let depth = 0; depth < path.length; depth++) {
    const segment = path[depth]!;
    const last = depth === path.length - 1;
    node = resolveAlias(doc, node);
    if (isMap(node)) {
      const pair = findPair(doc, node, segment);
      if (pair === undefined) {
        exact = false;
        break;
      }
      const keyOffset = firstOffset(pair.key);
      if (last && atKey && keyOffset !== undefined) {
        offset = keyOffset;
        node = undefined;
        break;
      }
      node = pair.value;
      // an empty value (`width:`) has no useful range of its own: point at its key
      offset = (isScalar(node) && node.value === null ? keyOffset : firstOffset(node)) ?? keyOffset ?? offset;
    } else if (isSeq(node) && typeof segment === "number" && segment >= 0 && segment < node.items.length) {
      node = node.items[segment];
      offset = firstOffset(node) ?? offset;
    } else {
      exact = false;
      break;
    }
  }
  const position = counter.linePos(offset);
  return { line: position.line, column: position.col, exact };
}

function resolveAlias(doc: Document, node: unknown): unknown {
  let current = node;
  for (let hops = 0; hops < 100 && isAlias(current); hops++) current = current.resolve(doc);
  return current;
}

function findPair(doc: Document, map: { items: { key: unknown; value: unknown }[] }, segment: string | number): { key: unknown; value: unknown } | undefined {
  for (const pair of map.items) if (String(keyOf(pair.key)) === String(segment)) return pair as { key: unknown; value: unknown };
  // merge keys (`<<: *base`) bring keys from elsewhere; find them there
  for (const pair of map.items) {
    const key = keyOf(pair.key);
    // with merge keys on, the yaml library gives `<<` a symbol value (its source text stays "<<")
    const isMerge = key === "<<" || (typeof key === "symbol" && (pair.key as { source?: unknown }).source === "<<");
    if (!isMerge) continue;
    const sources = isSeq(pair.value) ? pair.value.items : [pair.value];
    for (const source of sources) {
      const target = resolveAlias(doc, source);
      if (isMap(target)) {
        const found = findPair(doc, target, segment);
        if (found) return found;
      }
    }
  }
  return undefined;
}

function firstOffset(node: unknown): number | undefined {
  const range = (node as Node | null | undefined)?.range;
  return range ? range[0] : undefined;
}
