/**
 * A small glob matcher (Node 20 has no stable fs.glob): `*` matches within one path segment,
 * `?` one character of a segment, `**` any number of whole segments (zero included).
 * Paths use `/` as separator; callers turn `\` into `/` first on Windows.
 */

const SPECIAL = /[.+^${}()|[\]\\]/g;

/** Whether `text` contains a glob wildcard. */
export function hasGlob(text: string): boolean {
  return /[*?]/.test(text);
}

/**
 * A regular expression matching whole paths against `pattern`.
 * @example globToRegExp("specs/**\/*.yaml").test("specs/a/b/net.yaml") // => true
 */
export function globToRegExp(pattern: string): RegExp {
  if (pattern === "") throw new TypeError(`empty glob pattern: ${JSON.stringify(pattern)}`);
  let source = "";
  const segments = pattern.split("/");
  segments.forEach((segment, index) => {
    const last = index === segments.length - 1;
    if (segment === "**") {
      // "**" as a whole segment: zero or more segments; as the last one, everything below
      source += last ? ".*" : "(?:[^/]*/)*";
      return;
    }
    for (let i = 0; i < segment.length; i++) {
      const c = segment[i]!;
      if (c === "*") {
        while (segment[i + 1] === "*") i++; // "a**b" inside a segment is the same as "a*b"
        source += "[^/]*";
      } else if (c === "?") {
        source += "[^/]";
      } else {
        source += c.replace(SPECIAL, "\\$&");
      }
    }
    if (!last) source += "/";
  });
  return new RegExp(`^${source}$`);
}

/**
 * Split a pattern into the folder to start walking from (the segments before the first wildcard)
 * and the rest. `"specs/**\/*.yaml"` gives `{ base: "specs", rest: "**\/*.yaml" }`; `"*.yaml"` gives base ".".
 */
export function globBase(pattern: string): { base: string; rest: string } {
  const segments = pattern.split("/");
  const first = segments.findIndex(hasGlob);
  if (first < 0) return { base: pattern, rest: "" };
  const baseSegments = segments.slice(0, first);
  const base = baseSegments.length === 0 ? "." : baseSegments.join("/") || "/";
  return { base, rest: segments.slice(first).join("/") };
}
