/**
 * What a tensor file is, decided by its content, and errors that name the file and what was expected, with a byte
 * offset only where one points at something. Files are written by the independent writer in writers.ts.
 */
import { afterAll, describe, expect, it } from "vitest";
import { issueLine, loadMeasurements, scanFiles, type ScanIssue } from "../../src/measure/index.js";
import { encode, npyBytes, safetensorsBytes, scratch } from "./writers.js";

const files = scratch();
afterAll(() => files.cleanup());

async function scanOne(path: string): Promise<{ issues: ScanIssue[]; measured: string[]; size: number }> {
  const result = await scanFiles([path], { targets: [] });
  return { issues: result.files[0]!.issues, measured: result.files[0]!.tensors.map((t) => t.name), size: result.files[0]!.size };
}

const text = new TextEncoder().encode("id,value\n1,0.5\n2,0.25\n");

describe("a tensor file's kind is decided by its content", () => {
  it("a file named .npy without NumPy's magic is refused as not a .npy array, naming the file and the magic expected", async () => {
    const path = files.write("activations.npy", text);
    const { issues, measured } = await scanOne(path);
    expect(measured).toEqual([]);
    expect(issues).toHaveLength(1);
    // NumPy's format description (numpy.lib.format): a .npy file starts with the six bytes "\x93NUMPY"
    expect(issues[0]!.file).toBe(path);
    expect(issues[0]!.message).toMatch(/^not a \.npy array: it does not start with NumPy's magic "\\x93NUMPY" \(it starts with 69 64 2c 76 61 6c\), nor is it a safetensors file$/);
    expect(issues[0]!.byteOffset).toBeUndefined();
    expect(issueLine(issues[0]!)).toBe(`${path}: ${issues[0]!.message}`);
  });

  it("a safetensors file named .npy is read as safetensors, and an .npy array named otherwise as .npy", async () => {
    const safetensors = files.write("renamed.npy", safetensorsBytes([{ name: "w", dtype: "F32", shape: [2], data: encode("F32", [1, 2]) }]));
    expect(await scanOne(safetensors)).toMatchObject({ issues: [], measured: ["w"] });
    const npy = files.write("renamed.bin", npyBytes(1, "<f4", [2], encode("F32", [1, 2])));
    expect((await scanOne(npy)).issues).toEqual([]);
  });
});

describe("byte offsets only where they point at something", () => {
  it("a file that cannot be opened, or is too short to hold a header, has none", async () => {
    const missing = `${files.dir}/missing.safetensors`;
    const gone = await scanOne(missing);
    expect(gone.issues).toEqual([{ file: missing, message: "cannot open: no such file" }]);
    expect(issueLine(gone.issues[0]!)).toBe(`${missing}: cannot open: no such file`);
    const tiny = files.write("tiny.safetensors", Uint8Array.of(1, 2, 3));
    const short = await scanOne(tiny);
    expect(short.issues[0]!.byteOffset).toBeUndefined();
    expect(issueLine(short.issues[0]!)).toMatch(/tiny\.safetensors: file has 3 bytes, fewer than the 8-byte header length/);
  });

  it("a header length past the end keeps byte 0, where that length is written (safetensors: 8 bytes of length first)", async () => {
    const path = files.write("long.safetensors", safetensorsBytes([{ name: "a", dtype: "F32", shape: [1], data: encode("F32", [1]) }], { headerLength: 5000n }));
    const { issues } = await scanOne(path);
    expect(issueLine(issues[0]!)).toMatch(/long\.safetensors: byte 0: header length 5000 bytes runs past the end/);
  });

  it("a spec's measured weights report the same lines", async () => {
    const measurements = await loadMeasurements({ weights: [`${files.dir}/nowhere.safetensors`], names: {} }, `${files.dir}/spec.yaml`);
    expect(measurements.problems).toEqual([`${files.dir}/nowhere.safetensors: cannot open: no such file`]);
  });
});

describe("a .npy file cut inside its prefix", () => {
  it("is told as cut where it ends, not as lacking the magic it has", async () => {
    // NumPy's format description: magic (6 bytes), major and minor version (2), header length (2 in version 1)
    const path = files.write("cut.npy", Uint8Array.of(0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0));
    const { issues, size } = await scanOne(path);
    expect(issues).toEqual([{ file: path, byteOffset: 8, message: "file ends after 8 bytes, inside the .npy prefix (magic, version, header length: 10 bytes)" }]);
    // the file's own size, which was known (it said 0)
    expect(size).toBe(8);
  });
});

describe("a zip archive", () => {
  it("is named as one, whatever its name, instead of being read as a safetensors header length", async () => {
    // a zip archive starts with a local file header "PK\x03\x04" (PKWARE's APPNOTE.TXT §4.3.7); NumPy's .npz is a zip of .npy files
    const zip = Uint8Array.of(0x50, 0x4b, 0x03, 0x04, 0x14, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0);
    for (const name of ["arrays.npz", "weights.npy", "weights.safetensors"]) {
      const path = files.write(name, zip);
      const scanned = await scanOne(path);
      expect(scanned.size, name).toBe(16);
      expect(scanned.issues, name).toEqual([
        { file: path, message: "a zip archive (as NumPy's .npz is), not a safetensors file or a .npy array: extract its .npy arrays and give those" },
      ]);
    }
  });
});
