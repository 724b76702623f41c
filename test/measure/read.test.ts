import { afterAll, describe, expect, it } from "vitest";
import { readFileSync } from "node:fs";
import { f16round } from "@petamoriken/float16";
import { CHUNK_ELEMENTS, openTensorFile, streamTensors, type TensorLayout } from "../../src/measure/index.js";
import { bfloat16Code, encode, npyBytes, safetensorsBytes, scratch } from "./writers.js";

const files = scratch();
afterAll(() => files.cleanup());

/** Read every tensor of a file back as plain numbers, in storage order. */
async function readAll(path: string) {
  const opened = await openTensorFile(path);
  if (!opened.ok) throw new Error(opened.issue.message);
  const values = new Map<string, number[]>();
  const order: string[] = [];
  try {
    const issues = await streamTensors(opened.file, {
      begin: (t: TensorLayout) => {
        values.set(t.name, []);
        order.push(t.name);
      },
      chunk: (t, chunk, first) => {
        const list = values.get(t.name)!;
        expect(first).toBe(list.length);
        for (const v of chunk) list.push(v);
      },
      end: () => {},
    });
    return { layout: opened.file.layout, values, order, issues };
  } finally {
    await opened.file.handle.close();
  }
}

function bf16Value(x: number): number {
  // the bfloat16 code shifted into the top half of a binary32 pattern (bfloat16 definition: truncated binary32)
  const view = new DataView(new ArrayBuffer(4));
  view.setUint32(0, bfloat16Code(x) << 16);
  return view.getFloat32(0);
}

describe("safetensors reader", () => {
  const f32 = [1.5, -2.25, 0, 3.0e-39, 65504, -1e30];
  const f64 = [1e-310, -Math.PI, 2 ** 1000];
  const f16 = [0.1, -65504, 2 ** -24, 1 / 3];
  const bf16 = [0.1, -3.0e38, 1e-38, 7];
  // OCP 8-bit floating point specification rev. 1.0 (E4M3): 0x7E = S.1111.110 = 448; 0x01 = 2^-9; 0x38 = 1.0; 0xB8 = -1.0
  const e4m3Codes = [0x7e, 0x01, 0x38, 0xb8, 0x7f];
  // OCP 8-bit spec (E5M2): 0x7B = 57344; 0x7C = +inf; 0x01 = 2^-16; 0x3C = 1.0
  const e5m2Codes = [0x7b, 0x7c, 0x01, 0x3c];
  const path = files.write(
    "mixed.safetensors",
    safetensorsBytes(
      [
        { name: "a.f32", dtype: "F32", shape: [2, 3], data: encode("F32", f32) },
        { name: "b.f64", dtype: "F64", shape: [3], data: encode("F64", f64) },
        { name: "c.f16", dtype: "F16", shape: [4], data: encode("F16", f16) },
        { name: "d.bf16", dtype: "BF16", shape: [2, 2], data: encode("BF16", bf16) },
        { name: "e.e4m3", dtype: "F8_E4M3", shape: [5], data: encode("F8_E4M3", e4m3Codes) },
        { name: "f.e5m2", dtype: "F8_E5M2", shape: [4], data: encode("F8_E5M2", e5m2Codes) },
        { name: "g.ids", dtype: "I32", shape: [2], data: encode("I32", [7, 9]) },
        { name: "h.mask", dtype: "BOOL", shape: [3], data: encode("BOOL", [1, 0, 1]) },
        { name: "i.empty", dtype: "F32", shape: [0, 4], data: new Uint8Array(0) },
        { name: "j.scalar", dtype: "F32", shape: [], data: encode("F32", [42]) },
      ],
      { metadata: { format: "pt", note: "an invented checkpoint" } },
    ),
  );

  it("decodes every float dtype, lists integer and bool tensors as skipped, keeps __metadata__", async () => {
    const { layout, values, issues } = await readAll(path);
    expect(issues).toEqual([]);
    expect(layout.issues).toEqual([]);
    expect(layout.metadata).toEqual({ format: "pt", note: "an invented checkpoint" });
    expect(layout.skipped.map((s) => [s.name, s.dtype])).toEqual([
      ["g.ids", "I32"],
      ["h.mask", "BOOL"],
    ]);
    expect(values.get("a.f32")).toEqual(f32.map(Math.fround));
    expect(values.get("b.f64")).toEqual(f64);
    expect(values.get("c.f16")).toEqual(f16.map(f16round)); // @petamoriken/float16 reference
    expect(values.get("d.bf16")).toEqual(bf16.map(bf16Value));
    expect(values.get("e.e4m3")).toEqual([448, 2 ** -9, 1, -1, NaN]);
    expect(values.get("f.e5m2")).toEqual([57344, Infinity, 2 ** -16, 1]);
    expect(values.get("i.empty")).toEqual([]);
    expect(values.get("j.scalar")).toEqual([42]);
    const scalar = layout.tensors.find((t) => t.name === "j.scalar")!;
    expect(scalar.elements).toBe(1);
  });

  it("reads tensors larger than one chunk, in order, with the right element indices", async () => {
    const n = CHUNK_ELEMENTS + 12345;
    const big = new Float32Array(n);
    for (let i = 0; i < n; i++) big[i] = (i % 1000) - 500.25;
    const bigPath = files.write(
      "big.safetensors",
      safetensorsBytes([
        { name: "small", dtype: "F16", shape: [3], data: encode("F16", [1, 2, 3]) },
        { name: "big", dtype: "F32", shape: [n], data: new Uint8Array(big.buffer) },
      ]),
    );
    const { values } = await readAll(bigPath);
    const got = values.get("big")!;
    expect(got.length).toBe(n);
    expect(got[0]).toBe(-500.25);
    expect(got[CHUNK_ELEMENTS]).toBe(big[CHUNK_ELEMENTS]);
    expect(got[n - 1]).toBe(big[n - 1]);
    expect(values.get("small")).toEqual([1, 2, 3]);
  });

  it("never reads outside the ranges the header names (holes full of NaN patterns stay unread)", async () => {
    const holey = files.write(
      "holes.safetensors",
      safetensorsBytes(
        [
          { name: "x", dtype: "F32", shape: [2], data: encode("F32", [1, 2]) },
          { name: "y", dtype: "F32", shape: [2], data: encode("F32", [3, 4]) },
        ],
        { gap: 12, gapByte: 0xff },
      ),
    );
    const { values } = await readAll(holey);
    expect(values.get("x")).toEqual([1, 2]);
    expect(values.get("y")).toEqual([3, 4]);
  });

  it("opens files read-only and leaves them unchanged", async () => {
    const before = readFileSync(path);
    await readAll(path);
    expect(readFileSync(path).equals(before)).toBe(true);
  });
});

