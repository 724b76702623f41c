import { check } from "../../src/check.js";
import { runSimulation } from "../../src/simulate/engine.js";
import { parseSpec } from "../../src/spec/index.js";

/**
 * An invented regressor under a mean-squared-error loss with the layers given (YAML flow maps, one per line; `blocks`
 * the YAML of a blocks section when they use one), gradients held in e5m2 unscaled (plan `eight-bit-gradients`) and
 * everything else in binary32.
 */
export function eightBitRegressor(name: string, batch: number, layers: readonly string[], options: { features?: number; targetScale?: number; blocks?: string } = {}): string {
  return `name: ${name}
input: { features: ${options.features ?? 128}, scale: 1.0 }
training:
  batch: ${batch}
  loss: { kind: mean-squared-error, reduction: mean, target-scale: ${options.targetScale ?? "1.0"} }
  optimizer: { kind: sgd, learning-rate: 0.01 }
precision:
  name: eight-bit-gradients
  activations: binary32
  weights: binary32
  gradients: e5m2
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
  scaling: none
${options.blocks ?? ""}layers:
${layers.map((layer) => `  - ${layer}`).join("\n")}
`;
}

/**
 * An invented regressor with two hidden layers of width 256 under the activations given (YAML flow maps, named
 * `<kind>-1` and `<kind>-2` by the caller), a wide output (so the loss gradient stays close to Gaussian and what is
 * measured at the activations' inputs is their derivative's law), batch 256 (eightBitRegressor).
 */
export function twoLayerRegressor(name: string, hidden: readonly [string, string]): string {
  return eightBitRegressor(name, 256, [
    "{ type: dense, name: wide-1, width: 256, init: he-normal }",
    hidden[0],
    "{ type: dense, name: wide-2, width: 256, init: he-normal }",
    hidden[1],
    "{ type: dense, name: out, width: 128, init: glorot-normal }",
  ]);
}

/** One tensor's e5m2 flushed share at one loss scale: check's prediction at the start and the simulation's median. */
export interface FlushedPair {
  id: string;
  lossScale: number;
  predicted: number;
  measured: number;
}

/**
 * The e5m2 flushed share of the gradients at both hidden layers' inputs (`wide-1`, `wide-2` activation gradients),
 * as check predicts it and as the float64 simulation measures it (seed 1, 3 draws), at each loss scale.
 */
export function flushedAgainstSimulation(yaml: string, file: string, lossScales: readonly number[]): FlushedPair[] {
  const parsed = parseSpec(yaml, file);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  const pairs: FlushedPair[] = [];
  for (const lossScale of lossScales) {
    const answer = check(parsed.spec, { lossScale, plan: "eight-bit-gradients" });
    const measured = runSimulation(parsed.spec, { seed: 1, draws: 3, lossScale });
    for (const id of ["wide-1/activation-gradient", "wide-2/activation-gradient"]) {
      const risk = answer.tensors.find((t) => t.id === id)?.risks.find((r) => r.format === "e5m2");
      const flushed = measured.tensors.find((t) => t.id === id)?.median.counts.flushed;
      if (risk === undefined || flushed === undefined) throw new Error(`${id} not judged or not measured`);
      pairs.push({ id, lossScale, predicted: risk.start.flushedFraction, measured: flushed });
    }
  }
  return pairs;
}
