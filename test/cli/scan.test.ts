/**
 * `headroom scan` as users run it (the built binary). Files come from the independent writer in test/measure/writers.ts.
 */
import { afterAll, describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";
import { encode, npyBytes, safetensorsBytes, scratch } from "../measure/writers.js";

const files = scratch();
afterAll(() => files.cleanup());

const safe = files.write("shard-1.safetensors", safetensorsBytes([{ name: "layers.0.weight", dtype: "F32", shape: [2, 2], data: encode("F32", [0.5, -0.25, 1, 2]) }]));
// 7e4 overflows binary16 (largest finite 65504, IEEE 754-2019); 1e-9 flushes (below 2^-25)
const risky = files.write(
  "shard-2.safetensors",
  safetensorsBytes([
    { name: "embed.weight", dtype: "BF16", shape: [3], data: encode("BF16", [7e4, 1, -1]) },
    { name: "tiny", dtype: "F32", shape: [2], data: encode("F32", [1e-9, 1]) },
    { name: "ids", dtype: "I32", shape: [1], data: encode("I32", [3]) },
  ]),
);
const gains = files.write("gains.npy", npyBytes(1, "<f4", [4], encode("F32", [1, 1, 1, 1])));

// 6e4 fits binary16 only unscaled (2^1·6e4 passes 65504); 1e-12 and 3e-12 lie below half its smallest subnormal
// 2^-24 even then (IEEE 754-2019 §3.3): no scale keeps every value
const wide = files.write("wide.npy", npyBytes(1, "<f4", [3], encode("F32", [6e4, 1e-12, 3e-12])));
const wideOne = files.write("wide-one.npy", npyBytes(1, "<f4", [2], encode("F32", [6e4, 1e-12])));

describe("headroom scan", () => {
  it("words a range no scale fits: the highest safe scale and how many values it still flushes", () => {
    const run = runCli(["scan", wide, "--to", "binary16"]);
    expect(run.status).toBe(1);
    expect(run.stdout).toMatch(/scanned 1 file: 1 tensor measured/);
    expect(run.stdout).toContain("none; at 2^0, 2 values fall below the smallest subnormal");
    const one = runCli(["scan", wideOne, "--to", "binary16"]);
    expect(one.stdout).toContain("none; at 2^0, 1 value falls below the smallest subnormal");
  });

  it("with --flush-subnormals counts what falls below the smallest normal, where a value then flushes", () => {
    // 6e4 fits binary16 only at 2^0; there 1e-4 is normal (above 2^-14 ≈ 6.1e-5) but 1e-6 and 3e-6 are subnormal
    // (IEEE 754-2019 §3.3): kept by a plain cast, flushed by hardware that flushes subnormals
    const sub = files.write("sub.npy", npyBytes(1, "<f4", [4], encode("F32", [6e4, 1e-4, 1e-6, 3e-6])));
    const plain = runCli(["scan", sub, "--to", "binary16", "--all"]);
    expect(plain.stdout).toMatch(/binary16 +safe .* 2\^-5 … 2\^0\n/);
    const flushed = runCli(["scan", sub, "--to", "binary16", "--flush-subnormals"]);
    expect(flushed.status).toBe(1);
    expect(flushed.stdout).toContain("none; at 2^0, 2 values fall below the smallest normal (subnormals flushed)");
  });

  it("exit 0 when every tensor is safe; the table says so", () => {
    const run = runCli(["scan", safe, gains]);
    expect(run.stderr).toBe("");
    expect(run.status).toBe(0);
    expect(run.stdout).toMatch(/scanned 2 files: 2 tensors measured/);
    expect(run.stdout).toMatch(/every tensor is safe to cast into every target/);
  });

  it("exit 1 with findings: only tensors with findings unless --all", () => {
    const run = runCli(["scan", safe, risky]);
    expect(run.status).toBe(1);
    expect(run.stdout).toMatch(/shard-2\.safetensors: embed\.weight\s+BF16/);
    expect(run.stdout).toMatch(/embed\.weight\s+binary16\s+breaks\s+0\s+0\s+1\s+0/);
    expect(run.stdout).toMatch(/tiny\s+binary16\s+lossy\s+1\s/);
    expect(run.stdout).not.toMatch(/layers\.0\.weight/);
    expect(run.stdout).toMatch(/1 skipped \(not floating point\)/);
    const all = runCli(["scan", safe, risky, "--all"]);
    expect(all.stdout).toMatch(/layers\.0\.weight/);
  });

  it("--json: the whole result as data, with counts per target", () => {
    const run = runCli(["scan", risky, "--json", "--to", "binary16,e4m3", "--all"]);
    expect(run.status).toBe(1);
    const result = JSON.parse(run.stdout);
    expect(result.targets.map((t: { format: string; overflow: string }) => [t.format, t.overflow])).toEqual([
      ["binary16", "infinity-or-nan"],
      ["e4m3", "saturate"],
    ]);
    const embed = result.files[0].tensors.find((t: { name: string }) => t.name === "embed.weight");
    expect(embed.casts[0]).toMatchObject({ format: "binary16", overflowed: 1, verdict: "breaks" });
    // bfloat16 keeps 8 significant bits: 7e4 is stored as 70144 (common practice: round to nearest even)
    expect(embed.maxAbs).toBe(70144);
    expect(embed.casts[1]).toMatchObject({ format: "e4m3", saturated: 1, verdict: "lossy" });
    expect(result.files[0].skipped).toEqual([{ name: "ids", dtype: "I32", shape: [1], reason: "not floating point" }]);
  });

  it("--json and --csv hold every tensor, safe ones too, without --all (the table lists those with findings)", () => {
    // 0.5, -0.25, 1 and 2 are normal binary16 and bfloat16 numbers (IEEE 754-2019 §3.3): a safe tensor
    const json = JSON.parse(runCli(["scan", safe, "--json"]).stdout);
    expect(json.files[0].tensors.map((t: { name: string; casts: { verdict: string }[] }) => [t.name, t.casts.map((c) => c.verdict)])).toEqual([
      ["layers.0.weight", ["safe", "safe"]],
    ]);
    const csv = runCli(["scan", safe, "--csv"]).stdout.trimEnd().split(/\r?\n/);
    expect(csv).toHaveLength(3);
    expect(csv[1]).toMatch(/,layers\.0\.weight,F32,2x2,4,.*,binary16,infinity-or-nan,safe,/);
    expect(csv[2]).toMatch(/,layers\.0\.weight,F32,2x2,4,.*,bfloat16,infinity-or-nan,safe,/);
    expect(runCli(["scan", safe]).stdout).not.toMatch(/layers\.0\.weight/);
  });

  it("--csv: one row per tensor and target (RFC 4180)", () => {
    const run = runCli(["scan", risky, "--csv", "--to", "binary16"]);
    const lines = run.stdout.trimEnd().split(/\r?\n/);
    expect(lines[0]).toMatch(/^file,tensor,dtype,shape,elements,zeros,infinities,nans,min_nonzero,max_abs,rms,max_over_rms,format,overflow_mode,verdict/);
    expect(lines).toHaveLength(3);
    expect(lines[1]).toMatch(/,embed\.weight,BF16,3,3,0,0,0,1,70144,/);
  });

  it("a quoted glob scans the shards; --overflow saturate turns an overflow into clipping", () => {
    const run = runCli(["scan", `${files.dir}/shard-*.safetensors`, "--to", "binary16", "--overflow", "saturate", "--json"]);
    const result = JSON.parse(run.stdout);
    expect(result.files.map((f: { file: string }) => f.file.slice(files.dir.length + 1))).toEqual(["shard-1.safetensors", "shard-2.safetensors"]);
    const embed = result.files[1].tensors.find((t: { name: string }) => t.name === "embed.weight");
    expect(embed.casts[0]).toMatchObject({ saturated: 1, overflowed: 0, verdict: "lossy" });
  });

  it("a bad file is an error line naming the file, tensor and byte offset; the others are still scanned; exit 2", () => {
    const bytes = safetensorsBytes([
      { name: "a", dtype: "F32", shape: [2], data: encode("F32", [1, 2]) },
      { name: "b", dtype: "F32", shape: [2], data: encode("F32", [3, 7e4]) },
    ]);
    const broken = files.write("broken.safetensors", bytes.subarray(0, bytes.length - 2));
    const run = runCli(["scan", broken, risky, "--all"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(new RegExp(`^headroom: ${broken}: tensor "b", byte \\d+: data \\[\\d+, \\d+\\) runs past the end of the file`, "m"));
    expect(run.stdout).toMatch(/embed\.weight/);
    expect(run.stdout).toMatch(/broken\.safetensors: a\s/);
  });

  it("input errors: an unknown format, --json with --csv, a bad tolerance", () => {
    const unknown = runCli(["scan", safe, "--to", "binary16,fp12"]);
    expect(unknown.status).toBe(2);
    expect(unknown.stderr).toMatch(/--to: unknown format "fp12"; accepted: binary16, bfloat16/);
    expect(runCli(["scan", safe, "--json", "--csv"]).status).toBe(2);
    const tolerance = runCli(["scan", safe, "--tolerance", "2"]);
    expect(tolerance.status).toBe(2);
    expect(tolerance.stderr).toMatch(/--tolerance "2": expected a share between 0 and 1/);
  });

  it("--help documents the exit codes; no progress bar when stderr is not a terminal", () => {
    const help = runCli(["scan", "--help"]);
    expect(help.stdout).toMatch(/Exit code: 0 when every tensor is safe in every target, 1 when/);
    expect(runCli(["scan", risky]).stderr).toBe("");
  });
});

describe("non-finite values and files of another kind", () => {
  it("an infinity in the file is counted apart in every target's row, a saturating e4m3 cast's too, and breaks it", () => {
    // 500 passes e4m3's overflow threshold 464 (OCP 8-bit spec: largest finite 448) and is clipped by its saturating
    // conversion; the infinity was in the file: not a clip of the cast, whatever e4m3 would make of it
    const path = files.write("one-inf.npy", npyBytes(1, "<f4", [4], encode("F32", [Infinity, 1, 500, 1e-3])));
    const run = runCli(["scan", path, "--to", "e4m3,binary16,e5m2", "--json"]);
    const casts = JSON.parse(run.stdout).files[0].tensors[0].casts;
    expect(casts.map((c: { format: string; saturated: number; overflowed: number; nonFiniteInFile: number; verdict: string }) => [c.format, c.saturated, c.overflowed, c.nonFiniteInFile, c.verdict])).toEqual([
      ["e4m3", 1, 0, 1, "breaks"],
      ["binary16", 0, 0, 1, "breaks"],
      ["e5m2", 0, 0, 1, "breaks"],
    ]);
    expect(runCli(["scan", path, "--to", "e4m3"]).stdout).toMatch(/e4m3\s+breaks\s+0\s+1\s+0\s+1\s+1\s/);
  });

  it("an infinity or NaN already in the file is counted apart from the cast's overflow, in its own cast column", () => {
    // 7e4 overflows binary16 (largest finite 65504, IEEE 754-2019 Table 3.5); the infinity and the NaN were in the file
    const path = files.write("spoilt.safetensors", safetensorsBytes([{ name: "w", dtype: "F32", shape: [4], data: encode("F32", [7e4, Infinity, NaN, 1]) }]));
    const run = runCli(["scan", path, "--to", "binary16", "--json"]);
    expect(run.status).toBe(1);
    const cast = JSON.parse(run.stdout).files[0].tensors[0].casts[0];
    expect(cast).toMatchObject({ overflowed: 1, nonFiniteInFile: 2, verdict: "breaks" });
    const text = runCli(["scan", path, "--to", "binary16"]).stdout;
    expect(text).toMatch(/overflowed\s+clipped\s+inf\/nan in file/);
    expect(text).toMatch(/w\s+binary16\s+breaks\s+0\s+0\s+1\s+0\s+2/);
  });

  it("a file that is neither safetensors nor .npy (a YAML spec) is named as such, not read as a header length", () => {
    const path = files.write("spec.yaml", new TextEncoder().encode("name: tiny\ninput: { features: 4 }\n"));
    const run = runCli(["scan", path]);
    expect(run.status).toBe(2);
    expect(run.stderr).toContain(`${path}: not a safetensors file or a .npy array: it starts with neither a safetensors header (an 8-byte length, then "{") nor NumPy's magic "\\x93NUMPY" (it starts with 6e 61 6d 65 3a 20)`);
    expect(run.stderr).not.toContain("header length");
  });
});
