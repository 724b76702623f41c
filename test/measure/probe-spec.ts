/**
 * The spec text of an invented two-layer regressor fine-tuned from a checkpoint, for the tests of measured data
 * (check, check --vary, compare, weight mismatches): 16 features → dense fc1 (`width`, He) → ReLU → dense fc2 (4,
 * LeCun), all-binary16 with a binary32 master copy. `measured` is appended as written (a `measured:` section, or "").
 */
export function probeSpec(name: string, measured: string, width = 8): string {
  return `name: ${name}
description: an invented two-layer regressor fine-tuned from a checkpoint
input: { features: 16, scale: 1.0 }
training:
  batch: 8
  loss: { kind: mean-squared-error, reduction: mean, target-scale: 1.0 }
  optimizer: { kind: sgd, learning-rate: { peak: 1.0e-3, end: 1.0e-3 } }
precision:
  name: all-binary16
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
layers:
  - type: dense
    name: fc1
    width: ${width}
    bias: false
    init: he-normal
  - relu
  - type: dense
    name: fc2
    width: 4
    bias: false
    init: lecun-normal
${measured}
`;
}

/** `count` weights of magnitude `size` with alternating signs (rms = size). */
export const alternating = (count: number, size: number): number[] => Array.from({ length: count }, (_, i) => (i % 2 ? -1 : 1) * size);
