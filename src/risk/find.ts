/**
 * Finding one tensor of a check by what a user types: its id (`dense-3/activation-gradient`), its layer and
 * role (`dense-3 activation-gradient`), or a layer name when that layer has a single tensor.
 */
import type { TensorCheck } from "./judge.js";

/** A tensor found, or why none was, with the ids worth suggesting. */
export type TensorLookup =
  | { ok: true; tensor: TensorCheck }
  | { ok: false; reason: "ambiguous"; candidates: string[]; /** how many tensors the query names (candidates may show fewer) */ total: number }
  | { ok: false; reason: "not-found"; candidates: string[] };

// ids compared with their numbers as numbers: stack.2 before stack.10
const ORDER = new Intl.Collator("en", { numeric: true });

function ambiguous(matches: readonly TensorCheck[], limit: number): TensorLookup {
  return { ok: false, reason: "ambiguous", total: matches.length, candidates: matches.map((t) => t.id).sort(ORDER.compare).slice(0, limit) };
}

function distance(a: string, b: string): number {
  const previous = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    let diagonal = previous[0] as number;
    previous[0] = i;
    for (let j = 1; j <= b.length; j++) {
      const above = previous[j] as number;
      previous[j] = Math.min(above + 1, (previous[j - 1] as number) + 1, diagonal + (a[i - 1] === b[j - 1] ? 0 : 1));
      diagonal = above;
    }
  }
  return previous[b.length] as number;
}

/**
 * Look a tensor up. Tries, in order: the exact id; layer and role (separated by "/" or spaces, ignoring any
 * `:suffix` of the id); a layer name alone. Otherwise suggests up to `limit` ids, nearest first.
 * @example findTensor(tensors, "dense-3 weight-gradient") // => { ok: true, tensor: ... }
 */
export function findTensor(tensors: readonly TensorCheck[], query: string, limit = 8): TensorLookup {
  const text = query.trim();
  const exact = tensors.find((tensor) => tensor.id === text);
  if (exact !== undefined) return { ok: true, tensor: exact };

  const split = /^(.*?)(?:\/|\s+)([a-z-]+)(?::(.+))?$/.exec(text);
  if (split !== null) {
    const [, layer, role, suffix] = split;
    const matches = tensors.filter(
      (tensor) =>
        tensor.layer === layer &&
        tensor.role === role &&
        (suffix === undefined || tensor.id.endsWith(`:${suffix}`)),
    );
    if (matches.length === 1) return { ok: true, tensor: matches[0] as TensorCheck };
    // "layer role" is the id "layer/role" written as two words: that id wins over the role's `:name` tensors
    const plain = suffix === undefined ? matches.find((tensor) => tensor.id === `${layer}/${role}`) : undefined;
    if (plain !== undefined) return { ok: true, tensor: plain };
    if (matches.length > 1) return ambiguous(matches, limit * 4);
  }

  const ofLayer = tensors.filter((tensor) => tensor.layer === text);
  if (ofLayer.length === 1) return { ok: true, tensor: ofLayer[0] as TensorCheck };
  if (ofLayer.length > 1) return ambiguous(ofLayer, limit * 4);

  // a layer named inside a repeat or a block is known by its name alone ("hear" for stack.0.use-0.hear): the tensors
  // of the layers whose last name is the one typed (of the role typed, when it names any) are what the query names
  const named = split === null ? { layer: text.toLowerCase(), role: undefined } : { layer: (split[1] as string).toLowerCase(), role: split[2] as string };
  if (named.layer !== "") {
    const byName = tensors.filter((tensor) => tensor.layer.toLowerCase().endsWith(`.${named.layer}`));
    const pool = named.role === undefined ? byName : byName.filter((tensor) => tensor.role === named.role);
    if (pool.length === 1) return { ok: true, tensor: pool[0] as TensorCheck };
    if (pool.length > 1) return ambiguous(pool, limit);
    // the layer is known but not the role typed: its tensors are the nearest ids
    if (byName.length > 0) return { ok: false, reason: "not-found", candidates: byName.map((t) => t.id).sort(ORDER.compare).slice(0, limit) };
  }
  const needle = text.toLowerCase();
  const scored = tensors
    .map((tensor) => {
      const id = tensor.id.toLowerCase();
      const contains = id.includes(needle) || (needle.length >= 3 && needle.includes(tensor.layer.toLowerCase()));
      return { id: tensor.id, score: contains ? 0 : distance(needle, id) };
    })
    .sort((a, b) => a.score - b.score || ORDER.compare(a.id, b.id));
  return { ok: false, reason: "not-found", candidates: scored.slice(0, limit).map((s) => s.id) };
}
