import { bench, describe } from "vitest";
import { built } from "./built.js";
import type { ElementwiseActivationName } from "../src/numeric/index.js";

// the built library, loaded as a user's program loads it (bench/built.ts)
const { activationMoments, criticalWeightVariance, expectedMaxAbsNormal } = await built<typeof import("../src/numeric/index.js")>("numeric/index.js");

// Cost of the activation moments the magnitude engine asks for per layer. Every call below uses a q never
// seen before (the memo cannot help), as in a deep network whose q drifts from layer to layer.
// Baseline: relu, whose moments are closed forms. Read the ratio of the "mean" columns.
let counter = 0;
function thousandLayers(name: ElementwiseActivationName, low: number, high: number): number {
  let s = 0;
  for (let i = 0; i < 1000; i++) {
    counter++;
    const q = low + (high - low) * ((counter * 0.6180339887498949) % 1);
    s += activationMoments(name, q).second;
  }
  if (!Number.isFinite(s)) throw new Error(`${name}: non-finite moments`);
  return s;
}

describe("activationMoments, 1000 distinct q in [0.05, 4]", () => {
  for (const name of ["relu", "tanh", "gelu", "silu", "sigmoid", "softplus"] as const) {
    bench(name, () => {
      thousandLayers(name, 0.05, 4);
    });
  }
});

describe("solvers", () => {
  bench("criticalWeightVariance tanh, fresh bias variance", () => {
    counter++;
    const c = criticalWeightVariance("tanh", 0.05 + (counter % 1000) * 1e-6);
    if (!(c.weightVariance > 1)) throw new Error("no critical point");
  });
  bench("expectedMaxAbsNormal, fresh n near 1e9", () => {
    counter++;
    if (!(expectedMaxAbsNormal(1e9 + counter) > 6)) throw new Error("wrong maximum");
  });
});
