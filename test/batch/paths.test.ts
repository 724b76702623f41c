import { mkdirSync, mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { nodePathHost } from "../../src/batch/files.js";
import { expandInputs, isJsonSpec, pathsFromText, specFilesIn, type PathHost } from "../../src/batch/paths.js";

/** An in-memory file system: paths ending in "/" are folders. */
function memoryHost(paths: string[], links: Record<string, string> = {}): PathHost {
  const files = new Set(paths.filter((p) => !p.endsWith("/")));
  const folders = new Set<string>(["."]);
  for (const p of paths) {
    const parts = p.replace(/\/$/, "").split("/");
    for (let i = 1; i < (p.endsWith("/") ? parts.length + 1 : parts.length); i++) folders.add(parts.slice(0, i).join("/"));
  }
  const norm = (p: string) => (p.startsWith("./") ? p.slice(2) : p);
  const kind = (raw: string): "file" | "folder" | undefined => {
    const p = norm(raw);
    const target = links[p] ?? p;
    if (files.has(target)) return "file";
    if (folders.has(target)) return "folder";
    return undefined;
  };
  return {
    kind,
    list(raw) {
      const dir = norm(raw);
      const prefix = dir === "." ? "" : dir + "/";
      const names = new Map<string, "file" | "folder" | "link">();
      for (const p of [...files, ...folders, ...Object.keys(links)]) {
        if (!p.startsWith(prefix) || p === dir) continue;
        const rest = p.slice(prefix.length);
        if (rest === "" || rest.includes("/")) {
          const first = rest.split("/")[0]!;
          if (first && !names.has(first)) names.set(first, "folder");
          continue;
        }
        names.set(rest, p in links ? "link" : files.has(p) ? "file" : "folder");
      }
      return [...names].map(([name, k]) => ({ name, kind: k }));
    },
  };
}

const HOST = memoryHost([
  "specs/b.yaml",
  "specs/a.yml",
  "specs/g.json",
  "specs/network-spec.schema.json",
  "specs/notes.txt",
  "specs/deep/c.yaml",
  "specs/deep/d.YAML",
  "specs/.hidden/e.yaml",
  "specs/node_modules/f.yaml",
  "other/x.yaml",
  "empty/",
  "plain-name",
]);

describe("specFilesIn", () => {
  test("finds .yaml, .yml and .json recursively in byte order, skipping hidden folders, node_modules and JSON Schemas", () => {
    // check reads .json specs (JSON is YAML 1.2's subset, YAML 1.2.2 §1.3), so a folder of them is a folder of specs
    expect(specFilesIn(HOST, "specs")).toEqual(["specs/a.yml", "specs/b.yaml", "specs/deep/c.yaml", "specs/deep/d.YAML", "specs/g.json"]);
    expect(specFilesIn(memoryHost(["only/net.json"]), "only")).toEqual(["only/net.json"]);
  });
});

describe("expandInputs", () => {
  test("files, folders and globs in argument order, each file once", () => {
    const inputs = expandInputs(HOST, ["other/x.yaml", "specs", "specs/*.yaml", "plain-name"]);
    expect(inputs).toEqual([
      { kind: "file", path: "other/x.yaml", argument: "other/x.yaml" },
      { kind: "file", path: "specs/a.yml", argument: "specs" },
      { kind: "file", path: "specs/b.yaml", argument: "specs" },
      { kind: "file", path: "specs/deep/c.yaml", argument: "specs" },
      { kind: "file", path: "specs/deep/d.YAML", argument: "specs" },
      { kind: "file", path: "specs/g.json", argument: "specs" },
      { kind: "file", path: "plain-name", argument: "plain-name" },
    ]);
  });
  test("a ** glob reaches every depth", () => {
    const inputs = expandInputs(HOST, ["**/c.yaml", "./specs/**/*.yaml"]);
    expect(inputs.map((i) => (i.kind === "file" ? i.path : i.message))).toEqual(["specs/deep/c.yaml", "specs/b.yaml"]);
  });
  test("arguments that give no file become error entries in place", () => {
    const inputs = expandInputs(HOST, ["missing.yaml", "specs/b.yaml", "nothing/*.yaml", "empty"]);
    expect(inputs).toEqual([
      { kind: "error", argument: "missing.yaml", message: "missing.yaml: no such file or folder" },
      { kind: "file", path: "specs/b.yaml", argument: "specs/b.yaml" },
      { kind: "error", argument: "nothing/*.yaml", message: "nothing/*.yaml: no file matches this pattern" },
      { kind: "error", argument: "empty", message: "empty: the folder holds no .yaml or .yml files, nor .json specs" },
    ]);
  });
  test("- reads the paths listed on stdin, in place", () => {
    const inputs = expandInputs(HOST, ["other/x.yaml", "-"], { stdinPaths: pathsFromText("specs/b.yaml\r\n\n# a comment\n  specs/deep  \n") });
    expect(inputs.map((i) => (i.kind === "file" ? i.path : i.message))).toEqual([
      "other/x.yaml",
      "specs/b.yaml",
      "specs/deep/c.yaml",
      "specs/deep/d.YAML",
    ]);
  });
  test("symbolic links to files are followed, links to folders are not walked", () => {
    const host = memoryHost(["real/a.yaml", "top/"], { "top/link.yaml": "real/a.yaml", "top/loop": "top" });
    expect(specFilesIn(host, "top")).toEqual(["top/link.yaml"]);
  });
});

describe("JSON in a folder of specs", () => {
  // what a spec folder holds beside its specs (README "Checking many specs"): results saved by check --json, simulate
  // --json and scan --json, recorded statistics, a package.json. A spec always has `layers` (its schema requires it).
  test("a .json file is a spec when its top level is a mapping with layers, or when it is not JSON at all", () => {
    expect(isJsonSpec('{ "name": "kelp", "input": { "features": 8 }, "layers": [] }')).toBe(true);
    // a byte-order mark, as some editors write it (U+FEFF at the start as a signature: Unicode Standard §23.8, from memory)
    expect(isJsonSpec('\uFEFF{ "layers": [{ "type": "dense", "width": 4 }] }')).toBe(true);
    // not JSON: read as YAML, the spec's own errors say what is wrong (a truncated file among them)
    expect(isJsonSpec('{ "name": "kelp", "layers": [')).toBe(true);
    expect(isJsonSpec(undefined)).toBe(true);
    // check --json, simulate --json and scan --json results (their top-level keys), statistics, a package.json
    expect(isJsonSpec('{ "version": 2, "spec": { "name": "kelp" }, "verdict": "fits", "tensors": [] }')).toBe(false);
    expect(isJsonSpec('{ "spec": "kelp", "plan": "half", "tensors": [], "history": [] }')).toBe(false);
    expect(isJsonSpec('{ "files": [], "tensors": [] }')).toBe(false);
    expect(isJsonSpec('[{ "tensor": "dense-0/activation", "rms": 1 }]')).toBe(false);
    expect(isJsonSpec('{ "name": "kelp-survey", "private": true, "dependencies": {} }')).toBe(false);
    expect(isJsonSpec("null")).toBe(false);
  });

  test("a folder's JSON that is no spec is left out; JSON named as a file or by a glob is read as given", () => {
    const dir = mkdtempSync(join(tmpdir(), "headroom-json-"));
    try {
      const folder = join(dir, "kelp");
      mkdirSync(folder);
      const spec = "name: kelp\ninput: { features: 8 }\ntraining: { batch: 4, loss: { kind: mean-squared-error } }\nlayers: [{ type: dense, width: 1 }]\n";
      writeFileSync(join(folder, "kelp.yaml"), spec);
      writeFileSync(join(folder, "kelp-wide.json"), JSON.stringify({ name: "kelp-wide", input: { features: 8 }, layers: [{ type: "dense", width: 64 }] }));
      writeFileSync(join(folder, "kelp.check.json"), JSON.stringify({ version: 2, spec: { name: "kelp" }, verdict: "fits", formats: [], tensors: [] }));
      writeFileSync(join(folder, "package.json"), JSON.stringify({ name: "kelp-survey", private: true }));
      writeFileSync(join(folder, "broken.json"), '{ "name": "kelp", "layers": [');
      const found = expandInputs(nodePathHost, [folder]).map((input) => (input.kind === "file" ? input.path : input.message));
      expect(found).toEqual([join(folder, "broken.json"), join(folder, "kelp-wide.json"), join(folder, "kelp.yaml")]);
      // asked for by name or by a pattern, a JSON file is the user's choice: its row says it is not a spec
      const named = expandInputs(nodePathHost, [join(folder, "kelp.check.json"), `${folder}/*.check.json`]);
      expect(named.map((input) => (input.kind === "file" ? input.path : input.message))).toEqual([join(folder, "kelp.check.json")]);
      // a folder of saved results alone gives no spec, and says so
      const results = join(dir, "results");
      mkdirSync(results);
      writeFileSync(join(results, "kelp.check.json"), JSON.stringify({ version: 2, verdict: "fits" }));
      expect(expandInputs(nodePathHost, [results])).toEqual([{ kind: "error", argument: results, message: `${results}: the folder holds no .yaml or .yml files, nor .json specs` }]);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});

describe("expandInputs on the file system", () => {
  test("lists a file once however its path is written (./, //, .., absolute), at its first place", () => {
    const dir = mkdtempSync(join(tmpdir(), "headroom-paths-"));
    try {
      mkdirSync(join(dir, "tide"));
      writeFileSync(join(dir, "tide", "north.yaml"), "name: north\n");
      writeFileSync(join(dir, "tide", "south.yaml"), "name: south\n");
      const north = join(dir, "tide", "north.yaml");
      const written = [`${dir}/tide//north.yaml`, `${dir}/tide/../tide/north.yaml`, north, `${dir}/./tide/north.yaml`, join(dir, "tide")];
      const inputs = expandInputs(nodePathHost, written);
      expect(inputs.map((input) => (input.kind === "file" ? input.path : input.message))).toEqual([`${dir}/tide//north.yaml`, join(dir, "tide", "south.yaml")]);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
