/**
 * Finding one tensor of a check by what a user types: its id (`dense-3/activation-gradient`), its layer and
 * role (`dense-3 activation-gradient`), or a layer name when that layer has a single tensor.
 */
import type { TensorCheck } from "./judge.js";

/** A tensor found, or why none was, with the ids worth suggesting. */
export type TensorLookup =
  | { ok: true; tensor: TensorCheck }
  | { ok: false; reason: "ambiguous" | "not-found"; candidates: string[] };

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
    if (matches.length > 1) return { ok: false, reason: "ambiguous", candidates: matches.map((t) => t.id).slice(0, limit * 4) };
  }

  const ofLayer = tensors.filter((tensor) => tensor.layer === text);
  if (ofLayer.length === 1) return { ok: true, tensor: ofLayer[0] as TensorCheck };
  if (ofLayer.length > 1) return { ok: false, reason: "ambiguous", candidates: ofLayer.map((t) => t.id) };

  // a layer named inside a repeat or a block is known by its name alone ("hear" for stack.0.use-0.hear): a layer whose
  // last name is the one typed comes first, with the role typed before the others
  const named = split === null ? null : { layer: (split[1] as string).toLowerCase(), role: split[2] as string };
  const needle = text.toLowerCase();
  const scored = tensors
    .map((tensor) => {
      const id = tensor.id.toLowerCase();
      const layer = tensor.layer.toLowerCase();
      if (named !== null && named.layer !== "" && layer.endsWith(`.${named.layer}`)) return { id: tensor.id, score: tensor.role === named.role ? -2 : -1 };
      const contains = id.includes(needle) || (needle.length >= 3 && needle.includes(layer));
      return { id: tensor.id, score: contains ? 0 : distance(needle, id) };
    })
    .sort((a, b) => a.score - b.score || a.id.localeCompare(b.id));
  return { ok: false, reason: "not-found", candidates: scored.slice(0, limit).map((s) => s.id) };
}
