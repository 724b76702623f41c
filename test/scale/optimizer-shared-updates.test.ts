/**
 * The optimizer check shares one update list between weights whose laws and updates' laws are equal
 * (src/scale/optimizer.ts, updatesOf). The reference here is the same check run on one weight and its gradient alone,
 * where nothing is shared: every weight must get exactly the numbers its own assessment gives (Kingma & Ba 2015,
 * Algorithm 1, for the update rule both follow).
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import type { Prediction, TensorPrediction } from "../../src/magnitude/types.js";
import { checkOptimizer } from "../../src/scale/optimizer.js";
import type { LayerSpec, NetworkSpec, OptimizerSpec } from "../../src/spec/types.js";
import { act, dense, features, glorot, he, makeSpec, normalInit } from "../magnitude/build-spec.js";

function predictOf(spec: NetworkSpec): Prediction {
  const result = buildGraph(spec);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return predict(result.graph, spec);
}

const INITS = [he, glorot, normalInit(0.02), normalInit(1e-4)];

function network(widths: number[], inits: number[], biases: boolean[]): LayerSpec[] {
  const layers: LayerSpec[] = [];
  widths.forEach((width, i) => {
    layers.push(dense(`d${i}`, width, INITS[(inits[i] ?? 0) % INITS.length], biases[i] ?? true));
    layers.push(act(`a${i}`));
  });
  layers.push(dense("head", 4, he, true));
  return layers;
}

// the prediction cut to one weight and its gradient: the check then meets that weight alone
function alone(prediction: Prediction, weight: TensorPrediction, gradient: TensorPrediction): Prediction {
  return { ...prediction, tensors: [weight, gradient], hazards: [] };
}

function assessEachAlone(spec: NetworkSpec): void {
  const prediction = predictOf(spec);
  const { optimizer } = spec.training;
  const all = checkOptimizer(optimizer, spec.precision, prediction, spec.training.horizon.steps);
  const byId = new Map(prediction.tensors.map((t) => [t.id, t]));
  expect(all.tensors.length).toBeGreaterThan(0);
  for (const t of all.tensors) {
    const own = checkOptimizer(optimizer, spec.precision, alone(prediction, byId.get(t.weight)!, byId.get(t.gradient)!), spec.training.horizon.steps);
    expect(own.tensors).toHaveLength(1);
    expect(t.updates).toEqual(own.tensors[0]!.updates);
  }
}

const optimizers: fc.Arbitrary<OptimizerSpec> = fc.record({
  kind: fc.constantFrom("adam" as const, "adamw" as const, "sgd" as const, "momentum" as const),
  learningRate: fc.record({ peak: fc.constantFrom(1e-2, 1e-3, 3e-5), end: fc.constantFrom(1e-5, 0) }),
  warmupSteps: fc.constantFrom(0, 100),
  momentum: fc.constant(0.9),
  betas: fc.constant([0.9, 0.999] as [number, number]),
  // from negligible beside the gradients to larger than most of them (the damped and scaled updates)
  epsilon: fc.constantFrom(1e-8, 1e-3, 1),
  weightDecay: fc.constantFrom(0, 0.01),
});

describe("update lists shared between weights of equal laws", () => {
  it("give every weight the numbers its own assessment gives (random networks and optimizers)", () => {
    fc.assert(
      fc.property(
        fc.array(fc.constantFrom(16, 64, 64, 128), { minLength: 2, maxLength: 5 }),
        fc.array(fc.nat(3), { minLength: 5, maxLength: 5 }),
        fc.array(fc.boolean(), { minLength: 5, maxLength: 5 }),
        optimizers,
        fc.constantFrom(1, 1.5),
        (widths, inits, biases, optimizer, growth) => {
          const spec = makeSpec(network(widths, inits, biases), {
            input: features(32),
            training: { optimizer, horizon: { steps: 1000, weightGrowth: growth, finalLoss: 0.5 } },
          });
          assessEachAlone(spec);
        },
      ),
      { numRuns: 25 },
    );
  });

  it("share a list only where the numbers are the same: layers of one width and initialisation", () => {
    const spec = makeSpec(network([64, 64, 64, 16], [0, 0, 0, 0], [true, true, true, true]), { input: features(64) });
    const prediction = predictOf(spec);
    const check = checkOptimizer(spec.training.optimizer, spec.precision, prediction, 1000);
    const list = (id: string) => check.tensors.find((t) => t.weight === id)!.updates;
    // d1 and d2 map 64 to 64 under He: equal weight laws, Adam's updates set by the learning rate
    expect(list("d2/weight")).toBe(list("d1/weight"));
    // d3 maps 64 to 16, d0 takes the 64 inputs: d3's weights have d1's law too (He by fan-in), the head's do not
    expect(list("head/weight")).not.toBe(list("d1/weight"));
    expect(list("head/weight")).not.toEqual(list("d1/weight"));
    assessEachAlone(spec);
  });
});
