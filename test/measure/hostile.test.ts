/**
 * Corrupt and hostile tensor files: each is a clear issue naming the file, the tensor (when there is one) and the
 * byte offset, and a scan goes on with the other files. Files are written by the independent writer in writers.ts.
 */
import { afterAll, describe, expect, it } from "vitest";
import { openTensorFile, scanFiles, type ScanIssue } from "../../src/measure/index.js";
import { concat, encode, npyBytes, safetensorsBytes, scratch } from "./writers.js";

const files = scratch();
afterAll(() => files.cleanup());

const good = files.write("good.safetensors", safetensorsBytes([{ name: "w", dtype: "F32", shape: [2], data: encode("F32", [1, 2]) }]));

/** Scan the hostile file together with a good one; return the hostile file's issues after checking the good one was read. */
async function issuesOf(path: string): Promise<{ issues: ScanIssue[]; measured: string[] }> {
  const result = await scanFiles([path, good], { targets: [] });
  expect(result.files).toHaveLength(2);
  expect(result.files[1]!.issues).toEqual([]);
  expect(result.files[1]!.tensors.map((t) => t.name)).toEqual(["w"]);
  return { issues: result.files[0]!.issues, measured: result.files[0]!.tensors.map((t) => t.name) };
}

const two = (offsets?: [number, number]) => ({ name: "b", dtype: "F32", shape: [2], data: encode("F32", [3, 4]), ...(offsets ? { offsets } : {}) });
const one = { name: "a", dtype: "F32", shape: [2], data: encode("F32", [1, 2]) };

describe("hostile safetensors files", () => {
  it("truncated data: the tensor past the end is an issue at its first byte; the intact tensor is still measured", async () => {
    const bytes = safetensorsBytes([one, two()]);
    const path = files.write("truncated.safetensors", bytes.subarray(0, bytes.length - 3));
    const { issues, measured } = await issuesOf(path);
    const headerLength = Number(new DataView(bytes.buffer).getBigUint64(0, true));
    expect(issues).toEqual([
      { file: path, tensor: "b", byteOffset: 8 + headerLength + 8, message: expect.stringMatching(/runs past the end of the file/) },
    ]);
    expect(measured).toEqual(["a"]);
  });

  it("a header length beyond the file is refused at byte 0", async () => {
    const path = files.write("long-header.safetensors", safetensorsBytes([one], { headerLength: 5000n }));
    const { issues } = await issuesOf(path);
    expect(issues).toEqual([{ file: path, byteOffset: 0, message: expect.stringMatching(/header length 5000 bytes runs past the end/) }]);
  });

  it("a header of 100 MB or more is refused without being read", async () => {
    const path = files.write("huge-header.safetensors", safetensorsBytes([one], { headerLength: 100n * 1024n * 1024n }));
    const { issues } = await issuesOf(path);
    expect(issues).toEqual([{ file: path, byteOffset: 0, message: expect.stringMatching(/100 MB or more; refused/) }]);
    const absurd = files.write("absurd-header.safetensors", safetensorsBytes([one], { headerLength: 2n ** 63n }));
    expect((await issuesOf(absurd)).issues[0]!.message).toMatch(/refused/);
  });

  it("a file shorter than 8 bytes", async () => {
    const path = files.write("tiny.safetensors", Uint8Array.of(1, 2, 3));
    const { issues } = await issuesOf(path);
    expect(issues).toEqual([{ file: path, message: expect.stringMatching(/fewer than the 8-byte header length/) }]);
  });

  it("offsets out of range", async () => {
    const path = files.write("out-of-range.safetensors", safetensorsBytes([one, two([8, 4000])]));
    const { issues, measured } = await issuesOf(path);
    expect(issues).toHaveLength(1);
    expect(issues[0]).toMatchObject({ file: path, tensor: "b", message: expect.stringMatching(/runs past the end/) });
    expect(measured).toEqual(["a"]);
  });

  it("offsets that end before they begin", async () => {
    const path = files.write("backwards.safetensors", safetensorsBytes([one, two([8, 4])]));
    const { issues } = await issuesOf(path);
    expect(issues[0]).toMatchObject({ tensor: "b", message: expect.stringMatching(/end before they begin/) });
  });

  it("overlapping tensors: both are issues naming each other, neither is measured", async () => {
    const path = files.write("overlap.safetensors", safetensorsBytes([one, two([4, 12])]));
    const { issues, measured } = await issuesOf(path);
    expect(issues.map((i) => [i.tensor, i.message])).toEqual([
      ["b", expect.stringMatching(/overlaps the data of tensor "a"/)],
      ["a", expect.stringMatching(/overlaps the data of tensor "b"/)],
    ]);
    expect(measured).toEqual([]);
  });

  it("data size not matching dtype × shape", async () => {
    const path = files.write("size.safetensors", safetensorsBytes([one, { name: "b", dtype: "F32", shape: [3], data: encode("F32", [3, 4]) }]));
    const { issues } = await issuesOf(path);
    expect(issues).toEqual([
      { file: path, tensor: "b", byteOffset: expect.any(Number), message: "data holds 8 bytes but F32 × [3] needs 12" },
    ]);
  });

  it("a header that is not JSON names the byte where parsing stopped", async () => {
    const path = files.write("not-json.safetensors", safetensorsBytes([], { headerText: '{"a": {"dtype": "F32",, }' }));
    const { issues } = await issuesOf(path);
    expect(issues).toHaveLength(1);
    expect(issues[0]!.message).toMatch(/^header is not JSON/);
    expect(issues[0]!.byteOffset).toBe(8 + '{"a": {"dtype": "F32",'.length);
  });

  it("a header that does not start with {", async () => {
    const path = files.write("array.safetensors", safetensorsBytes([], { headerText: "[1, 2]" }));
    expect((await issuesOf(path)).issues[0]!.message).toMatch(/does not begin with "\{"/);
  });

  it("a header that is not UTF-8 names the first bad byte", async () => {
    const text = safetensorsBytes([], { headerText: '{"ab": 1}' });
    text[8 + 3] = 0xff; // inside the key
    const path = files.write("latin.safetensors", text);
    const { issues } = await issuesOf(path);
    expect(issues).toEqual([{ file: path, byteOffset: 11, message: "header is not valid UTF-8" }]);
  });

  it("an unknown dtype is an issue for that tensor only", async () => {
    const path = files.write("dtype.safetensors", safetensorsBytes([one, { name: "b", dtype: "F12", shape: [2], data: encode("F32", [3, 4]) }]));
    const { issues, measured } = await issuesOf(path);
    expect(issues).toEqual([{ file: path, tensor: "b", byteOffset: expect.any(Number), message: expect.stringMatching(/unknown dtype "F12"; accepted: F64, F32/) }]);
    expect(measured).toEqual(["a"]);
  });

  it("malformed entries (shape, offsets, metadata) are issues naming the tensor", async () => {
    const header = JSON.stringify({
      __metadata__: { n: 3 },
      a: { dtype: "F32", shape: [-1], data_offsets: [0, 4] },
      b: { dtype: "F32", shape: [1], data_offsets: [0] },
      c: "nope",
    });
    const path = files.write("entries.safetensors", concat([safetensorsBytes([], { headerText: header }), new Uint8Array(4)]));
    const { issues } = await issuesOf(path);
    expect(issues.map((i) => i.tensor)).toEqual(["__metadata__", "a", "b", "c"]);
  });

  it("zero-size tensors are fine", async () => {
    const path = files.write("zero.safetensors", safetensorsBytes([{ name: "z", dtype: "F16", shape: [3, 0], data: new Uint8Array(0) }, one]));
    const { issues, measured } = await issuesOf(path);
    expect(issues).toEqual([]);
    expect(measured).toEqual(["z", "a"]);
  });

  it("a missing file, and a folder, are issues", async () => {
    const missing = files.dir + "/nothing-here.safetensors";
    expect((await issuesOf(missing)).issues).toEqual([{ file: missing, message: "cannot open: no such file" }]);
    const opened = await openTensorFile(files.dir);
    expect(opened.ok).toBe(false);
  });
});

