/**
 * A minimal WebAssembly assembler: modules are written in TypeScript from named instructions, so headroom ships no
 * binary blob and needs no build step for its kernels (simd.ts, and the counting pass of src/measure/fast32.ts).
 * Binary format and opcodes: WebAssembly Core Specification 2.0, chapter 5 (§5.2 values, §5.4 instructions, §5.5
 * modules; section numbers from memory); the 128-bit SIMD instructions carry the 0xFD prefix and a LEB128 opcode
 * (§5.4.8). Each module here imports one memory ("env" "memory") and exports functions only.
 */

// lib ES2022 and @types/node 20 do not declare the WebAssembly global; this is the part used here.
/** A WebAssembly linear memory: 64 KiB pages; growing it detaches the previous `buffer`. */
export interface WasmMemory {
  readonly buffer: ArrayBuffer;
  grow(pages: number): number;
}
declare const WebAssembly: {
  Memory: new (descriptor: { initial: number }) => WasmMemory;
  Module: new (bytes: Uint8Array) => object;
  Instance: new (module: object, imports: Record<string, Record<string, unknown>>) => { exports: Record<string, unknown> };
};

/** bytes of a WebAssembly memory page (64 KiB, §2.5.5) */
export const PAGE_BYTES = 65536;

/** Unsigned LEB128 (§5.2.2). */
function unsignedLeb(n: number): number[] {
  const out: number[] = [];
  do {
    let byte = n & 0x7f;
    n >>>= 7;
    if (n !== 0) byte |= 0x80;
    out.push(byte);
  } while (n !== 0);
  return out;
}

/** Signed LEB128 of a 32-bit integer (§5.2.2). */
function signedLeb(n: number): number[] {
  const out: number[] = [];
  for (;;) {
    const byte = n & 0x7f;
    n >>= 7;
    if ((n === 0 && (byte & 0x40) === 0) || (n === -1 && (byte & 0x40) !== 0)) {
      out.push(byte);
      return out;
    }
    out.push(byte | 0x80);
  }
}

const vector = (items: number[][]): number[] => [...unsignedLeb(items.length), ...items.flat()];
const section = (id: number, bytes: number[]): number[] => [id, ...unsignedLeb(bytes.length), ...bytes];
const name = (text: string): number[] => vector([...text].map((ch) => [ch.charCodeAt(0)]));
const simd = (opcode: number, ...immediates: number[]): number[] => [0xfd, ...unsignedLeb(opcode), ...immediates];
/** memarg (§5.4.6): log2 of the alignment (a hint; unaligned accesses are allowed), then the static offset */
const memarg = (log2Align: number, offset: number): number[] => [log2Align, ...unsignedLeb(offset)];

/** value type i32 (§5.3.1) */
export const I32 = 0x7f;
/** value type f64 (§5.3.1) */
export const F64 = 0x7c;
/** value type v128 (§5.3.1) */
export const V128 = 0x7b;

