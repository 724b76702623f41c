/**
 * Errors found by the command-line parser read like every other headroom error (DEVELOPERS.md conventions: one line
 * on stderr, `headroom: <message>`, exit code 2 for input errors, no stack trace, nothing on stdout), with the
 * project's did-you-mean wording (src/spec/issues.ts). The built binary, as users run it.
 */
import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

const SPEC = "specs/deep-relu-he.yaml";
const STACK = /\n\s+at /;

/** Arguments, and the one line they must give. */
const CASES: [string[], string][] = [
  // "--formt" is "--format" less one letter: edit distance 1 (Damerau 1964)
  [["check", "--formt", "binary16", SPEC], 'headroom: unknown option "--formt" (did you mean "--format"?)'],
  [["check", "--formt=binary16", SPEC], 'headroom: unknown option "--formt=binary16" (did you mean "--format"?)'],
  [["formats", "--jsn"], 'headroom: unknown option "--jsn" (did you mean "--json"?)'],
  [["check", SPEC, "--colour-me"], 'headroom: unknown option "--colour-me"; see headroom check --help'],
  [["--formt"], 'headroom: unknown option "--formt"; see headroom --help'],
  // round reads unknown options itself (its values may start with "-"), in the same words
  [["round", "1", "--jsn"], 'headroom: unknown option "--jsn" (did you mean "--json"?)'],
  [["round", "1", "--xyz"], 'headroom: unknown option "--xyz"; see headroom round --help (values may be decimal numbers, inf, nan or 0x patterns)'],
  // after "--" a known option is a value: not "unknown option "--to" (did you mean "--to"?)"
  [["round", "--", "-1", "--to", "e4m3"], 'headroom: "--to" came after "--", where every word is a value; put the options before "--"'],
  // "chek" is "check" less one letter
  [["chek", SPEC], 'headroom: unknown command "chek" (did you mean "check"?)'],
  [["xyzzy"], 'headroom: unknown command "xyzzy"; see headroom --help'],
  // asking an unknown command for help is the same error, not the program's help with exit 0
  [["measure", "--help"], 'headroom: unknown command "measure"; see headroom --help'],
  [["measure", "-h"], 'headroom: unknown command "measure"; see headroom --help'],
  [["chek", SPEC, "--help"], 'headroom: unknown command "chek" (did you mean "check"?)'],
  [["help", "measure"], 'headroom: unknown command "measure"; see headroom --help'],
  [["check"], 'headroom: missing argument "spec"; usage: headroom check [options] <spec>'],
  [["scan"], 'headroom: missing argument "files"; usage: headroom scan [options] <files...>'],
  [["check", SPEC, "--plan"], "headroom: --plan: no value given (--plan <name>)"],
  [["round", "0.1", "--to"], "headroom: --to: no value given (--to <formats>)"],
  [["round", "0.1", "--rounding", "up"], 'headroom: --rounding: unknown value "up"; accepted: nearest-even, toward-zero, stochastic'],
  // "saturat" is "saturate" less its last letter
  [
    ["round", "0.1", "--overflow", "saturat"],
    'headroom: --overflow: unknown value "saturat" (did you mean "saturate"?); accepted: saturate, infinity-or-nan',
  ],
  [["check", SPEC, SPEC], "headroom: too many arguments: headroom check takes 1, got 2; usage: headroom check [options] <spec>"],
  [["check", SPEC, "--md", "--json"], "headroom: --md cannot be used with --json"],
  // an option with one value given twice: the parser would keep the last silently
  [["check", SPEC, "--plan", "all-bfloat16", "--plan", "mixed-binary16"], 'headroom: --plan is given twice ("all-bfloat16", then "mixed-binary16"); give it once'],
  [["simulate", SPEC, "--plan=all-bfloat16", "--plan", "x"], 'headroom: --plan is given twice ("all-bfloat16", then "x"); give it once'],
  [["simulate", SPEC, "--seed", "1", "--seed", "1"], 'headroom: --seed is given twice ("1", then "1"); give it once'],
  [["scan", "x.npy", "--to", "binary16", "--to", "e4m3"], 'headroom: --to is given twice ("binary16", then "e4m3"); give it once'],
];

describe("parser errors (the built binary)", () => {
  for (const [args, line] of CASES) {
    it(`${args.join(" ")}: one headroom line on stderr, exit 2, nothing on stdout`, () => {
      const run = runCli(args);
      expect(run.status).toBe(2);
      expect(run.stdout).toBe("");
      expect(run.stderr).toBe(`${line}\n`);
      expect(run.stderr).not.toMatch(STACK);
    });
  }

  it("a repeatable option (--format) and a repeated flag are still taken", () => {
    const run = runCli(["check", SPEC, "--format", "binary16", "--format", "bfloat16", "--json", "--json"]);
    expect(run.stderr).toBe("");
    expect(JSON.parse(run.stdout)).toBeTypeOf("object");
  });

  it("help and version are not errors: stdout, exit 0, and help for a bare headroom still goes to stderr with exit 2", () => {
    for (const args of [["--help"], ["check", "--help"], ["round", "--help"], ["help", "scan"]]) {
      const run = runCli(args);
      expect(run.status, args.join(" ")).toBe(0);
      expect(run.stdout).toMatch(/^Usage: headroom/);
      expect(run.stderr).toBe("");
    }
    const version = runCli(["--version"]);
    expect(version.status).toBe(0);
    // major.minor.patch, as package.json's version is written (semantic versioning, common practice)
    expect(version.stdout).toMatch(/^\d+\.\d+\.\d+\n$/);
    const bare = runCli([]);
    expect(bare.status).toBe(2);
    expect(bare.stdout).toBe("");
    expect(bare.stderr).toMatch(/^Usage: headroom/);
  });
});
