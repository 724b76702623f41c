/** Public exports of src/magnitude: the prediction contract and the engine that produces it. */
export * from "./types.js";
export { predict } from "./predict.js";
export type { PredictOptions } from "./predict.js";
