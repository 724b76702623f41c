// parseSpec must turn any input into a result, never an exception: no stack trace can reach a user.
import { readFileSync } from "node:fs";
import * as fc from "fast-check";
import { describe, expect, it } from "vitest";
import { parseDocument, stringify } from "yaml";
import { parseSpec, type SpecResult } from "../../src/spec/index.js";

const example = readFileSync(new URL("../../specs/transformer-encoder.yaml", import.meta.url), "utf8");
const exampleData = parseDocument(example).toJS() as Record<string, unknown>;

function wellFormed(result: SpecResult): void {
  const issues = result.ok ? result.warnings : result.issues;
  if (!result.ok) expect(issues.length).toBeGreaterThan(0);
  for (const issue of issues) {
    expect(issue.message.length).toBeGreaterThan(0);
    expect(issue.message).not.toContain("\n");
    expect(Number.isInteger(issue.line) && issue.line >= 0).toBe(true);
    expect(Number.isInteger(issue.column) && issue.column >= 0).toBe(true);
  }
}

/** Every path to a value of a JSON-like document. */
function paths(value: unknown, prefix: (string | number)[] = []): (string | number)[][] {
  const out: (string | number)[][] = [prefix];
  if (Array.isArray(value)) value.forEach((item, index) => out.push(...paths(item, [...prefix, index])));
  else if (typeof value === "object" && value !== null) {
    for (const [key, item] of Object.entries(value)) out.push(...paths(item, [...prefix, key]));
  }
  return out;
}

function replaced(document: unknown, path: readonly (string | number)[], value: unknown): unknown {
  if (path.length === 0) return value;
  const copy = structuredClone(document) as Record<string | number, unknown>;
  let node = copy;
  for (const segment of path.slice(0, -1)) node = node[segment] as Record<string | number, unknown>;
  node[path[path.length - 1]!] = value;
  return copy;
}

const allPaths = paths(exampleData).filter((path) => path.length > 0);

describe("parseSpec never throws", () => {
  it("on arbitrary text", () => {
    fc.assert(
      fc.property(fc.string({ maxLength: 300 }), (text) => {
        wellFormed(parseSpec(text, "random.yaml"));
      }),
      { numRuns: 200 },
    );
  });

  it("on arbitrary YAML documents", () => {
    fc.assert(
      fc.property(fc.jsonValue({ maxDepth: 4 }), (value) => {
        wellFormed(parseSpec(stringify(value), "random.yaml"));
      }),
      { numRuns: 100 },
    );
  });

  it("on the transformer example with one value replaced by anything, and then points inside the file", () => {
    const lineCount = stringify(exampleData).split("\n").length;
    fc.assert(
      fc.property(
        fc.constantFrom(...allPaths),
        fc.oneof(fc.jsonValue({ maxDepth: 2 }), fc.constantFrom(NaN, Infinity, -Infinity, -1, 0, 0.5, 1e30, "", "dense")),
        (path, value) => {
          const text = stringify(replaced(exampleData, path, value));
          const result = parseSpec(text, "mutated.yaml");
          wellFormed(result);
          if (!result.ok) {
            for (const issue of result.issues) expect(issue.line).toBeLessThanOrEqual(Math.max(lineCount, text.split("\n").length));
          }
        },
      ),
      { numRuns: 60 },
    );
  });

  it("on deleting one key or list item from the example (every third path)", () => {
    for (const path of allPaths.filter((_, index) => index % 3 === 0)) {
      const parentPath = path.slice(0, -1);
      const copy = structuredClone(exampleData) as Record<string | number, unknown>;
      let parent: unknown = copy;
      for (const segment of parentPath) parent = (parent as Record<string | number, unknown>)[segment];
      const last = path[path.length - 1]!;
      if (Array.isArray(parent) && typeof last === "number") parent.splice(last, 1);
      else delete (parent as Record<string | number, unknown>)[last];
      wellFormed(parseSpec(stringify(copy), "deleted.yaml"));
    }
  });
});

describe("parseSpec on a merge key with non-map sources", () => {
  // found by the property test above (fast-check counterexample {"": {"<<": [""]}}): the YAML library only
  // checks merge sources while building values, and that error must come back as an issue, not a throw
  it("returns an issue instead of throwing", () => {
    const result = parseSpec('"":\n  <<:\n    - ""\n', "merge.yaml");
    expect(result.ok).toBe(false);
    if (result.ok) return;
    expect(result.issues[0]!.message).toMatch(/^yaml: merge sources must be maps/);
  });
});

describe("parseSpec on a document nested beyond the reader's stack", () => {
  // 100,000 nested flow sequences: the yaml library stops at its call stack (code RESOURCE_EXHAUSTION); the issue says
  // what is wrong in words, not as JavaScript's "maximum call stack size exceeded"
  it("names the nesting, at a position in the first line", () => {
    const depth = 100_000;
    const result = parseSpec(`input: ${"[".repeat(depth)}${"]".repeat(depth)}\n`, "deep.yaml");
    expect(result.ok).toBe(false);
    if (result.ok) return;
    expect(result.issues[0]!.message).toBe("yaml: the document nests too deeply to read here (a spec needs a few levels of lists and mappings)");
    expect(result.issues[0]!.line).toBe(1);
    expect(result.issues[0]!.column).toBeGreaterThan(8);
  });
});