describe(".npy reader", () => {
  const matrix = [
    [1, 2, 3],
    [4, 5, 6],
  ];
  const cOrder = matrix.flat();
  const fOrder = [1, 4, 2, 5, 3, 6];

  for (const version of [1, 2, 3] as const) {
    for (const [descr, dtype, littleEndian] of [
      ["<f4", "F32", true],
      [">f4", "F32", false],
      ["<f8", "F64", true],
      [">f8", "F64", false],
      ["<f2", "F16", true],
      [">f2", "F16", false],
    ] as const) {
      it(`version ${version}.0, ${descr}, C order`, async () => {
        const p = files.write(`c-${version}-${descr.replace(/[<>]/, (c) => (c === "<" ? "le" : "be"))}.npy`, npyBytes(version, descr, [2, 3], encode(dtype, cOrder, littleEndian)));
        const { layout, values } = await readAll(p);
        expect(layout.tensors[0]).toMatchObject({ dtype, shape: [2, 3], order: "C", littleEndian, elements: 6 });
        expect((layout.tensors[0]!.begin) % 64).toBe(0);
        expect([...values.values()][0]).toEqual(cOrder);
      });
    }
  }

  it("Fortran order: storage order is column by column, the layout says F", async () => {
    const p = files.write("fortran.npy", npyBytes(1, "<f4", [2, 3], encode("F32", fOrder), { fortran: true }));
    const { layout, values } = await readAll(p);
    expect(layout.tensors[0]!.order).toBe("F");
    expect(values.get("fortran")).toEqual(fOrder);
  });

  it("integer, bool and complex arrays are listed as skipped", async () => {
    for (const [descr, name] of [
      ["<i8", "ints"],
      ["|b1", "flags"],
      ["<c8", "complex"],
      ["|O", "objects"],
    ] as const) {
      const p = files.write(`${name}.npy`, npyBytes(1, descr, [2], new Uint8Array(descr === "|O" ? 0 : 16)));
      const { layout } = await readAll(p);
      expect(layout.tensors).toEqual([]);
      expect(layout.skipped[0]!.name).toBe(name);
    }
  });

  it("a 0-d array is one element; a zero-size array is fine", async () => {
    const scalar = await readAll(files.write("scalar.npy", npyBytes(1, "<f8", [], encode("F64", [2.5]), { dictText: "{'descr': '<f8', 'fortran_order': False, 'shape': (), }" })));
    expect(scalar.values.get("scalar")).toEqual([2.5]);
    const empty = await readAll(files.write("empty.npy", npyBytes(1, "<f4", [0, 5], new Uint8Array(0))));
    expect(empty.values.get("empty")).toEqual([]);
  });
});
