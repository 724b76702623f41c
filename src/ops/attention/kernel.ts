/**
 * Float64 kernels of the attention family: multi-head self-attention over [batch, positions, width] rows
 * (Vaswani et al. 2017, eqs. 1–2), with projections stored output-first: query, key and value
 * [heads·headWidth, width], output [width, heads·headWidth]; no biases. The 1/√headWidth scaling is applied to
 * the query before q·kᵀ, to the logits after it, or not at all; the softmax may subtract the row maximum
 * or not; a causal mask gives future positions probability exactly 0.
 *
 * Every intermediate tensor is handed to the optional `onTensor` hook as soon as it is computed, so a caller can
 * measure it or round it in place to a storage format before it is used further. "query" is the projection
 * x·Wqᵀ before any scaling and "query-gradient" the gradient with respect to it; "logits" are the scaled logits
 * that enter the softmax and "logits-gradient" the gradient with respect to them; "context" is the heads'
 * output before the output projection.
 */
import { gemm, type RoundFunction } from "../../numeric/matmul.js";
import { denseBackward, denseForward } from "../dense/kernel.js";
import { softmaxBackward, softmaxForward } from "../activation/kernel.js";

/** The shape and options of one attention layer. */
export interface AttentionConfig {
  batch: number;
  positions: number;
  width: number;
  heads: number;
  headWidth: number;
  causal: boolean;
  scaling: "query" | "logits" | "none";
  subtractMax: boolean;
}

/** The attention weights, each row-major, output dimension first. */
export interface AttentionWeights {
  query: Float64Array;
  key: Float64Array;
  value: Float64Array;
  output: Float64Array;
}

/** Names of the intermediate tensors passed to `onTensor`. */
export type AttentionTensorName =
  | "query"
  | "key"
  | "value"
  | "logits"
  | "probabilities"
  | "context"
  | "context-gradient"
  | "probabilities-gradient"
  | "logits-gradient"
  | "query-gradient"
  | "key-gradient"
  | "value-gradient";

/** What the forward pass keeps for the backward pass. */
export interface AttentionSaved {
  x: Float64Array;
  /** the query as used in q·kᵀ (already scaled when scaling is "query") */
  query: Float64Array;
  key: Float64Array;
  value: Float64Array;
  /** [batch, heads, positions, positions] */
  probabilities: Float64Array;
  /** [batch·positions, heads·headWidth] */
  context: Float64Array;
}

type Hook = (name: AttentionTensorName, data: Float64Array) => void;

function scale(a: Float64Array, s: number): void {
  for (let i = 0; i < a.length; i++) a[i] = a[i]! * s;
}

/** y = concat_h(softmax(q_h·k_hᵀ)·v_h)·Woᵀ. */
export function attentionForward(
  x: Float64Array,
  w: AttentionWeights,
  cfg: AttentionConfig,
  onTensor?: Hook,
  accumulate?: RoundFunction,
): { y: Float64Array; saved: AttentionSaved } {
  const { batch, positions: P, width: D, heads: H, headWidth: dh } = cfg;
  const rows = batch * P;
  const inner = H * dh;
  const invSqrt = 1 / Math.sqrt(dh);
  const query = denseForward(x, w.query, null, rows, D, inner, accumulate);
  // the hook sees the projection as stored (x·Wqᵀ); the 1/√d scaling is applied to it afterwards
  onTensor?.("query", query);
  if (cfg.scaling === "query") scale(query, invSqrt);
  const key = denseForward(x, w.key, null, rows, D, inner, accumulate);
  onTensor?.("key", key);
  const value = denseForward(x, w.value, null, rows, D, inner, accumulate);
  onTensor?.("value", value);
  const logits = new Float64Array(batch * H * P * P);
  for (let b = 0; b < batch; b++) {
    for (let h = 0; h < H; h++) {
      const qOff = b * P * inner + h * dh;
      // logits_bh (P×P) = q_bh (P×dh) · k_bhᵀ
      gemm(P, P, dh, query, qOff, inner, 1, key, qOff, 1, inner, logits, (b * H + h) * P * P, P, 0, accumulate);
    }
  }
  if (cfg.scaling === "logits") scale(logits, invSqrt);
  onTensor?.("logits", logits);
  const masked = cfg.causal ? (row: number, column: number) => column > row % P : undefined;
  const probabilities = softmaxForward(logits, batch * H * P, P, cfg.subtractMax, masked);
  onTensor?.("probabilities", probabilities);
  const context = new Float64Array(rows * inner);
  for (let b = 0; b < batch; b++) {
    for (let h = 0; h < H; h++) {
      const vOff = b * P * inner + h * dh;
      // context_bh (P×dh) = probabilities_bh (P×P) · v_bh (P×dh), written into its head's columns
      gemm(P, dh, P, probabilities, (b * H + h) * P * P, P, 1, value, vOff, inner, 1, context, vOff, inner, 0, accumulate);
    }
  }
  onTensor?.("context", context);
  const y = denseForward(context, w.output, null, rows, inner, D, accumulate);
  return { y, saved: { x, query, key, value, probabilities, context } };
}

