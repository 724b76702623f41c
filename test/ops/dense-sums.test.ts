/**
 * The dense rule's weight and bias sums (src/ops/dense/analytic.ts, linearBackward) inline gradientSum and
 * gradientBetween of src/ops/common.ts for speed: these hold the copy to the same numbers, bit for bit, for any pair
 * correlations of input and gradient. The sums themselves are N·q·(1 + (N − 1)·ρ̄), the variance of a sum of
 * correlated terms (common practice), checked against their closed form in test/ops/correlation.test.ts.
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import type { GraphLayer } from "../../src/graph/types.js";
import { activationMoments } from "../../src/numeric/activations.js";
import { gradientBetween, gradientSum } from "../../src/ops/common.js";
import { linearBackward } from "../../src/ops/dense/analytic.js";
import type { Gradient, OpContext, Signal } from "../../src/ops/types.js";
import { dense, features, he, makeSpec } from "../magnitude/build-spec.js";
import { correlation, moment } from "../helpers/rule-arbitraries.js";

function denseLayer(positions: number): GraphLayer {
  const built = buildGraph(makeSpec([dense("d", 8, he, true)], { input: features(16, positions) }));
  if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
  return built.graph.layers[0]!;
}


describe("the dense rule's weight and bias sums", () => {
  it("are gradientSum's and gradientBetween's numbers, bit for bit", () => {
    fc.assert(
      fc.property(
        fc.constantFrom(1, 4),
        fc.constantFrom(1, 3, 32),
        moment,
        moment,
        correlation,
        correlation,
        correlation,
        correlation,
        correlation,
        fc.integer({ min: 0, max: 16 }).map((k) => k / 8),
        (positions, batch, xq, dq, xShared, xPosition, dShared, dPosition, dCross, mean) => {
          const layer = denseLayer(positions);
          const ctx: OpContext = { batch, phase: "start", ledger: false, details: false, variance: (w) => w.variance, moments: activationMoments };
          const x: Signal = { q: xq, mean, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true };
          if (xShared !== undefined) x.shared = xShared * xq;
          if (xPosition !== undefined) x.positionCorrelation = xPosition;
          const output: Gradient = { q: dq, zeroFraction: 0, shape: "gaussian", logVar: 0 };
          if (dShared !== undefined) output.shared = dShared * dq;
          if (dPosition !== undefined) output.positionCorrelation = dPosition;
          if (dCross !== undefined) output.crossCorrelation = dCross;
          const w = layer.weights[0]!;
          const result = linearBackward(ctx, layer, { input: x, output: x }, output, w.variance * w.fanOut, "", w.fanIn, w.variance);
          const [weight, bias] = result.weightGradients;
          expect(weight!.q).toBe(gradientSum(batch, positions, output, x));
          expect(weight!.betweenQ).toBe(gradientBetween(batch, positions, output, x));
          expect(bias!.q).toBe(gradientSum(batch, positions, output));
          expect(bias!.betweenQ).toBe(gradientBetween(batch, positions, output));
        },
      ),
      { numRuns: 300 },
    );
  });
});
