import { f16round } from "@petamoriken/float16";
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

/** The binary32 bit pattern of a number already in binary32 (IEEE 754-2019 §3.4 layout). */
function binary32Bits(value: number): number {
  const view = new DataView(new ArrayBuffer(4));
  view.setFloat32(0, value);
  return view.getUint32(0);
}

/** The binary32 value of a bit pattern. */
function binary32Value(bits: number): number {
  const view = new DataView(new ArrayBuffer(4));
  view.setUint32(0, bits >>> 0);
  return view.getFloat32(0);
}

/**
 * A normal OCP 8-bit value from its code: (-1)^S · 2^(E − bias) · (1 + M / 2^m) (OCP 8-bit floating point
 * specification rev. 1.0, §5: E4M3 has bias 7 and 3 mantissa bits, E5M2 bias 15 and 2).
 */
function ocpNormal(code: number, mantissaBits: number, bias: number): number {
  const exponent = (code & 0x7f) >> mantissaBits;
  const mantissa = code & ((1 << mantissaBits) - 1);
  return (code & 0x80 ? -1 : 1) * 2 ** (exponent - bias) * (1 + mantissa / 2 ** mantissaBits);
}

describe("headroom round without --to: every storage format", () => {
  // one run for the checks below, made by the first that asks
  let run: ReturnType<typeof runCli> | undefined;
  const ran = () => (run ??= runCli(["round", "0.1", "--json"]));
  const byFormat = {
    get(format: string): Row | undefined {
      const { stdout } = ran();
      return stdout === "" ? undefined : rows(stdout).find((r) => r.format === format);
    },
  };

  it("one row per storage format, in the order `headroom formats` lists them (not tf32, never stored; not binary64, the source)", () => {
    expect(ran().stderr).toBe("");
    expect(ran().status).toBe(0);
    expect(rows(ran().stdout).map((r) => r.format)).toEqual(["binary16", "bfloat16", "binary32", "e5m2", "e4m3"]);
  });

  it("binary16 as @petamoriken/float16's f16round, binary32 as Math.fround (ECMA-262 §21.3.2.17)", () => {
    expect(byFormat.get("binary16")?.rounded).toBe(f16round(0.1));
    expect(byFormat.get("binary32")?.rounded).toBe(Math.fround(0.1));
    expect(byFormat.get("binary32")?.bits).toBe(`0x${binary32Bits(Math.fround(0.1)).toString(16)}`);
  });

  it("bfloat16: Math.fround's bits rounded to their upper 16 by nearest-even (bfloat16 is binary32 with 16 fraction bits dropped)", () => {
    const bits = binary32Bits(Math.fround(0.1));
    const low = bits & 0xffff;
    // the dropped half is far from the tie 0x8000, so rounding once from binary64 and twice through binary32 agree
    expect(Math.abs(low - 0x8000)).toBeGreaterThan(0x100);
    const upper = (bits >>> 16) + (low > 0x8000 || (low === 0x8000 && (bits >>> 16) % 2 === 1) ? 1 : 0);
    expect(byFormat.get("bfloat16")?.rounded).toBe(binary32Value(upper << 16));
    expect(byFormat.get("bfloat16")?.rounded).toBe(0.10009765625);
    expect(byFormat.get("bfloat16")?.bits).toBe(`0x${upper.toString(16)}`);
  });

  it("e5m2 and e4m3: the nearest of the OCP 8-bit grid around 0.1 (OCP 8-bit floating point specification rev. 1.0)", () => {
    // 0.1 lies in the binade [2^-4, 2^-3): the grid points there are 2^-4 · (1 + k / 2^m)
    for (const [format, mantissaBits, bias] of [["e5m2", 2, 15], ["e4m3", 3, 7]] as const) {
      const step = 2 ** -4 / 2 ** mantissaBits;
      const below = Math.floor(0.1 / step) * step;
      const nearest = 0.1 - below < below + step - 0.1 ? below : below + step;
      const row = byFormat.get(format);
      expect(row?.rounded, format).toBe(nearest);
      expect(ocpNormal(Number(row?.bits), mantissaBits, bias), format).toBe(nearest);
    }
    expect(byFormat.get("e5m2")?.rounded).toBe(0.09375);
    expect(byFormat.get("e4m3")?.rounded).toBe(0.1015625);
  });

  it("the table: the same five rows, errors to 4 significant digits written as the other tables write numbers (no e+)", () => {
    const text = runCli(["round", "0.1", "6e4", "--to", "binary16,bfloat16,binary32,e5m2,e4m3"]);
    expect(text.status).toBe(0);
    const lines = text.stdout.trimEnd().split("\n");
    expect(lines).toHaveLength(11);
    expect(lines.slice(1, 6).map((line) => line.trim().split(/\s+/)[1])).toEqual(["binary16", "bfloat16", "binary32", "e5m2", "e4m3"]);
    // binary16: |0.1 − f16round(0.1)| = 2.44140625…e-5 (@petamoriken/float16), 4 significant digits
    expect(lines[1]).toMatch(/\s2\.441e-5\s+0\.0002441$/);
    // 6e4 in e4m3 saturates to 448 (OCP E4M3 largest finite): the error 59552 is a whole number and printed whole
    expect(lines[10]).toMatch(/^\s*6e4\s+e4m3\s+448\s+0x7e\s+saturated\s+59552\s+0\.9925$/);
    // and without --to, the same table
    expect(runCli(["round", "0.1", "6e4"]).stdout).toBe(text.stdout);
    for (const line of lines.slice(1)) {
      const errors = line.trim().split(/\s+/).slice(-2);
      for (const cell of errors) {
        expect(cell, line).not.toMatch(/e\+/);
        if (/^[\d.]+(e-?\d+)?$/.test(cell) && !/^\d+$/.test(cell)) expect(cell.replace(/e.*$/, "").replace(/^[0.]+/, "").replace(".", "").length, line).toBeLessThanOrEqual(4);
      }
    }
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

describe("round: a decimal past binary64's range", () => {
  // binary64's largest finite value is (2 − 2^-52)·2^1023 ≈ 1.7976931348623157e308 (IEEE 754-2019 §3.6); 1e400 reads
  // as infinity there, so rounding it further would report an infinity with no error
  it("is refused with exit code 2, naming the range; inf is still accepted", () => {
    const run = runCli(["round", "1e400", "--to", "binary16"]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toContain("1e400 is beyond binary64's range (largest finite 1.7976931348623157e308)");
    expect(runCli(["round", "inf", "--to", "binary16"]).status).toBe(0);
    expect(runCli(["round", "1.7976931348623157e308", "--to", "binary16"]).status).toBe(0);
  });
});

describe("round: a nonzero decimal below binary64's range", () => {
  // binary64's smallest subnormal is 2^-1074 ≈ 4.9406564584124654e-324 (IEEE 754-2019 §3.6); below half of it a decimal
  // reads as 0 (§4.3.1), so 1e-400 would be shown as rounding to 0 with an error of 0
  it("is refused with exit code 2, naming the range; zeros and the smallest subnormal are still accepted", () => {
    const run = runCli(["round", "1e-400", "--to", "binary16"]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toContain("1e-400 is below binary64's range (smallest subnormal 5e-324)");
    expect(runCli(["round", "-2e-324", "--to", "binary16"]).status).toBe(2);
    for (const accepted of ["0", "-0.000", "0e-500", "5e-324", "3e-324"]) expect(runCli(["round", accepted, "--to", "binary16"]).status).toBe(0);
  });
});
