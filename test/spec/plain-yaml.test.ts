// The fast reader of plain YAML against the yaml library (npm, the reference for YAML 1.2 here): whenever the
// reader gives a value, the library must read the same text without errors and give an equal value; on anything
// else the reader must step aside (undefined). Scalars follow the YAML 1.2.2 core schema (§10.3.2).
import { readdirSync, readFileSync } from "node:fs";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import * as fc from "fast-check";
import { describe, expect, test } from "vitest";
import { parseDocument } from "yaml";
import { readPlainYaml } from "../../src/spec/plain-yaml.js";
import { parseSpec } from "../../src/spec/index.js";

/** What the yaml library gives for a text, as parseSpec calls it; "error" when it reports a problem. */
function reference(text: string): unknown {
  const doc = parseDocument(text, { merge: true, uniqueKeys: true });
  if (doc.errors.length > 0) return "error";
  try {
    return doc.toJS({ maxAliasCount: 100 });
  } catch {
    return "error";
  }
}

function agrees(text: string): boolean {
  const mine = readPlainYaml(text);
  if (mine === undefined) return true;
  expect({ text, value: mine }).toEqual({ text, value: reference(text) });
  return true;
}

function yamlFiles(dir: string): string[] {
  return readdirSync(dir, { withFileTypes: true }).flatMap((entry) =>
    entry.isDirectory() ? yamlFiles(join(dir, entry.name)) : /\.ya?ml$/.test(entry.name) ? [join(dir, entry.name)] : [],
  );
}

const root = fileURLToPath(new URL("../../", import.meta.url));

