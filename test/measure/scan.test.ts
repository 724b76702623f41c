/**
 * scanFile / scanFiles on files written by the independent writer (writers.ts): counts checked element by element
 * against the format model's roundTo on the values the file holds (decoded independently: Math.fround for binary32,
 * @petamoriken/float16 for binary16, the OCP 8-bit specification's code table for e4m3).
 */
import { afterAll, describe, expect, it } from "vitest";
import fc from "fast-check";
import { f16round } from "@petamoriken/float16";
import { FORMATS, roundTo, type FormatName } from "../../src/formats/index.js";
import { castTarget, expandPaths, scanExitCode, scanFile, scanFiles, type CastTarget } from "../../src/measure/index.js";
import { encode, npyBytes, safetensorsBytes, scratch } from "./writers.js";

const files = scratch();
afterAll(() => files.cleanup());

const NAMES: FormatName[] = ["binary16", "bfloat16", "e4m3", "e5m2"];
const TARGETS: CastTarget[] = NAMES.map((n) => castTarget(n));

function expected(format: FormatName, values: readonly number[]) {
  const f = FORMATS[format];
  const out = { flushed: 0, subnormal: 0, saturated: 0, overflowed: 0 };
  for (const x of values) {
    if (Number.isNaN(x)) continue;
    const r = roundTo(f, x);
    // an infinity in the file is not the cast's overflow or clip: counted apart, whatever the cast makes of it
    if (!Number.isFinite(x)) continue;
    if (!Number.isFinite(r)) out.overflowed++;
    else if (!Number.isFinite(roundTo(f, x, { overflow: "infinity-or-nan" }))) out.saturated++;
    else if (x !== 0 && r === 0) out.flushed++;
    else if (r !== 0 && Math.abs(r) < f.minNormal) out.subnormal++;
  }
  return out;
}

