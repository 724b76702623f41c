/**
 * Float64 kernels of the gated feed-forward family: y = (φ(x·Wgᵀ) ⊙ x·Wuᵀ)·Wdᵀ, the gated linear unit
 * feed-forward of Shazeer 2020 (eq. 5–6: GEGLU, SwiGLU with φ = GELU, SiLU). Weights are output-first:
 * gate and up [hidden, width], down [width, hidden]; no biases.
 */
import type { RoundFunction } from "../../numeric/matmul.js";
import { denseBackward, denseForward } from "../dense/kernel.js";
import {
  activationBackward,
  activationForward,
  softmaxBackward,
  softmaxForward,
  type ElementwiseActivation,
} from "../activation/kernel.js";
import type { ActivationName } from "../../spec/types.js";

/** Names of the intermediate tensors passed to `onTensor`. */
export type GatedTensorName =
  /** x·Wgᵀ, before the activation */
  | "gate"
  /** φ(x·Wgᵀ) */
  | "gate-activation"
  /** x·Wuᵀ */
  | "up"
  /** φ(gate) ⊙ up, the input of the down projection */
  | "product"
  | "product-gradient"
  /** gradient with respect to φ(gate) */
  | "gate-activation-gradient"
  | "up-gradient"
  /** gradient with respect to the gate pre-activation x·Wgᵀ */
  | "gate-gradient";

/** The weights of a gated feed-forward layer. */
export interface GatedWeights {
  gate: Float64Array;
  up: Float64Array;
  down: Float64Array;
}

/** What the forward pass keeps for the backward pass. */
export interface GatedSaved {
  x: Float64Array;
  gatePre: Float64Array;
  gate: Float64Array;
  up: Float64Array;
  hidden: Float64Array;
}

type Hook = (name: GatedTensorName, data: Float64Array) => void;

function applyActivation(name: ActivationName, z: Float64Array, rows: number, hidden: number, slope: number): Float64Array {
  return name === "softmax" ? softmaxForward(z, rows, hidden) : activationForward(name as ElementwiseActivation, z, slope);
}

/** Forward over `rows` rows of `width` features. */
export function gatedForward(
  x: Float64Array,
  w: GatedWeights,
  rows: number,
  width: number,
  hidden: number,
  activation: ActivationName,
  slope: number,
  onTensor?: Hook,
  accumulate?: RoundFunction,
): { y: Float64Array; saved: GatedSaved } {
  const gatePre = denseForward(x, w.gate, null, rows, width, hidden, accumulate);
  onTensor?.("gate", gatePre);
  const gate = applyActivation(activation, gatePre, rows, hidden, slope);
  onTensor?.("gate-activation", gate);
  const up = denseForward(x, w.up, null, rows, width, hidden, accumulate);
  onTensor?.("up", up);
  const h = new Float64Array(rows * hidden);
  for (let i = 0; i < h.length; i++) h[i] = gate[i]! * up[i]!;
  onTensor?.("product", h);
  const y = denseForward(h, w.down, null, rows, hidden, width, accumulate);
  return { y, saved: { x, gatePre, gate, up, hidden: h } };
}

/** Gradients with respect to the input and the three weights. */
export function gatedBackward(
  dy: Float64Array,
  w: GatedWeights,
  saved: GatedSaved,
  rows: number,
  width: number,
  hidden: number,
  activation: ActivationName,
  slope: number,
  onTensor?: Hook,
  accumulate?: RoundFunction,
): { dx: Float64Array; dweights: GatedWeights } {
  const down = denseBackward(saved.hidden, w.down, dy, rows, hidden, width, false, accumulate);
  const dh = down.dx;
  onTensor?.("product-gradient", dh);
  const dgate = new Float64Array(dh.length);
  const dup = new Float64Array(dh.length);
  for (let i = 0; i < dh.length; i++) {
    dgate[i] = dh[i]! * saved.up[i]!;
    dup[i] = dh[i]! * saved.gate[i]!;
  }
  onTensor?.("gate-activation-gradient", dgate);
  onTensor?.("up-gradient", dup);
  const dgatePre =
    activation === "softmax"
      ? softmaxBackward(saved.gate, dgate, rows, hidden)
      : activationBackward(activation, saved.gatePre, dgate, slope);
  onTensor?.("gate-gradient", dgatePre);
  const g = denseBackward(saved.x, w.gate, dgatePre, rows, width, hidden, false, accumulate);
  const u = denseBackward(saved.x, w.up, dup, rows, width, hidden, false, accumulate);
  const dx = new Float64Array(rows * width);
  for (let i = 0; i < dx.length; i++) dx[i] = g.dx[i]! + u.dx[i]!;
  return { dx, dweights: { gate: g.dw, up: u.dw, down: down.dw } };
}
