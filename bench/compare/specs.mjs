/**
 * The 1,000-layer spec of the benchmarks, in plain JavaScript so that the build-comparison scripts beside it (run by
 * node on two builds' dist folders, no TypeScript step) and the vitest benches (through ../generated-specs.ts) time
 * one and the same network.
 */

/** A spec around `layers`, binary16 with a binary32 master copy, AdamW (momentum 0, as the spec reader gives adam and adamw), a short horizon. */
export function base(name, layers, input, loss) {
  return {
    source: "<bench>",
    name,
    description: "generated for the benchmark",
    input,
    training: {
      batch: 32,
      loss,
      workers: 2,
      workerGradients: "average",
      accumulationSteps: 2,
      optimizer: { kind: "adamw", learningRate: { peak: 1e-3, end: 1e-5 }, warmupSteps: 10, momentum: 0, betas: [0.9, 0.999], epsilon: 1e-8, weightDecay: 0 },
      horizon: { steps: 1000, weightGrowth: 1.1, finalLoss: 0.5 },
    },
    precision: { name: "half", activations: "binary16", weights: "binary16", gradients: "binary16", optimizerStates: "binary32", masterWeights: "binary32", accumulate: "binary32", overflow: "saturate", flushSubnormals: false, scaling: "none" },
    plans: [],
    blocks: {},
    layers,
  };
}

/**
 * 500 dense + ReLU pairs of width 256 (He initialisation, biases): about 1,000 layers. `inputScale` (default 1)
 * moves every magnitude a little, so a benchmark can check a spec no earlier call has seen.
 */
export function mlpSpec(inputScale = 1) {
  const layers = [];
  const he = { kind: "he", distribution: "normal", gain: 1 };
  for (let i = 0; i < 500; i++) {
    layers.push({ family: "dense", name: `d${i}`, path: ["layers", 2 * i], width: 256, bias: true, init: he });
    layers.push({ family: "activation", name: `a${i}`, path: ["layers", 2 * i + 1], activation: "relu", slope: 0 });
  }
  return base("mlp-1000", layers, { kind: "features", features: 256, positions: 1, scale: inputScale }, { kind: "mean-squared-error", reduction: "mean", targetScale: 1 });
}

/**
 * The comparison scripts' fresh 1,000-layer spec: variant `i` of round `round` (input scale moved by
 * (i + 1000·round)·2^-20, so no two calls of a process check the same spec) with weight growth `growth` over the horizon.
 */
export function mlpVariant(i, round, growth) {
  const spec = mlpSpec(1 + (i + 1000 * round) * 2 ** -20);
  spec.training.horizon.weightGrowth = growth;
  return spec;
}