describe("hostile .npy files", () => {
  const data = encode("F32", [1, 2]);
  it("a malformed header dict names the byte where it goes wrong", async () => {
    const path = files.write("bad-dict.npy", npyBytes(1, "<f4", [2], data, { dictText: "{'descr': '<f4', 'fortran_order': False, 'shape': (2,) " }));
    const { issues } = await issuesOf(path);
    expect(issues).toHaveLength(1);
    expect(issues[0]).toMatchObject({ file: path, tensor: "bad-dict", message: expect.stringMatching(/^malformed header dict/) });
    expect(issues[0]!.byteOffset).toBeGreaterThan(10);
  });

  for (const [label, dict, pattern] of [
    ["a missing key", "{'descr': '<f4', 'shape': (2,)}", /fortran_order/],
    ["a negative dimension", "{'descr': '<f4', 'fortran_order': False, 'shape': (-2,)}", /shape/],
    ["an unexpected key", "{'descr': '<f4', 'fortran_order': False, 'shape': (2,), 'x': 1}", /unexpected key "x"/],
    ["a repeated key", "{'descr': '<f4', 'descr': '<f8', 'fortran_order': False, 'shape': (2,)}", /appears twice/],
    ["not a dict", "[1, 2]", /not a dict/],
    ["an unknown dtype", "{'descr': '<q9x', 'fortran_order': False, 'shape': (2,)}", /unknown dtype/],
    ["deep nesting", "{'descr': " + "(".repeat(40) + ")".repeat(40) + "}", /nested too deeply/],
  ] as const) {
    it(`a header with ${label}`, async () => {
      const path = files.write(`dict-${label.replace(/ /g, "-")}.npy`, npyBytes(1, "<f4", [2], data, { dictText: dict }));
      const { issues } = await issuesOf(path);
      expect(issues).toHaveLength(1);
      expect(issues[0]!.message).toMatch(pattern);
    });
  }

  it("truncated data", async () => {
    const bytes = npyBytes(1, "<f4", [4], encode("F32", [1, 2, 3, 4]));
    const path = files.write("short.npy", bytes.subarray(0, bytes.length - 1));
    const { issues } = await issuesOf(path);
    expect(issues).toEqual([{ file: path, tensor: "short", byteOffset: bytes.length - 16, message: expect.stringMatching(/runs past the end of the file.*truncated/) }]);
  });

  it("an unknown version and a header length beyond the file", async () => {
    const bytes = npyBytes(1, "<f4", [2], data);
    bytes[6] = 9;
    const path = files.write("version.npy", bytes);
    expect((await issuesOf(path)).issues[0]).toMatchObject({ byteOffset: 6, message: expect.stringMatching(/version 9\.0/) });
    const long = npyBytes(1, "<f4", [2], data);
    new DataView(long.buffer).setUint16(8, 60000, true);
    const longPath = files.write("long.npy", long);
    expect((await issuesOf(longPath)).issues[0]).toMatchObject({ byteOffset: 8, message: expect.stringMatching(/runs past the end/) });
  });
});