describe("readPlainYaml", () => {
  test("reads every example spec, equal to the yaml library", () => {
    for (const file of yamlFiles(join(root, "specs"))) {
      const text = readFileSync(file, "utf8");
      const value = readPlainYaml(text);
      expect(value, file).not.toBeUndefined();
      expect(value, file).toEqual(reference(text));
    }
  });

  test("agrees with the yaml library on every test fixture, or steps aside", () => {
    for (const file of yamlFiles(join(root, "test"))) agrees(readFileSync(file, "utf8").replace(/^\uFEFF/, ""));
  });

  test("core schema scalars, comments, quoting and layouts", () => {
    const text = [
      "ints: [1, -2, +4, 007, 0x1F, 0o17, -0]",
      "floats: [1.5e3, 3., .5, -.5, +.5e-3, .inf, -.Inf, .NaN]",
      "words: [true, False, NULL, ~, yes, no, on, 1_0, e5]",
      "time: 12:30",
      "quoted: { a: \"x y\", b: 'it''s', c: '' }",
      "plain: a#b, 32×32 crops (12 classes) [a] # a comment",
      "empty:",
      "list:",
      "- 1",
      "-",
      "- a: 1",
      "  b: { c: [] }",
      "-   d: 2",
      "nested: # a comment",
      "  deeper:",
      "      - x",
      "",
    ].join("\n");
    const value = readPlainYaml(text) as Record<string, unknown>;
    expect(value).toEqual(reference(text));
    expect(value["ints"]).toEqual([1, -2, 4, 7, 31, 15, -0]);
    expect(value["words"]).toEqual([true, false, null, null, "yes", "no", "on", "1_0", "e5"]);
    expect(value["time"]).toBe("12:30");
    expect(value["list"]).toEqual([1, null, { a: 1, b: { c: [] } }, { d: 2 }]);
  });

  test.each([
    ["an anchor and an alias", "a: &x 1\nb: *x\n"],
    ["a merge key", "a: { b: 1 }\nc:\n  <<: { b: 2 }\n"],
    ["a tag", "a: !t 1\n"],
    ["a block scalar", "a: |\n  text\n"],
    ["a plain scalar on two lines", "a: one\n  two\n"],
    ["a repeated key", "a: 1\na: 2\n"],
    ["a quoted key", "\"a\": 1\n"],
    ["an escape", 'a: "x\\ty"\n'],
    ["a tab", "a:\n\tb: 1\n"],
    ["CR line ends", "a: 1\r\nb: 2\r\n"],
    ["a second document", "a: 1\n---\nb: 2\n"],
    ["a flow collection over two lines", "a: [1,\n  2]\n"],
    ["a nested mapping on one line", "a: b: c\n"],
    ["uneven indentation", "a:\n    b: 1\n  c: 2\n"],
    ["a key that is not a string", "true: 1\n"],
    ["an indented first line", "  a: 1\n"],
    ["an empty text", "# only a comment\n"],
  ])("steps aside for %s", (_, text) => {
    expect(readPlainYaml(text)).toBeUndefined();
  });

  test("agrees with the yaml library on generated and damaged documents", () => {
    const scalars = ["a", "b c", "true", "NULL", "~", "1", "-2", "0x1F", "1.5e3", ".inf", "3.", "+4", "e5", "a:b", "a#b", "'q'", '"d"', "'it''s'", "a, b", "[x]", "-x", "-.5", "no", "a #c"];
    const keys = ["a", "b", "key", "x-y", "$s", "learning-rate", "null", "a.b"];
    type Tree = string | [string, Tree][] | { seq: Tree[] };
    const { tree } = fc.letrec<{ tree: Tree; map: [string, Tree][]; seq: { seq: Tree[] } }>((tie) => ({
      tree: fc.oneof({ depthSize: "small" }, fc.constantFrom(...scalars), tie("map"), tie("seq")),
      map: fc.array(fc.tuple(fc.constantFrom(...keys), tie("tree")), { maxLength: 4 }),
      seq: fc.array(tie("tree"), { maxLength: 4 }).map((seq) => ({ seq })),
    }));
    const flow = (v: Tree): string =>
      typeof v === "string" ? v : Array.isArray(v) ? `{ ${v.map(([k, x]) => `${k}: ${flow(x)}`).join(", ")} }` : `[${v.seq.map(flow).join(", ")}]`;
    // block layout, with choices drawn from `pick`: indentation steps, flow or block values, comments
    const block = (v: Tree, indent: number, pick: () => number): string | null => {
      const pad = " ".repeat(indent);
      if (typeof v === "string" || (Array.isArray(v) ? v.length === 0 : v.seq.length === 0)) return null;
      if (Array.isArray(v)) {
        return v
          .map(([k, x]) => {
            const inner = pick() < 0.3 ? null : block(x, indent + 1 + Math.floor(pick() * 4), pick);
            return inner === null ? `${pad}${k}: ${flow(x)}${pick() < 0.2 ? " # c" : ""}` : `${pad}${k}:\n${inner}`;
          })
          .join("\n");
      }
      return v.seq
        .map((x) => {
          const gap = 1 + Math.floor(pick() * 3);
          const inner = pick() < 0.3 ? null : block(x, indent + 1 + gap, pick);
          if (inner === null) return `${pad}-${" ".repeat(gap)}${flow(x)}`;
          return Array.isArray(x) && pick() < 0.6 ? `${pad}-${" ".repeat(gap)}${inner.slice(indent + 1 + gap)}` : `${pad}-\n${inner}`;
        })
        .join("\n");
    };
    const damage = fc.array(fc.tuple(fc.nat(), fc.constantFrom(" ", "\n", ":", "- ", "#", "\n ", "'", '"', ",", "[", "}")), { maxLength: 2 });
    const documents = fc.tuple(tree, fc.array(fc.double({ min: 0, max: 1, maxExcluded: true, noNaN: true }), { minLength: 64, maxLength: 64 }), damage).map(([t, draws, cuts]) => {
      let next = 0;
      let text = block(t, 0, () => draws[next++ % draws.length]!) ?? `a: ${flow(t)}`;
      for (const [at, piece] of cuts) {
        const i = at % (text.length + 1);
        text = text.slice(0, i) + piece + text.slice(i);
      }
      return `${text}\n`;
    });
    fc.assert(fc.property(documents, agrees), { numRuns: 3000 });
  });
});

describe("parseSpec on the fast path", () => {
  test("gives the same spec, positions and issues as the yaml library's path", () => {
    const text = readFileSync(join(root, "specs", "transformer-encoder.yaml"), "utf8");
    // the same spec with a tag the fast reader leaves to the yaml library (!!str on the name)
    const tagged = text.replace(/^name: (.*)$/m, "name: !!str $1");
    const fast = parseSpec(text, "t.yaml");
    const full = parseSpec(tagged, "t.yaml");
    if (!fast.ok || !full.ok) throw new Error("the example should load");
    expect(fast.spec).toEqual(full.spec);
    expect(fast.warnings).toEqual(full.warnings);
    for (const path of [["layers", 1, "times"], ["training", "optimizer", "epsilon"], ["blocks", "encoder-block", 0]] as const) {
      expect(fast.locate([...path])).toEqual(full.locate([...path]));
    }
    const broken = text.replace("heads: 8", "heads: -8");
    expect(parseSpec(broken, "t.yaml")).toEqual(parseSpec(broken.replace(/^name: (.*)$/m, "name: !!str $1"), "t.yaml"));
  });
});
