/**
 * The prediction's walk hands the dense, convolution and pointwise rules records to fill in place of new objects
 * (OpContext.ruleRecords, src/ops/common.ts), and some rules read their numbers through scratch arrays
 * (pairCorrelationsInto, transientMoments) in place of functions that return them. Each is a copy of the new-object or
 * function path, kept for speed: these hold the copies to those paths' very numbers, bit for bit. The numbers themselves
 * are checked against their sources elsewhere (test/ops/correlation.test.ts, test/numeric/activations.test.ts, the
 * simulations of test/simulate).
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import type { GraphLayer } from "../../src/graph/types.js";
import { activationMoments } from "../../src/numeric/activations.js";
import { transientMoments } from "../../src/ops/activation/moments.js";
import { activationRule } from "../../src/ops/activation/analytic.js";
import { crossCorrelationOf, pairCorrelationsInto, positionCorrelationOf, ruleRecords, sampleCorrelationOf } from "../../src/ops/common.js";
import { denseRule } from "../../src/ops/dense/analytic.js";
import type { Gradient, OpContext, Signal } from "../../src/ops/types.js";
import { act, dense, features, he, makeSpec } from "../magnitude/build-spec.js";
import { correlation, moment } from "../helpers/rule-arbitraries.js";

function layers(positions: number): GraphLayer[] {
  const built = buildGraph(makeSpec([dense("d", 8, he, true), act("a", "relu")], { input: features(16, positions) }));
  if (!built.ok) throw new Error(built.issues.map((i) => i.message).join("; "));
  return built.graph.layers;
}


/** A rule's result as plain data: its hazards' and moments' numbers, read before the next call writes the records. */
function plain(value: unknown): unknown {
  return JSON.parse(JSON.stringify(value, (_key, v: unknown) => (typeof v === "function" ? "(text)" : v)));
}

describe("the rules' records", () => {
  it("give the dense and pointwise rules' own numbers, forward and backward, with and without a ledger", () => {
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
        fc.boolean(),
        (positions, batch, xq, dq, xShared, xPosition, dShared, dCross, ledger) => {
          const [d, a] = layers(positions) as [GraphLayer, GraphLayer];
          const fresh: OpContext = { batch, phase: "start", ledger, details: ledger, variance: (w) => w.variance, moments: activationMoments };
          const recorded: OpContext = { ...fresh, ruleRecords: ruleRecords() };
          const x: Signal = { q: xq, mean: 0, zeroFraction: 0, shape: "gaussian", logVar: 0.01, gaussian: true };
          if (xShared !== undefined) x.shared = Math.abs(xShared) * xq;
          if (xPosition !== undefined) x.positionCorrelation = xPosition;
          const output: Gradient = { q: dq, zeroFraction: 0, shape: "gaussian", logVar: 0.02 };
          if (dShared !== undefined) output.shared = dShared * dq;
          if (dCross !== undefined) output.crossCorrelation = dCross;
          const forward = plain(denseRule.forward(fresh, d, x, {}));
          const forwardRecorded = denseRule.forward(recorded, d, x, {});
          expect(plain(forwardRecorded)).toEqual(forward);
          const stash = forwardRecorded.stash;
          const activated = activationRule.forward(fresh, a, stash.output, {});
          expect(plain(activationRule.forward(recorded, a, stash.output, {}))).toEqual(plain(activated));
          expect(plain(activationRule.backward(recorded, a, activated.stash, { ...output }, {}))).toEqual(plain(activationRule.backward(fresh, a, activated.stash, { ...output }, {})));
          expect(plain(denseRule.backward(recorded, d, stash, { ...output }, {}))).toEqual(plain(denseRule.backward(fresh, d, stash, { ...output }, {})));
        },
      ),
      { numRuns: 200 },
    );
  });

  it("are written over by the next call: a result is read before the rule is called again", () => {
    const [d] = layers(1) as [GraphLayer];
    const ctx: OpContext = { batch: 4, phase: "start", ledger: false, details: false, variance: (w) => w.variance, moments: activationMoments, ruleRecords: ruleRecords() };
    const signal = (q: number): Signal => ({ q, mean: 0, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true });
    const first = denseRule.forward(ctx, d, signal(1), {});
    const firstQ = first.hazards[0]!.input.q;
    const second = denseRule.forward(ctx, d, signal(4), {});
    expect(second).toBe(first);
    expect(second.hazards[0]!.input.q).toBe(4 * firstQ);
  });
});

describe("the scratch readers", () => {
  it("pairCorrelationsInto gives sampleCorrelationOf's, positionCorrelationOf's and crossCorrelationOf's numbers", () => {
    fc.assert(
      fc.property(moment, correlation, correlation, correlation, fc.integer({ min: -16, max: 16 }).map((k) => k / 8), fc.boolean(), (q, shared, position, cross, mean, isSignal) => {
        const s: Signal | Gradient = isSignal ? { q, mean, zeroFraction: 0, shape: "gaussian", logVar: 0, gaussian: true } : { q, zeroFraction: 0, shape: "gaussian", logVar: 0 };
        if (shared !== undefined) s.shared = shared * q;
        if (position !== undefined) s.positionCorrelation = position;
        if (cross !== undefined) (s as Gradient).crossCorrelation = cross;
        const out = new Float64Array(4);
        pairCorrelationsInto(s, out, 1);
        expect([out[1], out[2], out[3]]).toEqual([sampleCorrelationOf(s), positionCorrelationOf(s), crossCorrelationOf(s)]);
      }),
      { numRuns: 300 },
    );
  });

  it("transientMoments gives activationMoments' numbers", () => {
    for (const name of ["relu", "leaky-relu", "gelu", "tanh"] as const) {
      for (const q of [0, 1e-300, 0.3, 1, 7.5, 1e6]) expect({ ...transientMoments(name, q, 0.1) }).toEqual({ ...activationMoments(name, q, 0.1) });
    }
  });
});
