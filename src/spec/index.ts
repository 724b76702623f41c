/** Public exports of src/spec: the network spec's types, its loader and its JSON Schema. */
export type * from "./types.js";
export { ACTIVATIONS } from "./types.js";
export { parseSpec, loadSpec, MAX_SPEC_BYTES, type SpecResult } from "./parse.js";
export { formatSpecIssue, formatSpecPath, positionIssues, type SpecIssue, type SpecPosition } from "./issues.js";
export {
  specJsonSchema,
  specJsonSchemaText,
  LAYER_TYPES,
  BARE_LAYER_TYPES,
  INIT_SHORTHANDS,
  MAX_SIZE,
  MAX_TENSOR_ELEMENTS,
  MAX_EXPANDED_LAYERS,
  type LayerType,
} from "./schema.js";
export { DEFAULT_INIT, DEFAULT_EMBEDDING_INIT, DEFAULT_OPTIMIZER, DEFAULT_PLAN_NAME, gradientContributions, gradientSumFormat } from "./normalize.js";
