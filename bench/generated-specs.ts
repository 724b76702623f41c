/**
 * Specs generated in code for the benchmarks (no YAML parsing in the timed region).
 */

// the 1,000-layer spec and its frame live in plain JavaScript, so the build-comparison scripts (bench/compare) time
// the same network as these benches
export { base, mlpSpec } from "./compare/specs.mjs";

/**
 * The YAML file of {@link mlpSpec}: the spec a user would write for it, for benchmarks that run the command line (which
 * reads a file). cold-check.bench.ts makes sure it reads back as mlpSpec.
 */
export function mlpYaml(inputScale = 1): string {
  const lines = [
    "name: mlp-1000",
    "description: generated for the benchmark",
    `input: { features: 256, scale: ${inputScale} }`,
    "training:",
    "  batch: 32",
    "  loss: { kind: mean-squared-error }",
    "  workers: 2",
    "  worker-gradients: average",
    "  accumulation-steps: 2",
    "  optimizer: { kind: adamw, learning-rate: { peak: 1.0e-3, end: 1.0e-5 }, warmup-steps: 10, betas: [0.9, 0.999], epsilon: 1.0e-8, weight-decay: 0 }",
    "  horizon: { steps: 1000, weight-growth: 1.1, final-loss: 0.5 }",
    "precision: { name: half, activations: binary16, weights: binary16, gradients: binary16, optimizer-states: binary32, master-weights: binary32, accumulate: binary32 }",
    "layers:",
  ];
  for (let i = 0; i < 500; i++) lines.push(`  - { type: dense, name: d${i}, width: 256, bias: true, init: he-normal }`, `  - { type: relu, name: a${i} }`);
  return lines.join("\n") + "\n";
}