/** Named instructions (§5.4), each as its bytes; those with immediates are functions of them. */
export const op = {
  // variable instructions (§5.4.4)
  localGet: (i: number) => [0x20, ...unsignedLeb(i)],
  localSet: (i: number) => [0x21, ...unsignedLeb(i)],
  localTee: (i: number) => [0x22, ...unsignedLeb(i)],
  // control (§5.4.1): blocks and loops without results
  block: [0x02, 0x40],
  loop: [0x03, 0x40],
  end: [0x0b],
  br: (depth: number) => [0x0c, ...unsignedLeb(depth)],
  brIf: (depth: number) => [0x0d, ...unsignedLeb(depth)],
  // parametric (§5.4.3): select picks its first operand when the i32 condition is nonzero
  select: [0x1b],
  // memory (§5.4.6)
  i32Load: (offset: number) => [0x28, ...memarg(2, offset)],
  f32Load: (offset: number) => [0x2a, ...memarg(2, offset)],
  f64Load: (offset: number) => [0x2b, ...memarg(3, offset)],
  i32Store: (offset: number) => [0x36, ...memarg(2, offset)],
  f64Store: (offset: number) => [0x39, ...memarg(3, offset)],
  // numeric (§5.4.7)
  i32Const: (v: number) => [0x41, ...signedLeb(v)],
  f64Const: (v: number) => [0x44, ...new Uint8Array(Float64Array.of(v).buffer)],
  i32LtU: [0x49],
  i32GtU: [0x4b],
  i32GeU: [0x4f],
  i32Add: [0x6a],
  i32Sub: [0x6b],
  i32Mul: [0x6c],
  i32And: [0x71],
  i32Or: [0x72],
  i32Shl: [0x74],
  i32ShrS: [0x75],
  i32ShrU: [0x76],
  f64Add: [0xa0],
  f64Mul: [0xa2],
  f64PromoteF32: [0xbb],
  // vector (§5.4.8)
  v128Load: (offset: number) => simd(0x00, ...memarg(4, offset)),
  v128Store: (offset: number) => simd(0x0b, ...memarg(4, offset)),
  v128Load64Splat: (offset: number) => simd(0x0a, ...memarg(3, offset)),
  /** a constant of four i32 lanes, lane 0 first (little-endian lane order, §4.3.1) */
  v128ConstI32: (lanes: readonly [number, number, number, number]) => simd(0x0c, ...new Uint8Array(Int32Array.from(lanes).buffer)),
  v128Zero: simd(0x0c, ...new Array<number>(16).fill(0)),
  /** result byte k is byte lanes[k] of the 32 bytes of the two operands (first operand's bytes 0–15) */
  i8x16Shuffle: (lanes: readonly number[]) => simd(0x0d, ...lanes),
  i32x4Splat: simd(0x11),
  i32x4ExtractLane: (lane: number) => simd(0x1b, lane),
  f64x2ExtractLane: (lane: number) => simd(0x21, lane),
  v128And: simd(0x4e),
  v128Or: simd(0x50),
  i32x4ShrS: simd(0xac),
  i32x4Sub: simd(0xb1),
  i32x4MinU: simd(0xb7),
  i32x4MaxU: simd(0xb9),
  f64x2Add: simd(0xf0),
  f64x2Mul: simd(0xf2),
  f32x4DemoteF64x2Zero: simd(0x5e),
  f64x2PromoteLowF32x4: simd(0x5f),
};

/** One function of a module: its parameter and result types, its locals after the parameters, and its code. */
export interface WasmFunction {
  name: string;
  params: readonly number[];
  results: readonly number[];
  /** runs of locals: [count, type] */
  locals: readonly (readonly [number, number])[];
  code: readonly number[];
}

/** A module importing env.memory and exporting `functions` by name (each with its own type, §5.5). */
function assembleModule(functions: readonly WasmFunction[]): Uint8Array {
  const types = functions.map((f) => [0x60, ...vector(f.params.map((t) => [t])), ...vector(f.results.map((t) => [t]))]);
  const bodies = functions.map((f) => {
    const body = [...vector(f.locals.map(([count, type]) => [...unsignedLeb(count), type])), ...f.code, ...op.end];
    return [...unsignedLeb(body.length), ...body];
  });
  return Uint8Array.from([
    ...[0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00],
    ...section(1, vector(types)),
    ...section(2, vector([[...name("env"), ...name("memory"), 0x02, 0x00, 0x01]])),
    ...section(3, vector(functions.map((_, i) => unsignedLeb(i)))),
    ...section(7, vector(functions.map((f, i) => [...name(f.name), 0x00, ...unsignedLeb(i)]))),
    ...section(10, vector(bodies)),
  ]);
}

/** Compile and instantiate `functions` over a new memory of `pages` pages; returns the memory and the exports. */
export function instantiate(functions: readonly WasmFunction[], pages: number): { memory: WasmMemory; exports: Record<string, unknown> } {
  const memory = new WebAssembly.Memory({ initial: pages });
  const { exports } = new WebAssembly.Instance(new WebAssembly.Module(assembleModule(functions)), { env: { memory } });
  return { memory, exports };
}

/** A code buffer with helpers for the usual shapes of loop. */
export class CodeBuilder {
  readonly code: number[] = [];

  /** Append instructions. */
  emit(...parts: readonly (readonly number[])[]): this {
    for (const part of parts) this.code.push(...part);
    return this;
  }

  /** `counter` (an i32 local) from 0 while below the local `limit`, around `body`. */
  countedLoop(counter: number, limit: number, body: () => void): void {
    this.emit(op.i32Const(0), op.localSet(counter));
    this.whileBelow(counter, limit, () => {
      body();
      this.emit(op.localGet(counter), op.i32Const(1), op.i32Add, op.localSet(counter));
    });
  }

  /** `body` while the i32 local `at` is below the local `limit` (unsigned); the body advances `at`. */
  whileBelow(at: number, limit: number, body: () => void): void {
    this.emit(op.block, op.loop, op.localGet(at), op.localGet(limit), op.i32GeU, op.brIf(1));
    body();
    this.emit(op.br(0), op.end, op.end);
  }
}