describe("scanFile", () => {
  it("fast-check: random F32 and F16 tensors in a safetensors file; counts equal element-by-element rounding", async () => {
    let run = 0;
    await fc.assert(
      fc.asyncProperty(
        fc.array(fc.oneof(fc.double({ min: -1e5, max: 1e5, noNaN: true }), fc.double({ min: -1e-4, max: 1e-4 }), fc.constantFrom(0, 2 ** -25, 65520, 465, -464, 1e-40)), {
          minLength: 1,
          maxLength: 200,
        }),
        async (list) => {
          const f32 = list.map(Math.fround);
          const f16 = list.map(f16round);
          const path = files.write(
            `random-${run++}.safetensors`,
            safetensorsBytes([
              { name: "f32", dtype: "F32", shape: [f32.length], data: encode("F32", list) },
              { name: "f16", dtype: "F16", shape: [f16.length], data: encode("F16", list) },
            ]),
          );
          const scan = await scanFile(path, { targets: TARGETS });
          expect(scan.issues).toEqual([]);
          for (const [name, values] of [
            ["f32", f32],
            ["f16", f16],
          ] as const) {
            const tensor = scan.tensors.find((t) => t.name === name)!;
            expect(tensor.elements).toBe(values.length);
            // histogram counts sum to the element count
            const binned = tensor.binades.reduce((n, [, c]) => n + c, 0);
            expect(binned + tensor.zeros + tensor.infinities + tensor.nans).toBe(values.length);
            NAMES.forEach((format, t) => {
              const { flushed, subnormal, saturated, overflowed } = tensor.casts[t]!;
              expect({ format, flushed, subnormal, saturated, overflowed }).toEqual({ format, ...expected(format, values) });
            });
          }
        },
      ),
      { numRuns: 25 },
    );
  });

  it("files scanned at the same time (more than the counting kernel lends buffers for) count each its own values", async () => {
    // three chunks and a bit per file, different values in each, so a chunk read into another scan's buffer shows
    const length = 788 * 1000;
    const lists = [0, 1, 2].map((k) => Array.from({ length }, (_, i) => Math.fround(Math.sin(i * (k + 1) * 0.001) * 2 ** ((i * (k + 3)) % 41 - 30))));
    lists.forEach((list, k) => (list[k * 300000 + 17] = 70000));
    const paths = lists.map((list, k) =>
      files.write(`concurrent-${k}.safetensors`, safetensorsBytes([{ name: "w", dtype: "F32", shape: [length / 1000, 1000], data: encode("F32", list) }])),
    );
    const scans = await Promise.all(paths.map((path) => scanFile(path, { targets: [TARGETS[0]!] })));
    scans.forEach((scan, k) => {
      const { flushed, subnormal, saturated, overflowed } = scan.tensors[0]!.casts[0]!;
      expect({ flushed, subnormal, saturated, overflowed }).toEqual(expected("binary16", lists[k]!));
    });
  });

  it("e4m3 codes from the OCP 8-bit specification table, judged in binary16 and e4m3", async () => {
    // 0x7E = 448, 0x7F = NaN, 0x01 = 2^-9, 0x08 = 2^-6 (smallest normal), 0x00 = 0
    const path = files.write("codes.safetensors", safetensorsBytes([{ name: "q", dtype: "F8_E4M3", shape: [5], data: encode("F8_E4M3", [0x7e, 0x7f, 0x01, 0x08, 0x00]) }]));
    const scan = await scanFile(path, { targets: [castTarget("binary16"), castTarget("e4m3")] });
    const t = scan.tensors[0]!;
    expect([t.nans, t.zeros, t.maxAbs, t.minNonzero]).toEqual([1, 1, 448, 2 ** -9]);
    expect(t.casts.map((c) => c.verdict)).toEqual(["breaks", "breaks"]); // the NaN is already there
  });

  it("verdicts: safe, lossy (flushed or clipped), breaks (overflow); the tolerance lets a few flushed values pass", async () => {
    const path = files.write(
      "verdicts.safetensors",
      safetensorsBytes([
        { name: "safe", dtype: "F32", shape: [3], data: encode("F32", [0.5, -1, 100]) },
        { name: "flushes", dtype: "F32", shape: [4], data: encode("F32", [1e-9, 1, 1, 1]) },
        { name: "overflows", dtype: "F32", shape: [2], data: encode("F32", [7e4, 1]) },
      ]),
    );
    const b16 = [castTarget("binary16")];
    const strict = await scanFile(path, { targets: b16 });
    expect(strict.tensors.map((t) => [t.name, t.casts[0]!.verdict])).toEqual([
      ["safe", "safe"],
      ["flushes", "lossy"],
      ["overflows", "breaks"],
    ]);
    const tolerant = await scanFile(path, { targets: b16, tolerance: 0.25 });
    expect(tolerant.tensors[1]!.casts[0]!.verdict).toBe("safe");
    // a saturating e4m3 cast clips 7e4 to 448: lossy, not broken
    const e4m3 = await scanFile(path, { targets: [castTarget("e4m3")] });
    expect(e4m3.tensors[2]!.casts[0]).toMatchObject({ saturated: 1, overflowed: 0, verdict: "lossy" });
  });

  it("rms, max/rms and quantiles; per-channel figures of a Fortran-order .npy match its C-order twin", async () => {
    const matrix = [
      [1, -2, 3],
      [4, 50, -6],
    ];
    const cPath = files.write("twin-c.npy", npyBytes(1, "<f8", [2, 3], encode("F64", matrix.flat())));
    const fPath = files.write("twin-f.npy", npyBytes(2, ">f4", [2, 3], encode("F32", [1, 4, -2, 50, 3, -6], false), { fortran: true }));
    const [c, f] = (await scanFiles([cPath, fPath], { targets: [] })).files.map((file) => file.tensors[0]!);
    const squares = matrix.flat().reduce((s, x) => s + x * x, 0);
    expect(c!.rms).toBeCloseTo(Math.sqrt(squares / 6), 12);
    expect(c!.maxOverRms).toBeCloseTo(50 / Math.sqrt(squares / 6), 12);
    // rms figures agree whatever the storage order (the per-channel maximum follows the slow storage axis)
    const rmsFigures = (t: typeof c) => t!.channels!.map(({ axis, channels, medianRms, loudest, loudestRms, rmsRatio }) => ({ axis, channels, medianRms, loudest, loudestRms, rmsRatio }));
    expect(rmsFigures(f)).toEqual(rmsFigures(c));
    expect(c!.channels![0]).toMatchObject({ axis: "row", loudest: 1 });
    expect(c!.channels![1]).toMatchObject({ axis: "column", loudest: 1 });
    expect(c!.quantiles.map((q) => q.q)).toEqual([0.5, 0.9, 0.99, 0.999]);
    expect(c!.quantiles.at(-1)!.magnitude).toBe(50);
  });
});

describe("scanExitCode", () => {
  it("0 all safe, 1 some cast lossy or broken, 2 a file error; the strictest applies", async () => {
    const safe = files.write("ok.safetensors", safetensorsBytes([{ name: "w", dtype: "F32", shape: [1], data: encode("F32", [1]) }]));
    const lossy = files.write("lossy.safetensors", safetensorsBytes([{ name: "w", dtype: "F32", shape: [1], data: encode("F32", [1e-9]) }]));
    const targets = [castTarget("binary16")];
    expect(scanExitCode(await scanFiles([safe], { targets }))).toBe(0);
    expect(scanExitCode(await scanFiles([safe, lossy], { targets }))).toBe(1);
    expect(scanExitCode(await scanFiles([lossy, files.dir + "/missing.npy"], { targets }))).toBe(2);
  });
});

describe("expandPaths", () => {
  it("a glob picks the shards of a checkpoint in sorted order; a pattern with no match is an issue", async () => {
    for (const name of ["part-2.safetensors", "part-1.safetensors", "part-10.safetensors", "notes.txt"]) files.write(name, new Uint8Array(1));
    const { paths, issues } = await expandPaths([`${files.dir}/part-*.safetensors`, `${files.dir}/nothing-*.npy`, `${files.dir}/part-?.safetensors`]);
    expect(paths.map((p) => p.slice(files.dir.length + 1))).toEqual(["part-1.safetensors", "part-10.safetensors", "part-2.safetensors"]);
    expect(issues).toEqual([{ file: `${files.dir}/nothing-*.npy`, message: "no file matches this pattern" }]);
  });
});
