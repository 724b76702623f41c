/**
 * Scale factors for 8-bit storage (plan `scaling`): one power of two per tensor, or one per block of 32
 * elements (OCP Microscaling v1.0, E8M0 shared scales), applied before rounding and removed after.
 */
import type { Format } from "../formats/index.js";

/** Elements sharing one scale in block scaling (OCP Microscaling v1.0: k = 32). */
export const BLOCK_SIZE = 32;

function floorLog2(a: number): number {
  return Math.floor(Math.log2(a));
}

/** 2^k clamped to the E8M0 range 2^-127 … 2^127 (OCP Microscaling v1.0). */
function e8m0(k: number): number {
  return 2 ** Math.max(-127, Math.min(127, k));
}

/**
 * The scale each element is multiplied by before storage: per tensor 2^⌊log2(max / amax)⌋, the common rule that
 * puts the largest magnitude in the top binade (Micikevicius et al. 2022, per-tensor scaling; SCIENCE.md §3.4);
 * per block 2^−(⌊log2 amax_block⌋ − emax), the shared exponent of OCP Microscaling v1.0. 1 when no scaling.
 */
export function storageScales(data: Float64Array, format: Format, scaling: "none" | "tensor" | "block"): Float64Array | number {
  if (scaling === "none" || format.bits !== 8) return 1;
  if (scaling === "tensor") {
    let amax = 0;
    for (let i = 0; i < data.length; i++) {
      const a = Math.abs(data[i]!);
      if (a > amax && Number.isFinite(a)) amax = a;
    }
    return amax > 0 ? e8m0(floorLog2(format.maxFinite / amax)) : 1;
  }
  const scales = new Float64Array(Math.ceil(data.length / BLOCK_SIZE));
  for (let b = 0; b < scales.length; b++) {
    let amax = 0;
    const end = Math.min(data.length, (b + 1) * BLOCK_SIZE);
    for (let i = b * BLOCK_SIZE; i < end; i++) {
      const a = Math.abs(data[i]!);
      if (a > amax && Number.isFinite(a)) amax = a;
    }
    scales[b] = amax > 0 ? e8m0(format.emax - floorLog2(amax)) : 1;
  }
  return scales;
}

/** Multiply (or, with `inverse`, divide) every element by its scale, in place. */
export function applyScales(data: Float64Array, scales: Float64Array | number, inverse = false): void {
  if (typeof scales === "number") {
    if (scales === 1) return;
    const s = inverse ? 1 / scales : scales;
    for (let i = 0; i < data.length; i++) data[i] = data[i]! * s;
    return;
  }
  for (let i = 0; i < data.length; i++) {
    const s = scales[Math.floor(i / BLOCK_SIZE)]!;
    data[i] = inverse ? data[i]! / s : data[i]! * s;
  }
}
