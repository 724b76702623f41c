/**
 * headroom's public library API. Re-exports only; every export is documented where it is defined.
 */
export * from "./formats/index.js";
export * from "./spec/index.js";
export * from "./numeric/index.js";
export * from "./graph/index.js";
export * from "./magnitude/index.js";
export * from "./risk/index.js";
export * from "./scale/index.js";
export * from "./measure/index.js";
export * from "./simulate/index.js";
export * from "./report/index.js";
export * from "./batch/index.js";
// OverflowMode is declared by both formats and spec (the same string union); name one to settle `export *`
export type { OverflowMode } from "./formats/index.js";
export * from "./check.js";
