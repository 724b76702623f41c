import type { LayerSpec, NetworkSpec } from "../../src/spec/types.js";

/** A spec around `layers`, binary16 with a binary32 master copy, AdamW, a short horizon. */
export function base(name: string, layers: LayerSpec[], input: NetworkSpec["input"], loss: NetworkSpec["training"]["loss"]): NetworkSpec;

/** 500 dense + ReLU pairs of width 256 (He initialisation, biases); `inputScale` moves every magnitude a little. */
export function mlpSpec(inputScale?: number): NetworkSpec;

/** The comparison scripts' fresh 1,000-layer spec: variant `i` of round `round`, with weight growth `growth`. */
export function mlpVariant(i: number, round: number, growth: number): NetworkSpec;
