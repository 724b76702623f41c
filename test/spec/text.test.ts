// Spec files are UTF-8 text. Bytes follow RFC 3629 §4 (the UTF-8 syntax: 0xFF never occurs, 0xC3 must be followed by a
// continuation byte); byte-order marks are those of the Unicode Standard §23.8 (EF BB BF, FF FE, FE FF, 00 00 FE FF);
// YAML 1.2.2 §5.1 leaves NUL out of the printable characters.
import { mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { evaluateTask } from "../../src/batch/evaluate.js";
import { formatSpecIssue, loadSpec } from "../../src/spec/index.js";
import { decodeSpecBytes } from "../../src/spec/text.js";

const bytes = (...parts: (string | number[])[]) =>
  Uint8Array.from(parts.flatMap((part) => (typeof part === "string" ? [...new TextEncoder().encode(part)] : part)));

const SPEC = "input: { features: 4 }\ntraining: { batch: 2, loss: { kind: cross-entropy, classes: 2 } }\nlayers: [ { type: dense, width: 2 } ]\n";

describe("decodeSpecBytes", () => {
  test("UTF-8 text, with or without a byte-order mark, and U+FFFD written as its own bytes EF BF BD", () => {
    expect(decodeSpecBytes(bytes("name: tide"), "a.yaml")).toEqual({ ok: true, text: "name: tide" });
    expect(decodeSpecBytes(bytes([0xef, 0xbb, 0xbf], "name: tide"), "a.yaml")).toEqual({ ok: true, text: "name: tide" });
    expect(decodeSpecBytes(bytes("name: \u00e9\ufffd"), "a.yaml")).toEqual({ ok: true, text: "name: \u00e9\ufffd" });
  });

  test("a byte that is not UTF-8 is an issue at its line and column, after a genuine U+FFFD too", () => {
    const result = decodeSpecBytes(bytes("input: 1\nname: \ufffd", [0xff], "x\n"), "a.yaml");
    expect(result.ok).toBe(false);
    if (!result.ok) expect(formatSpecIssue(result.issue)).toBe("a.yaml:2:8: the file is not UTF-8 text: byte 0xff here is not valid UTF-8; save the file as UTF-8");
    const cut = decodeSpecBytes(bytes("name: caf", [0xc3]), "b.yaml");
    expect(cut.ok ? "" : formatSpecIssue(cut.issue)).toBe("b.yaml:1:10: the file is not UTF-8 text: byte 0xc3 here is not valid UTF-8; save the file as UTF-8");
  });

  test("UTF-16 and UTF-32 text is named, with or without a byte-order mark", () => {
    const utf16 = decodeSpecBytes(bytes([0xff, 0xfe], [0x61, 0, 0x3a, 0]), "w.yaml");
    expect(utf16.ok ? "" : utf16.issue.message).toBe("the file is UTF-16 text (it starts with a UTF-16 byte-order mark); save it as UTF-8");
    const utf32 = decodeSpecBytes(bytes([0xff, 0xfe, 0, 0], [0x61, 0, 0, 0]), "w.yaml");
    expect(utf32.ok ? "" : utf32.issue.message).toMatch(/^the file is UTF-32 text/);
    const bare = decodeSpecBytes(bytes([0x61, 0, 0x3a, 0]), "w.yaml");
    expect(bare.ok ? "" : formatSpecIssue(bare.issue)).toBe("w.yaml:1:2: the file holds a NUL character, which YAML does not allow (is it UTF-16 text?); save it as UTF-8");
  });
});

describe("reading spec files that are not UTF-8", () => {
  const dir = mkdtempSync(join(tmpdir(), "headroom-text-"));
  const file = join(dir, "tide.yaml");
  writeFileSync(file, bytes(SPEC, "name: tide", [0xe9], "\n"));

  test("loadSpec refuses them, where the decoder would have let the name pass as tide\ufffd", async () => {
    const result = await loadSpec(file);
    expect(result.ok).toBe(false);
    if (!result.ok) expect(result.issues.map(formatSpecIssue)).toEqual([`${file}:4:11: the file is not UTF-8 text: byte 0xe9 here is not valid UTF-8; save the file as UTF-8`]);
  });

  test("a batch row given the file's bytes is an input error at the same position", async () => {
    const row = await evaluateTask({ file, variant: null }, { readText: () => bytes(SPEC, "name: tide", [0xe9], "\n"), judge: () => { throw new Error("not judged"); } });
    const message = `${file}:4:11: the file is not UTF-8 text: byte 0xe9 here is not valid UTF-8; save the file as UTF-8`;
    const position = { file, line: 4, column: 11 };
    expect(row).toEqual({ status: "error", error: { kind: "input", message, position, issues: [{ message, position }] } });
  });
});
