/**
 * The inner kernel of the blocked matrix products (matmul.ts), as a small WebAssembly module using 128-bit SIMD.
 * Each f64x2 lane is an ordinary IEEE 754 binary64 multiply or add, rounded to nearest with ties to even, and a
 * vector instruction applies it lane by lane with no fused multiply-add (WebAssembly Core Specification 2.0,
 * §4.3 Numerics; section number from memory). So a lane accumulates exactly the roundings a scalar loop would,
 * and the sums are bit-for-bit those of a plain loop adding the same terms in the same order. Two lanes per
 * instruction, sixteen sums held in eight vector registers and no bounds check per element make it several
 * times faster than the same tile written in JavaScript.
 *
 * The module is assembled below from named instructions, so there is no binary blob and no build step; it
 * imports one memory, which holds the packed panels and the output tiles.
 */

import { CodeBuilder, I32, instantiate, op, PAGE_BYTES, V128, type WasmFunction, type WasmMemory } from "./wasm.js";

/** Rows and columns of an output tile: a packed A panel is TILE rows, a packed B panel TILE columns (two f64x2 lanes). */
export const TILE = 4;
const MR = TILE;
const NR = TILE;

type TileFunction = (mPanels: number, nPanels: number, kc: number, aByte: number, bByte: number, cByte: number, ldcBytes: number) => void;

/**
 * One exported function computing every MR×NR tile of an (mPanels·MR)×(nPanels·NR) block from packed panels:
 * tile (ip, jp) = A panel ip (kc steps of MR values) · B panel jp (kc steps of NR values), each output the
 * sum over p in order from +0, stored (not added) row-major at cByte with a row pitch of ldcBytes. With
 * `binary32`, every product and every partial sum is rounded to binary32 and back (demote then promote is
 * binary32 round to nearest even, as Math.fround).
 */
function tileFunction(binary32: boolean): WasmFunction {
  // parameters 0..6, then i32 locals 7..12, then v128 locals
  const [mPanels, nPanels, kc, aByte, bByte, cByte, ldc] = [0, 1, 2, 3, 4, 5, 6];
  const [ip, jp, ai, bi, aEnd, ci] = [7, 8, 9, 10, 11, 12];
  const acc = 13; // 2·MR accumulators: row i's lanes 0–1 at acc + 2i, lanes 2–3 at acc + 2i + 1
  const b01 = acc + 2 * MR;
  const b23 = b01 + 1;
  const a = b23 + 1;
  const round = binary32 ? [...op.f32x4DemoteF64x2Zero, ...op.f64x2PromoteLowF32x4] : [];
  const builder = new CodeBuilder();
  const emit = builder.emit.bind(builder);
  const countedLoop = builder.countedLoop.bind(builder);
  /** acc[slot] = acc[slot] + a·b (each rounded when binary32) */
  const multiplyAdd = (slot: number, b: number): void => {
    emit(op.localGet(acc + slot), op.localGet(a), op.localGet(b), op.f64x2Mul, round, op.f64x2Add, round, op.localSet(acc + slot));
  };
  countedLoop(jp, nPanels, () => {
    countedLoop(ip, mPanels, () => {
      for (let s = 0; s < 2 * MR; s++) emit(op.v128Zero, op.localSet(acc + s));
      // ai = aByte + ip·kc·MR·8, aEnd = ai + kc·MR·8, bi = bByte + jp·kc·NR·8
      emit(op.localGet(aByte), op.localGet(ip), op.localGet(kc), op.i32Mul, op.i32Const(MR * 8), op.i32Mul, op.i32Add, op.localTee(ai));
      emit(op.localGet(kc), op.i32Const(MR * 8), op.i32Mul, op.i32Add, op.localSet(aEnd));
      emit(op.localGet(bByte), op.localGet(jp), op.localGet(kc), op.i32Mul, op.i32Const(NR * 8), op.i32Mul, op.i32Add, op.localSet(bi));
      emit(op.block, op.loop);
      emit(op.localGet(ai), op.localGet(aEnd), op.i32GeU, op.brIf(1));
      emit(op.localGet(bi), op.v128Load(0), op.localSet(b01), op.localGet(bi), op.v128Load(16), op.localSet(b23));
      for (let i = 0; i < MR; i++) {
        emit(op.localGet(ai), op.v128Load64Splat(8 * i), op.localSet(a));
        multiplyAdd(2 * i, b01);
        multiplyAdd(2 * i + 1, b23);
      }
      emit(op.localGet(ai), op.i32Const(MR * 8), op.i32Add, op.localSet(ai));
      emit(op.localGet(bi), op.i32Const(NR * 8), op.i32Add, op.localSet(bi));
      emit(op.br(0), op.end, op.end);
      // ci = cByte + ip·MR·ldc + jp·NR·8
      emit(op.localGet(cByte), op.localGet(ip), op.i32Const(MR), op.i32Mul, op.localGet(ldc), op.i32Mul, op.i32Add);
      emit(op.localGet(jp), op.i32Const(NR * 8), op.i32Mul, op.i32Add, op.localSet(ci));
      for (let i = 0; i < MR; i++) {
        emit(op.localGet(ci), op.localGet(acc + 2 * i), op.v128Store(0), op.localGet(ci), op.localGet(acc + 2 * i + 1), op.v128Store(16));
        emit(op.localGet(ci), op.localGet(ldc), op.i32Add, op.localSet(ci));
      }
    });
  });
  return {
    name: binary32 ? "tiles32" : "tiles64",
    params: new Array<number>(7).fill(I32),
    results: [],
    locals: [
      [6, I32],
      [2 * MR + 3, V128],
    ],
    code: builder.code,
  };
}

interface Kernel {
  memory: WasmMemory;
  view: Float64Array;
  tiles64: TileFunction;
  tiles32: TileFunction;
}

let kernel: Kernel | undefined;

function instantiateKernel(): Kernel {
  const { memory, exports } = instantiate([tileFunction(false), tileFunction(true)], 32);
  return { memory, view: new Float64Array(memory.buffer), tiles64: exports.tiles64 as TileFunction, tiles32: exports.tiles32 as TileFunction };
}

/**
 * The kernel's memory as a Float64Array of at least `elements` values, grown when needed. The view is valid
 * until the next call (growing the memory detaches the old one); contents are scratch, not kept between products.
 */
export function tileWorkspace(elements: number): Float64Array {
  kernel ??= instantiateKernel();
  if (kernel.view.length < elements) {
    const missing = elements * 8 - kernel.memory.buffer.byteLength;
    kernel.memory.grow(Math.ceil(missing / PAGE_BYTES));
    kernel.view = new Float64Array(kernel.memory.buffer);
  }
  return kernel.view;
}

/**
 * Compute every MR×NR tile of a block from packed panels in the workspace (element offsets, each a multiple of
 * 2): the A panels (mPanels of kc·MR values) at `aAt`, the B panels (nPanels of kc·NR values) at `bAt`; the
 * tiles are written row-major at `cAt` with `ldc` values per row. Call tileWorkspace first.
 */
export function computeTiles(binary32: boolean, mPanels: number, nPanels: number, kc: number, aAt: number, bAt: number, cAt: number, ldc: number): void {
  const k = kernel!;
  (binary32 ? k.tiles32 : k.tiles64)(mPanels, nPanels, kc, aAt * 8, bAt * 8, cAt * 8, ldc * 8);
}
