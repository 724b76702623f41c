/** Public exports of src/numeric: dependency-free math for the magnitude engine and the simulator. */
export * from "./normal.js";
export * from "./quadrature.js";
export * from "./activations.js";
export * from "./random.js";
export * from "./roots.js";
export * from "./extremes.js";
export * from "./spread.js";
export * from "./meanField.js";
export * from "./logspace.js";
export * from "./softmax.js";
