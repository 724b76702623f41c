import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

interface Row {
  input: string;
  value: number | string;
  format: string;
  rounded: number | string;
  bits: string;
  class: string;
  flushed: boolean;
  absoluteError: number | string;
  relativeError: number | string;
}

function rows(stdout: string): Row[] {
  return stdout.trimEnd().split("\n").map((line) => JSON.parse(line) as Row);
}

describe("headroom round (the built binary)", () => {
  it("rounds each value into each format: value, bit pattern, class, errors (SCIENCE.md §1.1: 65519 → 65504, 65520 → inf)", () => {
    const run = runCli(["round", "65519", "65520", "--to", "binary16,bfloat16"]);
    expect(run.status).toBe(0);
    expect(run.stderr).toBe("");
    const lines = run.stdout.trimEnd().split("\n");
    expect(lines[0]).toMatch(/value\s+format\s+rounded\s+bits\s+class\s+abs error\s+rel error/);
    expect(lines[1]).toMatch(/65519\s+binary16\s+65504\s+0x7bff\s+normal\s+15\s+0\.0002289/);
    expect(lines[3]).toMatch(/65520\s+binary16\s+inf\s+0x7c00\s+infinite\s+inf\s+inf/);
    expect(lines[4]).toMatch(/65520\s+bfloat16\s+65536\s+0x4780\s+normal/);
    expect(lines).toHaveLength(5);
  });

  it("--json gives one object per line; 1e-8 flushes in binary16 and is 1.00117e-8 in bfloat16 (common practice)", () => {
    const run = runCli(["round", "1e-8", "--to", "binary16,bfloat16", "--json"]);
    expect(run.status).toBe(0);
    const [half, brain] = rows(run.stdout);
    expect(half).toEqual({
      input: "1e-8", value: 1e-8, format: "binary16", rounded: 0, bits: "0x0000", class: "zero", flushed: true,
      absoluteError: 1e-8, relativeError: 1,
    });
    expect(brain?.rounded).toBe(1.0011717677116394e-8);
    expect(brain?.bits).toBe("0x322c");
    expect(brain?.class).toBe("normal");
  });

  it("takes 0x-prefixed binary64 bit patterns (2^-25 → 0, the next binary64 above → 2^-24 in binary16; SCIENCE.md §1.1)", () => {
    const run = runCli(["round", "0x3e60000000000000", "0x3e60000000000001", "--to", "binary16", "--json"]);
    const [tie, above] = rows(run.stdout);
    expect(tie).toMatchObject({ value: 2 ** -25, rounded: 0, class: "zero", flushed: true });
    expect(above).toMatchObject({ rounded: 2 ** -24, bits: "0x0001", class: "subnormal" });
  });

  it("e4m3: 465 saturates to 448 by default, NaN with --overflow infinity-or-nan (OCP 8-bit specification)", () => {
    const saturating = rows(runCli(["round", "464", "465", "--to", "e4m3", "--json"]).stdout);
    expect(saturating.map((r) => [r.rounded, r.bits, r.class])).toEqual([[448, "0x7e", "normal"], [448, "0x7e", "saturated"]]);
    const nan = rows(runCli(["round", "465", "--to", "e4m3", "--overflow", "infinity-or-nan", "--json"]).stdout);
    expect(nan[0]).toMatchObject({ rounded: "NaN", bits: "0x7f", class: "nan" });
    const e5 = rows(runCli(["round", "61440", "--to", "e5m2", "--overflow", "saturate", "--json"]).stdout);
    expect(e5[0]).toMatchObject({ rounded: 57344, bits: "0x7b", class: "saturated" });
  });

  it("negative values, signed zero, inf and nan", () => {
    const out = rows(runCli(["round", "-65520", "-0", "-inf", "nan", "--to", "binary16", "--json"]).stdout);
    expect(out.map((r) => [r.rounded, r.bits, r.class])).toEqual([
      ["-Infinity", "0xfc00", "infinite"],
      [0, "0x8000", "zero"],
      ["-Infinity", "0xfc00", "infinite"],
      ["NaN", "0x7e00", "nan"],
    ]);
  });

  it("toward-zero, stochastic with a seed (reproducible), and flushed subnormals", () => {
    const tz = rows(runCli(["round", "1.99", "--to", "e4m3", "--rounding", "toward-zero", "--json"]).stdout);
    expect(tz[0]?.rounded).toBe(1.875);
    const a = runCli(["round", "1.01", "1.02", "1.03", "--to", "bfloat16", "--rounding", "stochastic", "--seed", "7", "--json"]);
    const b = runCli(["round", "1.01", "1.02", "1.03", "--to", "bfloat16", "--rounding", "stochastic", "--seed", "7", "--json"]);
    expect(a.stdout).toBe(b.stdout);
    for (const r of rows(a.stdout)) expect([1, 1.0078125, 1.015625, 1.0234375, 1.03125]).toContain(r.rounded);
    const flushed = rows(runCli(["round", "1e-39", "--to", "bfloat16", "--flush-subnormals", "--json"]).stdout);
    expect(flushed[0]).toMatchObject({ rounded: 0, class: "zero", flushed: true });
  });

  it("reads values one per line from stdin with -, streaming a large input", () => {
    const count = 20000;
    const input = Array.from({ length: count }, (_, i) => String(i * 0.25)).join("\n") + "\n";
    const run = runCli(["round", "-", "--to", "binary16", "--json"], { input });
    expect(run.status).toBe(0);
    const lines = run.stdout.trimEnd().split("\n");
    expect(lines).toHaveLength(count);
    expect(JSON.parse(lines[3] as string)).toMatchObject({ input: "0.75", rounded: 0.75, bits: "0x3a00" });
  });

  it("bad input: one line naming what was wrong and what is accepted, exit code 2, no stack trace", () => {
    const cases: [string[], string | undefined, RegExp][] = [
      [["round", "abc", "--to", "binary16"], undefined, /^headroom: "abc" is not a number; accepted: a decimal number .* or 0x followed by 16 hex digits/],
      [["round", "1", "--to", "binary8"], undefined, /^headroom: --to: unknown format "binary8" \(did you mean "binary16"\?\); accepted: binary16, bfloat16, binary32, binary64, tf32, e5m2, e4m3/],
      [["round", "0x3ff00000", "--to", "binary16"], undefined, /^headroom: malformed binary64 bit pattern "0x3ff00000": expected 0x followed by exactly 16 hex digits/],
      [["round", "0x3ff000000000000g", "--to", "binary16"], undefined, /^headroom: malformed binary64 bit pattern/],
      [["round", "-", "--to", "binary16"], "", /^headroom: no values on stdin; expected one value per line/],
      [["round", "-", "--to", "binary16"], "1\n2\nfoo\n", /^headroom: stdin line 3: "foo" is not a number; accepted:/],
    ];
    for (const [args, input, message] of cases) {
      const run = runCli(args, input === undefined ? {} : { input });
      expect(run.status, args.join(" ")).toBe(2);
      expect(run.stderr).toMatch(message);
      expect(run.stderr.trimEnd().split("\n")).toHaveLength(1);
      expect(run.stderr).not.toMatch(/\n\s+at /);
    }
    const unknown = runCli(["round", "1", "--jsn", "--to", "binary16"]);
    expect(unknown.status).toBe(2);
    expect(unknown.stderr).toMatch(/^headroom: unknown option "--jsn"/);
    // nothing is printed for a bad argument, even after good ones
    expect(runCli(["round", "1", "abc", "--to", "binary16"]).stdout).toBe("");
    // an empty stdin prints no header either
    expect(runCli(["round", "-", "--to", "binary16"], { input: "" }).stdout).toBe("");
  });
});

describe("the README's round example", () => {
  it("shows what the command prints", async () => {
    const { readFileSync } = await import("node:fs");
    const { ROOT } = await import("../helpers/run.js");
    const readme = readFileSync(`${ROOT}README.md`, "utf8");
    const run = runCli(["round", "65519", "65520", "1e-8", "--to", "binary16,bfloat16"]);
    expect(readme).toContain("npx headroom round 65519 65520 1e-8 --to binary16,bfloat16");
    expect(readme).toContain("```\n" + run.stdout + "```");
  });
});

describe("a reader that stops early", () => {
  it("ends quietly with exit code 0 when stdout closes (| head), no stack trace", async () => {
    const { spawnSync } = await import("node:child_process");
    const { BIN } = await import("../helpers/run.js");
    const script = `seq 1 300000 | "${process.execPath}" "${BIN}" round - --to binary16 | head -n 2 >/dev/null; echo "status=\${PIPESTATUS[1]}"`;
    const run = spawnSync("bash", ["-c", script], { encoding: "utf8" });
    expect(run.stdout.trim()).toBe("status=0");
    expect(run.stderr).toBe("");
  });
});
