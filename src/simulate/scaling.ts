/**
 * Scale factors for 8-bit storage (plan `scaling`): one power of two per tensor, or one per block of 32
 * elements (OCP Microscaling v1.0, E8M0 shared scales), applied before rounding and removed after.
 *
 * A block's conversion clamps each scaled element to ± the element format's largest normal (OCP MX v1.0 §6 /
 * Rouhani et al. 2023 Alg. 1, from memory; SCIENCE.md §1.4, the model src/risk/blocks.ts judges by), so a block
 * maximum the floor rule puts past the largest value (by at most 2^(emax+1)/max) is clipped, not overflowed, under
 * either overflow mode. Only a block whose shared exponent would pass E8M0's largest, 127, keeps a scale too small
 * for it: its elements can leave the element range, and they overflow or saturate as the plan says.
 */
import { MX_BLOCK, countClasses, roundArrayInPlace, type ClassCounts, type Format, type RoundOptions } from "../formats/index.js";

/** Elements sharing one scale in block scaling (OCP Microscaling v1.0: k = 32). */
const BLOCK_SIZE = MX_BLOCK.size;

/** The per-block scales of one tensor, and which blocks had theirs clamped at E8M0's top. */
export interface BlockScales {
  /** what each block's elements are multiplied by before storage */
  scales: Float64Array;
  /** 1 for a block whose shared exponent would pass 127: its scale is clamped, and its elements can leave the element range */
  clamped: Uint8Array;
  /** how many blocks are clamped (usually none) */
  clampedCount: number;
}

/** One factor for the whole tensor (per-tensor scaling, or 1 when none), or one per block. */
export type StorageScales = number | BlockScales;

function floorLog2(a: number): number {
  return Math.floor(Math.log2(a));
}

/** 2^k clamped to the E8M0 range 2^-127 … 2^127 (OCP Microscaling v1.0). */
function e8m0(k: number): number {
  return 2 ** Math.max(MX_BLOCK.minExponent, Math.min(MX_BLOCK.maxExponent, k));
}

/**
 * The scale each element is multiplied by before storage: per tensor 2^⌊log2(max / amax)⌋, the common rule that
 * puts the largest magnitude in the top binade (Micikevicius et al. 2022, per-tensor scaling; SCIENCE.md §3.4);
 * per block 2^−(⌊log2 amax_block⌋ − emax), the shared exponent of OCP Microscaling v1.0. 1 when no scaling.
 */
export function storageScales(data: Float64Array, format: Format, scaling: "none" | "tensor" | "block"): StorageScales {
  if (scaling === "none" || format.bits !== 8) return 1;
  if (scaling === "tensor") {
    let amax = 0;
    for (let i = 0; i < data.length; i++) {
      const a = Math.abs(data[i]!);
      if (a > amax && Number.isFinite(a)) amax = a;
    }
    return amax > 0 ? e8m0(floorLog2(format.maxFinite / amax)) : 1;
  }
  const blocks = Math.ceil(data.length / BLOCK_SIZE);
  const scales = new Float64Array(blocks);
  const clamped = new Uint8Array(blocks);
  let clampedCount = 0;
  for (let b = 0; b < blocks; b++) {
    let amax = 0;
    const end = Math.min(data.length, (b + 1) * BLOCK_SIZE);
    for (let i = b * BLOCK_SIZE; i < end; i++) {
      const a = Math.abs(data[i]!);
      if (a > amax && Number.isFinite(a)) amax = a;
    }
    if (!(amax > 0)) {
      scales[b] = 1;
      continue;
    }
    const shared = floorLog2(amax) - format.emax;
    scales[b] = e8m0(-shared);
    if (shared > MX_BLOCK.maxExponent) {
      clamped[b] = 1;
      clampedCount++;
    }
  }
  return { scales, clamped, clampedCount };
}

/** Multiply (or, with `inverse`, divide) every element by its scale, in place. */
export function applyScales(data: Float64Array, scales: StorageScales, inverse = false): void {
  if (typeof scales === "number") {
    if (scales === 1) return;
    const s = inverse ? 1 / scales : scales;
    for (let i = 0; i < data.length; i++) data[i] = data[i]! * s;
    return;
  }
  const perBlock = scales.scales;
  for (let b = 0; b < perBlock.length; b++) {
    const s = inverse ? 1 / perBlock[b]! : perBlock[b]!;
    const end = Math.min(data.length, (b + 1) * BLOCK_SIZE);
    for (let i = b * BLOCK_SIZE; i < end; i++) data[i] = data[i]! * s;
  }
}

function blockOf(data: Float64Array, b: number): Float64Array {
  return data.subarray(b * BLOCK_SIZE, Math.min(data.length, (b + 1) * BLOCK_SIZE));
}

/**
 * Round elements already multiplied by their `scales` to the format, in place: with the plan's `options`, except that a
 * block-scaled conversion clamps to ± the largest normal in every block whose scale was not clamped (OCP MX v1.0 §6,
 * from memory; see the module comment). The clamp is RNE then clamp, which is what the saturating mode does.
 */
export function roundScaledInPlace(format: Format, data: Float64Array, scales: StorageScales, options: RoundOptions): void {
  if (typeof scales === "number") {
    roundArrayInPlace(format, data, options);
    return;
  }
  const clamp: RoundOptions = { ...options, overflow: "saturate" };
  if (scales.clampedCount === 0 || options.overflow === "saturate") {
    roundArrayInPlace(format, data, clamp);
    return;
  }
  // the few clamped blocks keep the plan's overflow mode (blocks are disjoint: the order does not matter)
  for (let b = 0; b < scales.clamped.length; b++) roundArrayInPlace(format, blockOf(data, b), scales.clamped[b] === 1 ? options : clamp);
}

/** What storing elements already multiplied by their `scales` does, counted as {@link roundScaledInPlace} rounds them. */
export interface ScaledCounts {
  counts: ClassCounts;
  /**
   * elements clipped to ± the largest normal by a block conversion's own clamp (blocks whose scale was not clamped); they
   * are in neither `counts.overflowed` nor `counts.saturated`. 0 without per-block scales.
   */
  clipped: number;
}

/** Count what {@link roundScaledInPlace} does to scaled elements (see ScaledCounts), without changing them. */
export function countScaled(format: Format, data: Float64Array, scales: StorageScales, options: RoundOptions): ScaledCounts {
  if (typeof scales === "number") return { counts: countClasses(format, data, options), clipped: 0 };
  const clamp: RoundOptions = { ...options, overflow: "saturate" };
  const counts = countClasses(format, data, clamp);
  if (scales.clampedCount === 0) {
    const clipped = counts.saturated;
    counts.saturated = 0;
    return { counts, clipped };
  }
  // the elements of the clamped blocks past the range are the plan's overflows (or saturations); the others' are clips
  let outOfRange = 0;
  let overflowed = 0;
  let saturated = 0;
  for (let b = 0; b < scales.clamped.length; b++) {
    if (scales.clamped[b] === 0) continue;
    const c = countClasses(format, blockOf(data, b), options);
    overflowed += c.overflowed;
    saturated += c.saturated;
    outOfRange += c.overflowed + c.saturated;
  }
  const clipped = counts.saturated - outOfRange;
  counts.overflowed = overflowed;
  counts.saturated = saturated;
  return { counts, clipped };
}
