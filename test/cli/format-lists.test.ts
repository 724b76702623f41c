/**
 * Every command that takes a list of number formats reads it the same way (src/cli/lists.ts): the same one-line
 * message for a misspelt name, with the nearest known name; an empty item refused; a format named twice (by its name
 * or an alias) counted once. The built binary, as users run it. A bad list is an input error: exit code 2
 * (DEVELOPERS.md, "Exit codes").
 */
import { readFileSync } from "node:fs";
import { afterAll, describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";
import { encode, npyBytes, scratch } from "../measure/writers.js";

const files = scratch();
afterAll(() => files.cleanup());
const tensor = files.write("gains.npy", npyBytes(1, "<f4", [3], encode("F32", [1, 1e-9, 7e4])));

const SPEC = "specs/deep-relu-he.yaml";
// FORMAT_NAMES, in their order (IEEE 754-2019 binary16/32/64, bfloat16, tf32, OCP 8-bit e5m2 and e4m3)
const ACCEPTED = "accepted: binary16, bfloat16, binary32, binary64, tf32, e5m2, e4m3 (comma-separated)";
const STACK = /\n\s+at /;

/** Each command with a list of formats, how the list is given, and the name its messages give the list. */
const COMMANDS: { command: string; label: string; args: (list: string) => string[] }[] = [
  { command: "check", label: "--format", args: (list) => ["check", "--format", list, SPEC] },
  { command: "explain", label: "--format", args: (list) => ["explain", "--format", list, SPEC, "hidden-stack.0.use-0.dense-0/activation-gradient"] },
  { command: "report", label: "--format", args: (list) => ["report", "--format", list, SPEC] },
  { command: "round", label: "--to", args: (list) => ["round", "65520", "1e-9", "--to", list] },
  { command: "scan", label: "--to", args: (list) => ["scan", tensor, "--to", list] },
  { command: "formats", label: "formats", args: (list) => ["formats", list] },
];

describe("lists of formats: one rule for every command", () => {
  for (const { command, label, args } of COMMANDS) {
    it(`${command}: a misspelt name gets the nearest known one, one line, exit 2, no stack trace`, () => {
      // "bfloat61" is "bfloat16" with two neighbours swapped: edit distance 1 (Damerau 1964)
      const run = runCli(args("binary16,bfloat61"));
      expect(run.status).toBe(2);
      expect(run.stdout).toBe("");
      expect(run.stderr).toBe(`headroom: ${label}: unknown format "bfloat61" (did you mean "bfloat16"?); ${ACCEPTED}\n`);
      expect(run.stderr).not.toMatch(STACK);
      // nothing close: no suggestion, the same shape otherwise
      const far = runCli(args("float8"));
      expect(far.status).toBe(2);
      expect(far.stderr).toBe(`headroom: ${label}: unknown format "float8"; ${ACCEPTED}\n`);
    });

    it(`${command}: an empty item is refused, wherever it stands`, () => {
      for (const list of ["binary16,,e4m3", "binary16,", ",e4m3", " , "]) {
        const run = runCli(args(list));
        expect(run.status, list).toBe(2);
        expect(run.stderr).toBe(`headroom: ${label}: empty item in ${JSON.stringify(list)}; ${ACCEPTED}\n`);
      }
      const none = runCli(args(""));
      expect(none.status).toBe(2);
      expect(none.stderr).toBe(`headroom: ${label}: no format given; ${ACCEPTED}\n`);
    });

    it(`${command}: a format named twice, by name or alias, counts once, where it was first named`, () => {
      const repeated = runCli(args("fp16, e4m3,binary16,E4M3"));
      const once = runCli(args("binary16,e4m3"));
      expect(repeated.stderr).toBe("");
      expect(once.stderr).toBe("");
      expect(repeated.stdout).toBe(once.stdout);
      expect(repeated.status).toBe(once.status);
      // and the list really judged both formats, in that order
      expect(once.stdout.indexOf("binary16")).toBeGreaterThanOrEqual(0);
      expect(once.stdout.indexOf("binary16")).toBeLessThan(once.stdout.indexOf("e4m3"));
    });
  }

  it("--format f16 gets the hint a spec with f16 gets (one alias table for both)", () => {
    const text = readFileSync(SPEC, "utf8");
    expect(text).toContain("  activations: binary16\n");
    const spec = files.write("f16.yaml", new TextEncoder().encode(text.replace("  activations: binary16\n", "  activations: f16\n")));
    const fromSpec = runCli(["check", spec]);
    expect(fromSpec.status).toBe(2);
    const fromOption = runCli(["check", "--format", "f16", SPEC]);
    expect(fromOption.status).toBe(2);
    expect(fromOption.stdout).toBe("");
    expect(fromOption.stderr).toBe(`headroom: --format: unknown format "f16" (did you mean "binary16"?); ${ACCEPTED}\n`);
    const hint = / \(did you mean "[^"]+"\?\)/;
    expect(fromSpec.stderr).toMatch(/precision\.activations: unknown format "f16" \(did you mean "binary16"\?\)/);
    expect(fromSpec.stderr.match(hint)?.[0]).toBe(fromOption.stderr.match(hint)?.[0]);
  });

  it("check: repeated --format options make one list, read by the same rule", () => {
    const run = runCli(["check", "--json", "--format", "fp16", "--format", "e4m3,binary16", SPEC]);
    expect(run.stderr).toBe("");
    const result = JSON.parse(run.stdout) as { formats: { format: string }[] };
    expect(result.formats.map((f) => f.format)).toEqual(["binary16", "e4m3"]);
    const bad = runCli(["check", "--format", "fp16", "--format", "", SPEC]);
    expect(bad.status).toBe(2);
    expect(bad.stderr).toBe(`headroom: --format: no format given; ${ACCEPTED}\n`);
  });

  it("round and scan: one row per format named once", () => {
    const rows = runCli(["round", "1", "--to", "bf16,bfloat16,e5m2", "--json"]).stdout.trimEnd().split("\n");
    expect(rows.map((row) => (JSON.parse(row) as { format: string }).format)).toEqual(["bfloat16", "e5m2"]);
    const scan = JSON.parse(runCli(["scan", tensor, "--to", "e4m3,fp16,e4m3", "--json"]).stdout) as unknown;
    const targets = JSON.stringify(scan).match(/"format":"[a-z0-9]+"/g) ?? [];
    expect(new Set(targets)).toEqual(new Set(['"format":"e4m3"', '"format":"binary16"']));
  });
});
