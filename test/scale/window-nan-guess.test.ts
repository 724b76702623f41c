// A tensor's edge guesses can be NaN when its curves could not be carried in binary64 (a spec with
// `target-scale: 1e160` once made `check` search forever from such a guess). The window search must end anyway:
// the searches' predicates below throw when asked at an exponent that is not an integer (where the old search went) or
// past a bound on their calls, so a search that does not end fails instead of hanging.
import { describe, expect, it } from "vitest";
import { firstTrue, lastTrue, lossScaleWindow, type ScaledTensorCurves } from "../../src/scale/window.js";

// binary16 limits (IEEE 754-2019 Table 3.5 parameters): largest finite 65504, smallest subnormal 2^-24
const MAX = 65504;
const TINY = 2 ** -24;
/** far more evaluations than a gallop and bisection over the default range 2^-40..2^64 (105 exponents) need */
const CALL_BOUND = 10_000;

function bounded(id: string, largest: number, smallest: number, guesses: { overflow: number; flush: number } | undefined): { curves: ScaledTensorCurves; calls: () => number } {
  let calls = 0;
  const count = (k: number): void => {
    if (!Number.isInteger(k)) throw new Error(`the window search asked at exponent ${k}`);
    calls += 1;
    if (calls > CALL_BOUND) throw new Error(`the window search did not end after ${CALL_BOUND} evaluations`);
  };
  const curves: ScaledTensorCurves = {
    id,
    overflowRisk: (k) => (count(k), 2 ** k * largest > MAX ? 1 : 0),
    flushedEnergy: (k) => (count(k), 2 ** k * smallest < TINY ? 1 : 0),
    ...(guesses !== undefined ? { edgeGuessesLog2: guesses } : {}),
  };
  return { curves, calls: () => calls };
}

describe("lossScaleWindow with guesses that are not numbers", () => {
  it.each([
    ["a flush guess", { overflow: 14, flush: Number.NaN }],
    ["an overflow guess", { overflow: Number.NaN, flush: 6 }],
    ["both guesses", { overflow: Number.NaN, flush: Number.NaN }],
  ])("ends with the same window as without guesses, for NaN as %s", (_name, guesses) => {
    // by hand, as in window.test.ts: largest 3 → k ≤ floor(log2(65504/3)) = 14; smallest 2^-30 → k ≥ 6
    const plain = lossScaleWindow([bounded("g", 3, 2 ** -30, undefined).curves]);
    const nan = bounded("g", 3, 2 ** -30, guesses);
    const w = lossScaleWindow([nan.curves]);
    expect([w.lowestLog2, w.highestLog2, w.pickLog2]).toEqual([6, 14, plain.pickLog2]);
    // a gallop and a bisection: a few evaluations per edge and exponent bit, far from the bound
    expect(nan.calls()).toBeLessThan(200);
  });
});

describe("the edge searches from a start that is not a number", () => {
  /** pred true up to `edge` (lastTrue's shape) or from it (firstTrue's), throwing past CALL_BOUND calls or at a non-integer */
  function counted(test: (k: number) => boolean): { pred: (k: number) => boolean; calls: () => number } {
    let calls = 0;
    return {
      pred: (k) => {
        if (!Number.isInteger(k)) throw new Error(`the search asked at ${k}`);
        if (++calls > CALL_BOUND) throw new Error(`the search did not end after ${CALL_BOUND} tests`);
        return test(k);
      },
      calls: () => calls,
    };
  }

  it.each([-40, -3, 0, 17, 64])("lastTrue finds the edge %i of [-40, 64] from NaN in a bounded number of tests", (edge) => {
    const { pred, calls } = counted((k) => k <= edge);
    expect(lastTrue(-40, 64, pred, Number.NaN)).toBe(edge);
    // the gallop and bisection over 105 exponents: at most 2·log2(105) + a few tests
    expect(calls()).toBeLessThanOrEqual(20);
  });

  it.each([-40, -3, 0, 17, 64])("firstTrue finds the edge %i of [-40, 64] from NaN in a bounded number of tests", (edge) => {
    const { pred, calls } = counted((k) => k >= edge);
    // + 0: the mirror image gives −0 for the edge 0
    expect((firstTrue(-40, 64, pred, Number.NaN) ?? Number.NaN) + 0).toBe(edge);
    expect(calls()).toBeLessThanOrEqual(20);
  });

  it("lastTrue with steps of one below a false start finds every edge a scan finds, answering true once when the edge is within those steps", () => {
    // the reference is a plain scan of [lo, hi] for the last k with k ≤ edge
    for (const start of [-40, -12, 0, 9, 64, Number.NaN]) {
      for (const edge of [-41, -40, -13, -5, 0, 1, 8, 30, 64]) {
        let scan: number | null = null;
        for (let k = -40; k <= 64; k++) if (k <= edge) scan = k;
        let trues = 0;
        const { pred } = counted((k) => {
          const t = k <= edge;
          if (t) trues++;
          return t;
        });
        expect(lastTrue(-40, 64, pred, start, 8)).toBe(scan);
        const from = Number.isNaN(start) ? 12 : start;
        if (from > edge && from - edge <= 9 && edge >= -40) expect(trues).toBe(1);
      }
    }
  });

  it("lastTrue and firstTrue still say null when no exponent qualifies", () => {
    expect(lastTrue(-40, 64, counted(() => false).pred, Number.NaN)).toBeNull();
    expect(firstTrue(-40, 64, counted(() => false).pred, Number.NaN)).toBeNull();
  });
});
