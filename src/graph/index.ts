/** Public exports of src/graph: NetworkSpec -> the tensor graph of one training step. */
export { buildGraph, forwardOrder, convSize, ABSURD_ELEMENTS, MAX_LAYERS } from "./build.js";
export { sampleElements, featureWidth, positionCount, batchShape, describeShape, initVariance, initDistribution } from "./shape.js";
export type {
  Graph,
  GraphLayer,
  GraphWeight,
  GraphFamily,
  GraphIssue,
  GraphResult,
  SampleShape,
  WeightDistribution,
  ConcreteLayerSpec,
} from "./types.js";
