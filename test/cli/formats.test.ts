import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

describe("headroom formats (the built binary)", () => {
  it("prints the table of formats and their limits", () => {
    const run = runCli(["formats"]);
    expect(run.status).toBe(0);
    expect(run.stderr).toBe("");
    for (const name of ["binary16", "bfloat16", "binary32", "binary64", "tf32", "e5m2", "e4m3"]) expect(run.stdout).toContain(name);
    // IEEE 754-2019 Table 3.5 / OCP 8-bit specification values appear in their rows
    expect(run.stdout).toMatch(/binary16\s+65504\s+≥ 65520\s+2\^-14 = 6\.104e-5\s+2\^-24 = 5\.96e-8/);
    expect(run.stdout).toMatch(/e4m3\s+448\s+> 464\s+2\^-6 = 0\.01563\s+2\^-9 = 0\.001953/);
    expect(run.stdout).toMatch(/e5m2\s+57344\s+≥ 61440/);
    // IEEE 754-2019 §4.3.1, §7.4: binary64 rounds to infinity at (2 − 2^-53)·2^1023 = 2^1024 − 2^970 and beyond (the tie
    // goes to the even 2^1024), 1.797693134862315807937…e308; its largest finite value is (2 − 2^-52)·2^1023 = 1.7976931348623157e308
    expect(run.stdout).toMatch(/binary64\s+1\.7976931348623157e308\s+≥ 1\.7976931348623158e308\s/);
    expect(run.stdout).toMatch(/tf32.*compute only/);
    expect(run.stdout).toMatch(/e4m3 .*no\s+saturates/);
  });

  it("tf32, never kept in a 19-bit encoding, is said to be judged as values rounded to tf32 when a plan names it, as check does", () => {
    const notes = runCli(["formats", "tf32"]).stdout;
    expect(notes).not.toMatch(/not a storage format/);
    expect(notes).toContain("a plan that names it is judged on values rounded to tf32");
    const run = runCli(["check", "specs/deep-relu-he.yaml", "--format", "tf32", "--json"]);
    expect(run.status).toBe(0);
    expect(JSON.parse(run.stdout).formats.map((f: { format: string }) => f.format)).toEqual(["tf32"]);
  });

  it("--json gives every number exact, infinity as null (OCP 8-bit specification: e4m3 max 448, bias 7)", () => {
    const run = runCli(["formats", "--json"]);
    expect(run.status).toBe(0);
    const formats = JSON.parse(run.stdout) as { name: string; maxFinite: number; bias: number; overflowThreshold: number | null; minSubnormal: number }[];
    expect(formats.map((f) => f.name)).toEqual(["binary16", "bfloat16", "binary32", "binary64", "tf32", "e5m2", "e4m3"]);
    const e4m3 = formats.find((f) => f.name === "e4m3");
    expect(e4m3).toMatchObject({ maxFinite: 448, bias: 7, overflowThreshold: 464, minSubnormal: 2 ** -9 });
    expect(formats.find((f) => f.name === "binary64")?.overflowThreshold).toBeNull();
    expect(formats.find((f) => f.name === "binary32")?.maxFinite).toBe(3.4028234663852886e38); // C FLT_MAX
  });

  it("shows only the named formats, aliases accepted", () => {
    const run = runCli(["formats", "bf16", "e4m3", "--json"]);
    expect((JSON.parse(run.stdout) as { name: string }[]).map((f) => f.name)).toEqual(["bfloat16", "e4m3"]);
  });

  it("rejects an unknown format name with one line naming the accepted ones, exit 2", () => {
    const run = runCli(["formats", "float8"]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toBe('headroom: formats: unknown format "float8"; accepted: binary16, bfloat16, binary32, binary64, tf32, e5m2, e4m3 (comma-separated)\n');
  });
});
