/** Helpers over per-sample shapes and initialisation rules. */
import type { InitSpec } from "../spec/types.js";
import type { SampleShape, WeightDistribution } from "./types.js";

/** Elements of one sample. */
export function sampleElements(shape: SampleShape): number {
  switch (shape.layout) {
    case "tokens":
      return shape.positions;
    case "features":
      return shape.positions * shape.features;
    case "image":
      return shape.channels * shape.height * shape.width;
  }
}

/** The width a dense layer, a norm or a softmax acts on: features, or channels of an image (0 for tokens). */
export function featureWidth(shape: SampleShape): number {
  switch (shape.layout) {
    case "tokens":
      return 0;
    case "features":
      return shape.features;
    case "image":
      return shape.channels;
  }
}

/** Positions per sample a weight is shared across: sequence positions, or pixels of an image. */
export function positionCount(shape: SampleShape): number {
  switch (shape.layout) {
    case "tokens":
    case "features":
      return shape.positions;
    case "image":
      return shape.height * shape.width;
  }
}

/** Full tensor shape with the batch first; a single position is left out ([batch, features]). */
export function batchShape(batch: number, shape: SampleShape): number[] {
  switch (shape.layout) {
    case "tokens":
      return [batch, shape.positions];
    case "features":
      return shape.positions === 1 ? [batch, shape.features] : [batch, shape.positions, shape.features];
    case "image":
      return [batch, shape.channels, shape.height, shape.width];
  }
}

/** Whether two sample shapes are one: the same layout and the same sizes. */
export function sameShape(a: SampleShape, b: SampleShape): boolean {
  switch (a.layout) {
    case "tokens":
      return b.layout === "tokens" && a.positions === b.positions;
    case "features":
      return b.layout === "features" && a.positions === b.positions && a.features === b.features;
    case "image":
      return b.layout === "image" && a.channels === b.channels && a.height === b.height && a.width === b.width;
  }
}

/** Human-readable shape, e.g. "64 positions × 512 features". */
export function describeShape(shape: SampleShape): string {
  switch (shape.layout) {
    case "tokens":
      return `${shape.positions} token id${shape.positions === 1 ? "" : "s"}`;
    case "features":
      return `${shape.positions} position${shape.positions === 1 ? "" : "s"} × ${shape.features} feature${shape.features === 1 ? "" : "s"}`;
    case "image":
      return `image ${shape.channels} × ${shape.height} × ${shape.width}`;
  }
}

/**
 * Variance of one weight element under an initialisation rule (the rules of InitSpec's doc comment):
 * he g²·2/n_in (He et al. 2015), glorot g²·2/(n_in+n_out) (Glorot & Bengio 2010), lecun g²/n_in,
 * normal (g·std)², uniform (g·limit)²/3, orthogonal g²/max(n_in, n_out), zeros 0.
 */
export function initVariance(init: InitSpec, fanIn: number, fanOut: number): number {
  switch (init.kind) {
    case "he":
      return (init.gain * init.gain * 2) / fanIn;
    case "glorot":
      return (init.gain * init.gain * 2) / (fanIn + fanOut);
    case "lecun":
      return (init.gain * init.gain) / fanIn;
    case "normal":
      return (init.gain * init.std) ** 2;
    case "uniform":
      return (init.gain * init.limit) ** 2 / 3;
    case "orthogonal":
      return (init.gain * init.gain) / Math.max(fanIn, fanOut);
    case "zeros":
      return 0;
  }
}

/** The element distribution an initialisation draws from (orthogonal matrices have near-Gaussian entries). */
export function initDistribution(init: InitSpec): WeightDistribution {
  switch (init.kind) {
    case "he":
    case "glorot":
    case "lecun":
      return init.distribution;
    case "normal":
    case "orthogonal":
      return "normal";
    case "uniform":
      return "uniform";
    case "zeros":
      return "zeros";
  }
}