/** Gradients of attention with respect to its input and its four weights. */
export function attentionBackward(
  dy: Float64Array,
  w: AttentionWeights,
  saved: AttentionSaved,
  cfg: AttentionConfig,
  onTensor?: Hook,
  accumulate?: RoundFunction,
): { dx: Float64Array; dweights: AttentionWeights } {
  const { batch, positions: P, width: D, heads: H, headWidth: dh } = cfg;
  const rows = batch * P;
  const inner = H * dh;
  const invSqrt = 1 / Math.sqrt(dh);
  const out = denseBackward(saved.context, w.output, dy, rows, inner, D, false, accumulate);
  const dcontext = out.dx;
  onTensor?.("context-gradient", dcontext);
  const dprobabilities = new Float64Array(batch * H * P * P);
  const dvalue = new Float64Array(rows * inner);
  for (let b = 0; b < batch; b++) {
    for (let h = 0; h < H; h++) {
      const off = b * P * inner + h * dh;
      const pOff = (b * H + h) * P * P;
      // dprobabilities_bh = dcontext_bh (P×dh) · v_bhᵀ
      gemm(P, P, dh, dcontext, off, inner, 1, saved.value, off, 1, inner, dprobabilities, pOff, P, 0, accumulate);
      // dv_bh = probabilities_bhᵀ (P×P) · dcontext_bh (P×dh)
      gemm(P, dh, P, saved.probabilities, pOff, 1, P, dcontext, off, inner, 1, dvalue, off, inner, 0, accumulate);
    }
  }
  onTensor?.("probabilities-gradient", dprobabilities);
  onTensor?.("value-gradient", dvalue);
  const dlogits = softmaxBackward(saved.probabilities, dprobabilities, batch * H * P, P);
  onTensor?.("logits-gradient", dlogits);
  if (cfg.scaling === "logits") scale(dlogits, invSqrt);
  const dquery = new Float64Array(rows * inner);
  const dkey = new Float64Array(rows * inner);
  for (let b = 0; b < batch; b++) {
    for (let h = 0; h < H; h++) {
      const off = b * P * inner + h * dh;
      const pOff = (b * H + h) * P * P;
      // dq_bh = dlogits_bh (P×P) · k_bh (P×dh); dk_bh = dlogits_bhᵀ · q_bh
      gemm(P, dh, P, dlogits, pOff, P, 1, saved.key, off, inner, 1, dquery, off, inner, 0, accumulate);
      gemm(P, dh, P, dlogits, pOff, 1, P, saved.query, off, inner, 1, dkey, off, inner, 0, accumulate);
    }
  }
  if (cfg.scaling === "query") scale(dquery, invSqrt);
  onTensor?.("query-gradient", dquery);
  onTensor?.("key-gradient", dkey);
  const q = denseBackward(saved.x, w.query, dquery, rows, D, inner, false, accumulate);
  const k = denseBackward(saved.x, w.key, dkey, rows, D, inner, false, accumulate);
  const v = denseBackward(saved.x, w.value, dvalue, rows, D, inner, false, accumulate);
  const dx = new Float64Array(rows * D);
  for (let i = 0; i < dx.length; i++) dx[i] = q.dx[i]! + k.dx[i]! + v.dx[i]!;
  return { dx, dweights: { query: q.dw, key: k.dw, value: v.dw, output: out.dw } };
}
