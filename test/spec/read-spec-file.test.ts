// One reader of spec files for every command: `check`, `check --vary` and a batch row say the same thing of the same
// bad file (the words are loadSpec's, which named the extension, the size and a folder where the batch reader did not).
import { mkdtempSync, mkdirSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, test } from "vitest";
import { evaluateTask } from "../../src/batch/evaluate.js";
import { formatSpecIssue, loadSpec, MAX_SPEC_BYTES } from "../../src/spec/index.js";
import { runCli } from "../helpers/run.js";

const dir = mkdtempSync(join(tmpdir(), "headroom-read-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
// a folder whose name ends like a spec's
const folderLikeSpec = join(dir, "looks-like.yaml");
mkdirSync(folderLikeSpec);

const judge = () => {
  throw new Error("not judged");
};
const codeError = (code: string) => Object.assign(new Error(code), { code });

/** What loadSpec says of a path: its one issue, as check prints it. */
async function loadMessage(path: string): Promise<string> {
  const loaded = await loadSpec(path);
  if (loaded.ok) throw new Error(`${path} loaded`);
  expect(loaded.issues).toHaveLength(1);
  return formatSpecIssue(loaded.issues[0]!);
}

/** What a batch row says of a path read by `readText`. */
async function rowMessage(file: string, readText: () => string | Uint8Array): Promise<{ kind: string; message: string }> {
  const result = await evaluateTask({ file, variant: null }, { readText, judge });
  if (result.status !== "error") throw new Error(`${file} was judged`);
  return { kind: result.error.kind, message: result.error.message };
}

describe("a batch row reads a spec file as loadSpec does", () => {
  test("another extension is named (common practice: a spec is YAML or JSON, README)", async () => {
    const path = join(dir, "notes.txt");
    writeFileSync(path, "name: x\n");
    const expected = await loadMessage(path);
    expect(expected).toBe(`${path}: unsupported extension ".txt": a spec is a .yaml, .yml or .json file`);
    expect(await rowMessage(path, () => "name: x\n")).toEqual({ kind: "input", message: expected });
  });

  test("a folder is named as one (the read fails with EISDIR, as Node's readFile does on a folder)", async () => {
    const path = folderLikeSpec;
    const expected = await loadMessage(path);
    expect(expected).toMatch(/: a folder, not a spec file: /);
    expect(await rowMessage(path, () => { throw codeError("EISDIR"); })).toEqual({ kind: "input", message: expected });
  });

  test("a file above the 10 MiB limit says its size", async () => {
    const path = join(dir, "huge.yaml");
    const bytes = new Uint8Array(MAX_SPEC_BYTES + 1).fill(0x20);
    writeFileSync(path, bytes);
    const expected = await loadMessage(path);
    expect(expected).toBe(`${path}: the file has ${MAX_SPEC_BYTES + 1} bytes, above the limit of ${MAX_SPEC_BYTES} bytes (10 MiB) for a spec`);
    expect(await rowMessage(path, () => bytes)).toEqual({ kind: "input", message: expected });
  });

  test("a missing file and a refused read say the same; an error that is not the file's is headroom's own", async () => {
    const path = join(dir, "gone.yaml");
    expect(await rowMessage(path, () => { throw codeError("ENOENT"); })).toEqual({ kind: "input", message: await loadMessage(path) });
    expect(await rowMessage(path, () => { throw codeError("EACCES"); })).toEqual({ kind: "input", message: `${path}: permission denied` });
    expect(await rowMessage(path, () => { throw new Error("disk on fire"); })).toEqual({ kind: "internal", message: `${path}: disk on fire` });
  });
});

describe("check --vary reads the spec as a plain check does (run npm run build first)", () => {
  test.each([
    ["a folder", () => dir],
    ["a missing path without an extension", () => join(dir, "no-such-folder")],
    ["a folder named like a spec", () => folderLikeSpec],
  ])("%s", (_, path) => {
    const plain = runCli(["check", path()]);
    const varied = runCli(["check", path(), "--vary", "training.batch=8,16"]);
    expect(plain.status).toBe(2);
    expect(varied.status).toBe(2);
    expect(varied.stderr).toBe(plain.stderr);
  });
});
