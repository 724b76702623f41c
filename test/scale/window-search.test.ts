// The window's searches (bounds, priority orders, per-tensor flush edges, pruned worst-tensor scans) must give
// exactly what the definition gives: every exponent of the range tried, every curve evaluated exactly. The
// reference below is that definition, written out directly; the curves are random monotone ones with valid bounds.
import * as fc from "fast-check";
import { describe, expect, it } from "vitest";
import { lossScaleWindow, lossScaleWindows, orderByKeys, type ScaledTensorCurves, type WindowOptions } from "../../src/scale/window.js";

const LOW = -12;
const HIGH = 12;
const OPTIONS = { riskBudget: 1e-4, flushTolerance: 1e-3, marginBinades: 2, lowestLog2: LOW, highestLog2: HIGH } as const;

// The window by its definition (src/scale/window.ts doc comments): the union bound of the exact risks within the
// budget, every exact share within the tolerance, the edge setters the first tensors with the largest exact value.
function directWindow(tensors: readonly ScaledTensorCurves[], o: WindowOptions) {
  const overflowOk = (k: number) => Math.min(1, tensors.reduce((sum, t) => sum + t.overflowRisk(k), 0)) <= o.riskBudget;
  const flushOk = (k: number) => tensors.every((t) => t.flushedEnergy(k) <= o.flushTolerance);
  let highest: number | null = null;
  for (let k = o.lowestLog2; k <= o.highestLog2 && overflowOk(k); k++) highest = k;
  let lowest: number | null = null;
  for (let k = o.highestLog2; k >= o.lowestLog2 && flushOk(k); k--) lowest = k;
  const firstLargest = (value: (t: ScaledTensorCurves) => number): string | null => {
    let best: ScaledTensorCurves | null = null;
    for (const t of tensors) if (best === null || value(t) > value(best)) best = t;
    return best?.id ?? null;
  };
  const upper =
    highest === null ? firstLargest((t) => t.overflowRisk(o.lowestLog2)) : highest < o.highestLog2 ? firstLargest((t) => t.overflowRisk(highest! + 1)) : null;
  const lower =
    lowest === null ? firstLargest((t) => t.flushedEnergy(o.highestLog2)) : lowest > o.lowestLog2 ? firstLargest((t) => t.flushedEnergy(lowest! - 1)) : null;
  return { lowestLog2: lowest, highestLog2: highest, upperEdgeSetBy: upper, lowerEdgeSetBy: lower };
}

// a window's edges and their setters, as directWindow gives them
function edgesOf(w: ReturnType<typeof lossScaleWindow>) {
  return { lowestLog2: w.lowestLog2, highestLog2: w.highestLog2, upperEdgeSetBy: w.upperEdgeSetBy, lowerEdgeSetBy: w.lowerEdgeSetBy };
}

// one search serving a set and its subsets: the whole set's window, then each subset's (`asides` pick tensors to set
// aside by index), each as directWindow gives it
function expectSubsetsAsDefined(tensors: readonly ScaledTensorCurves[], asides: readonly (readonly number[])[]): void {
  const windowOf = lossScaleWindows(tensors, OPTIONS);
  expect(edgesOf(windowOf())).toEqual(directWindow(tensors, OPTIONS));
  for (const aside of asides) {
    const ids = new Set(aside.map((i) => tensors[i % tensors.length]!.id));
    const rest = tensors.filter((t) => !ids.has(t.id));
    const w = windowOf(ids);
    if (rest.length === 0) continue;
    expect(edgesOf(w)).toEqual(directWindow(rest, OPTIONS));
  }
}

// an empty window's edge setters on one side set aside one at a time, as the remedies ask (src/scale/recommend.ts
// rankRemedies): each held set's window as directWindow gives it (`whole`: and equal to a search of its own in full)
function expectHeldSetsAsDefined(tensors: readonly ScaledTensorCurves[], edge: "lower" | "upper", whole = false): void {
  const windowOf = lossScaleWindows(tensors, OPTIONS, undefined, true);
  let current = windowOf();
  expect(edgesOf(current)).toEqual(directWindow(tensors, OPTIONS));
  const held = new Set<string>();
  for (let i = 0; i < 6 && current.empty; i++) {
    const setter = edge === "lower" ? current.lowerEdgeSetBy : current.upperEdgeSetBy;
    if (setter === null) break;
    held.add(setter);
    const rest = tensors.filter((t) => !held.has(t.id));
    if (rest.length === 0) break;
    current = windowOf(new Set(held));
    expect(edgesOf(current)).toEqual(directWindow(rest, OPTIONS));
    if (whole) expect(current).toEqual(lossScaleWindow(rest, OPTIONS));
  }
}

const logistic = (x: number) => 1 / (1 + Math.exp(-x));

interface Shape {
  overflowCentre: number;
  overflowSlope: number;
  flushCentre: number;
  flushSlope: number;
  slack: number;
  guess: number | null;
  bounds: boolean;
  copy: boolean;
}

// Smooth monotone curves (logistic in k; tiny values far from the centre), with bounds widened around the exact value.
function curves(shapes: readonly Shape[]): ScaledTensorCurves[] {
  const out: ScaledTensorCurves[] = [];
  shapes.forEach((s, i) => {
    const overflowRisk = (k: number) => logistic((k - s.overflowCentre) * s.overflowSlope);
    const flushedEnergy = (k: number) => logistic((s.flushCentre - k) * s.flushSlope);
    const widen = (v: number): readonly [number, number] => [v * (1 - s.slack), Math.min(1, v * (1 + 1e3 * s.slack) + s.slack)];
    const t: ScaledTensorCurves = {
      id: `t${i}`,
      overflowRisk,
      flushedEnergy,
      ...(s.bounds ? { overflowRiskBounds: (k: number) => widen(overflowRisk(k)), flushedEnergyBounds: (k: number) => widen(flushedEnergy(k)) } : {}),
      ...(s.guess === null ? {} : { edgeGuessesLog2: { overflow: s.overflowCentre + s.guess, flush: s.flushCentre - s.guess } }),
    };
    out.push(t);
    // an identical tensor under another name: the first of the two must set an edge, as the definition says
    if (s.copy) out.push({ ...t, id: `t${i}-copy` });
  });
  return out;
}

const shape: fc.Arbitrary<Shape> = fc.record({
  overflowCentre: fc.double({ min: -20, max: 20, noNaN: true }),
  overflowSlope: fc.double({ min: 0.3, max: 8, noNaN: true }),
  flushCentre: fc.double({ min: -20, max: 20, noNaN: true }),
  flushSlope: fc.double({ min: 0.3, max: 8, noNaN: true }),
  slack: fc.constantFrom(0, 1e-6, 1e-2, 0.5, 1),
  guess: fc.option(fc.integer({ min: -15, max: 15 }), { nil: null }),
  bounds: fc.boolean(),
  copy: fc.boolean(),
});

describe("lossScaleWindow searches", () => {
  it("give the window of the definition (edges and the tensors that set them)", () => {
    fc.assert(
      fc.property(fc.array(shape, { minLength: 1, maxLength: 12 }), (shapes) => {
        const tensors = curves(shapes);
        const w = lossScaleWindow(tensors, OPTIONS);
        const d = directWindow(tensors, OPTIONS);
        expect(edgesOf(w)).toEqual(d);
      }),
      { numRuns: 400 },
    );
  });

  it("give each subset's window of the definition when one search serves a set and its subsets", () => {
    fc.assert(
      fc.property(fc.array(shape, { minLength: 1, maxLength: 10 }), fc.array(fc.array(fc.nat(12), { maxLength: 4 }), { maxLength: 4 }), (shapes, asides) => {
        const tensors = curves(shapes);
        const windowOf = lossScaleWindows(tensors, OPTIONS);
        // the whole set first (as the loss-scale answer asks), then subsets, each search reusing the earlier ones
        const whole = windowOf();
        expect(whole).toEqual(lossScaleWindow(tensors, OPTIONS));
        for (const aside of asides) {
          const ids = new Set(aside.map((i) => tensors[i % tensors.length]!.id));
          const rest = tensors.filter((t) => !ids.has(t.id));
          const w = windowOf(ids);
          if (rest.length === 0) continue;
          const d = directWindow(rest, OPTIONS);
          expect(edgesOf(w)).toEqual(d);
          expect(w).toEqual(lossScaleWindow(rest, OPTIONS));
        }
      }),
      { numRuns: 300 },
    );
  });

  it("give each held set's window of the definition for an empty window, its setters set aside one at a time", () => {
    // as the loss-scale answer's remedies ask (src/scale/recommend.ts rankRemedies): an empty window's edge setters set
    // aside in turn, so that each later search scans a subset of the tensors an earlier scan at the same exponent saw
    // (its setter found from that scan's bounds: the first tensor with the largest exact value all the same)
    const emptyShape = shape.map((s) => ({ ...s, overflowCentre: s.overflowCentre / 4 - 6, flushCentre: s.flushCentre / 4 + 6 }));
    fc.assert(
      fc.property(fc.array(emptyShape, { minLength: 2, maxLength: 10 }), fc.constantFrom("lower" as const, "upper" as const), (shapes, edge) => {
        const tensors = curves(shapes);
        expectHeldSetsAsDefined(tensors, edge, true);
      }),
      { numRuns: 300 },
    );
  });

  it("gives the definition's window where tighter flush bounds are asked before the cheap ones, for a set and its subsets", () => {
    // flushedEnergyUpperFirst: the searches then ask flushedEnergyUpper first; it is a valid bound however loose, so the
    // window, its edges and their setters are the definition's
    fc.assert(
      fc.property(
        fc.array(fc.tuple(shape, fc.constantFrom(0, 1e-9, 0.2, 3), fc.boolean()), { minLength: 1, maxLength: 10 }),
        fc.array(fc.array(fc.nat(12), { maxLength: 3 }), { maxLength: 3 }),
        (drawn, asides) => {
          const tensors = curves(drawn.map(([s]) => ({ ...s, copy: false }))).map((t, i) => {
            const [, loose, first] = drawn[i]!;
            return { ...t, flushedEnergyUpper: (k: number) => Math.min(1, t.flushedEnergy(k) * (1 + loose) + loose * 1e-4), flushedEnergyUpperFirst: first };
          });
          expectSubsetsAsDefined(tensors, asides);
        },
      ),
      { numRuns: 300 },
    );
  });

  it("gives the definition's window for many alike tensors, where every bound is loose", () => {
    // a deep stack: hundreds of tensors whose curves differ by a hair, bounds [0, 1] around each
    const tensors: ScaledTensorCurves[] = Array.from({ length: 300 }, (_, i) => {
      const overflowRisk = (k: number) => logistic((k - 3 - i * 1e-3) * 2);
      const flushedEnergy = (k: number) => logistic((-4 + i * 1e-3 - k) * 2);
      return {
        id: `layer${i}`,
        overflowRisk,
        flushedEnergy,
        overflowRiskBounds: (k: number) => [0, Math.min(1, overflowRisk(k) * 1e6)] as const,
        flushedEnergyBounds: (k: number) => [flushedEnergy(k) / 2, 1] as const,
        edgeGuessesLog2: { overflow: 0, flush: 0 },
      };
    });
    const w = lossScaleWindow(tensors, OPTIONS);
    const d = directWindow(tensors, OPTIONS);
    expect(edgesOf(w)).toEqual(d);
    // the most flush-prone tensor is the last one (its curve sits furthest right), the most overflow-prone the first
    expect([w.lowerEdgeSetBy, w.upperEdgeSetBy]).toEqual(["layer299", "layer0"]);
  });

  it("gives the definition's window where rougher overflow bounds come first, for sets of every size (the union bound's first few tensors, or all of them)", () => {
    // rough bounds on either side of the exact risk, as loose as `slack` makes them, for stacks small and deep, so that
    // the union bound is decided by a few tensors' lower ends far above the edge and by the whole narrowing near it
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 600 }),
        fc.double({ min: -8, max: 8, noNaN: true }),
        fc.constantFrom(0, 1e-3, 0.3, 0.9),
        fc.integer({ min: -6, max: 10 }),
        (count, centre, slack, guess) => {
          const tensors: ScaledTensorCurves[] = Array.from({ length: count }, (_, i) => {
            const overflowRisk = (k: number) => logistic((k - centre - (i % 7) * 0.1) * 1.5);
            const flushedEnergy = (k: number) => logistic((centre - 6 - k) * 1.5);
            return {
              id: `layer${i}`,
              overflowRisk,
              flushedEnergy,
              overflowRiskBounds: (k: number) => [0, Math.min(1, overflowRisk(k) * 1e3 + 1e-3)] as const,
              overflowRiskRough: (k: number) => Math.min(1, overflowRisk(k) * (1 + 10 * slack) + slack * 1e-6),
              overflowRiskRoughLower: (k: number) => overflowRisk(k) * (1 - slack),
              edgeGuessesLog2: { overflow: Math.round(centre) + guess, flush: 0 },
            };
          });
          const w = lossScaleWindow(tensors, OPTIONS);
          const d = directWindow(tensors, OPTIONS);
          expect(edgesOf(w)).toEqual(d);
        },
      ),
      { numRuns: 60 },
    );
  });
});

describe("lossScaleWindow searches with far bounds", () => {
  // overflowRiskFarInto: a bound B on the risk at every exponent up to K (the curve's sup there, widened), which the
  // searches take in place of the tensor's bounds at those exponents; B small or not, K anywhere (or none), the window,
  // its edges and their setters are the definition's, for a set, its subsets and an empty window's held sets
  const far = fc.record({ to: fc.option(fc.integer({ min: -14, max: 14 }), { nil: null }), widen: fc.constantFrom(0, 1e-9, 0.5, 1e3) });
  const withFar = (tensors: ScaledTensorCurves[], fars: readonly { to: number | null; widen: number }[]): ScaledTensorCurves[] =>
    tensors.map((t, i) => {
      const f = fars[i % fars.length]!;
      if (f.to === null) return { ...t, overflowRiskFarInto: () => false };
      // the risk rises with k: its value at K bounds every exponent below
      const bound = Math.min(1, t.overflowRisk(f.to) * (1 + f.widen) + f.widen * 1e-20);
      return {
        ...t,
        overflowRiskFarInto: (into: Float64Array) => {
          into[0] = f.to!;
          into[1] = bound;
          return true;
        },
      };
    });

  it("give the window of the definition for a set and its subsets", () => {
    fc.assert(
      fc.property(
        fc.array(shape, { minLength: 1, maxLength: 10 }),
        fc.array(far, { minLength: 1, maxLength: 4 }),
        fc.array(fc.array(fc.nat(12), { maxLength: 4 }), { maxLength: 3 }),
        (shapes, fars, asides) => {
          const tensors = withFar(curves(shapes), fars);
          expectSubsetsAsDefined(tensors, asides);
        },
      ),
      { numRuns: 300 },
    );
  });

  it("give each held set's window of the definition for an empty window, and for deep stacks with rough bounds", () => {
    const emptyShape = shape.map((s) => ({ ...s, overflowCentre: s.overflowCentre / 4 - 6, flushCentre: s.flushCentre / 4 + 6 }));
    fc.assert(
      fc.property(fc.array(emptyShape, { minLength: 2, maxLength: 10 }), fc.array(far, { minLength: 1, maxLength: 3 }), fc.constantFrom("lower" as const, "upper" as const), (shapes, fars, edge) => {
        const tensors = withFar(curves(shapes), fars);
        expectHeldSetsAsDefined(tensors, edge);
      }),
      { numRuns: 200 },
    );
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 400 }), fc.double({ min: -8, max: 8, noNaN: true }), fc.constantFrom(0, 0.3), far, (count, centre, slack, f) => {
        const tensors: ScaledTensorCurves[] = Array.from({ length: count }, (_, i) => {
          // most tensors far below the rest (their risk tiny), as at the edges of a stack of alike layers
          const shift = i % 5 === 0 ? 0 : 12;
          const overflowRisk = (k: number) => logistic((k - centre - shift - (i % 7) * 0.1) * 1.5);
          return {
            id: `layer${i}`,
            overflowRisk,
            flushedEnergy: (k: number) => logistic((centre - 6 - k) * 1.5),
            overflowRiskBounds: (k: number) => [0, Math.min(1, overflowRisk(k) * 1e3 + 1e-3)] as const,
            overflowRiskRough: (k: number) => Math.min(1, overflowRisk(k) * (1 + 10 * slack) + slack * 1e-6),
            overflowRiskRoughLower: (k: number) => overflowRisk(k) * (1 - slack),
            edgeGuessesLog2: { overflow: Math.round(centre), flush: 0 },
          };
        });
        const withBounds = withFar(tensors, [f, { to: f.to === null ? null : f.to - 3, widen: 0 }]);
        expect(edgesOf(lossScaleWindow(withBounds, OPTIONS))).toEqual(directWindow(tensors, OPTIONS));
      }),
      { numRuns: 60 },
    );
  });
});

describe("lossScaleWindow searches with once-per-tensor flush bounds", () => {
  it("give the window of the definition for a set and its subsets, the bound's exponent at or above the share's own", () => {
    // flushedEnergyWithinFrom: an exponent from which the share is within the tolerance (the curve's own edge, moved up
    // by a few binades or none at all): the flush edge's scan and the setter's take such a tensor as tolerated there
    fc.assert(
      fc.property(
        fc.array(fc.tuple(shape, fc.option(fc.integer({ min: 0, max: 6 }), { nil: null })), { minLength: 1, maxLength: 10 }),
        fc.array(fc.array(fc.nat(12), { maxLength: 4 }), { maxLength: 3 }),
        (drawn, asides) => {
          const tensors = curves(drawn.map(([s]) => ({ ...s, copy: false }))).map((t, i) => {
            const up = drawn[i]![1];
            // the share falls with k: its own edge is the first exponent within the tolerance, from the top of the range down
            let own = Infinity;
            for (let k = HIGH + 20; k >= LOW - 20 && t.flushedEnergy(k) <= OPTIONS.flushTolerance; k--) own = k;
            return { ...t, flushedEnergyWithinFrom: () => (up === null ? Infinity : own + up) };
          });
          expectSubsetsAsDefined(tensors, asides);
        },
      ),
      { numRuns: 300 },
    );
  });
});

// The searches visit tensors by a priority order: by key, ties by index. The reference is a plain comparison sort
// (common practice); the order packs whole keys over a short range into a counting sort, others take the sort itself.
describe("orderByKeys", () => {
  // the keys as the searches take them from their tensors (WindowSearch: a tensor without guesses has keys 0)
  const priorityOrder = (tensors: readonly ScaledTensorCurves[], key: (t: ScaledTensorCurves) => number) => orderByKeys(Float64Array.from(tensors, key));
  const curvesWith = (keys: readonly (number | null)[]): ScaledTensorCurves[] =>
    keys.map((k, i) => ({
      id: `t${i}`,
      overflowRisk: () => 0,
      flushedEnergy: () => 0,
      ...(k === null ? {} : { edgeGuessesLog2: { overflow: k, flush: -k } }),
    }));
  const reference = (keys: readonly number[]) => Array.from(keys.keys()).sort((a, b) => keys[a]! - keys[b]! || a - b);
  const key = (t: ScaledTensorCurves) => t.edgeGuessesLog2?.overflow ?? 0;

  it("orders by key, ties by index, for whole keys near together or far apart, fractions and missing guesses", () => {
    const keyArb = fc.oneof(
      fc.integer({ min: -60, max: 60 }),
      fc.integer({ min: -(2 ** 40), max: 2 ** 40 }),
      fc.double({ min: -100, max: 100, noNaN: true }),
      fc.constant(null),
    );
    fc.assert(
      fc.property(fc.array(keyArb, { maxLength: 80 }), (raw) => {
        const tensors = curvesWith(raw);
        expect(priorityOrder(tensors, key)).toEqual(reference(tensors.map(key)));
        expect(priorityOrder(tensors, (t) => -(t.edgeGuessesLog2?.flush ?? 0))).toEqual(reference(tensors.map((t) => -(t.edgeGuessesLog2?.flush ?? 0))));
      }),
    );
  });

  it("handles no tensors and infinite keys", () => {
    expect(priorityOrder([], key)).toEqual([]);
    const tensors = curvesWith([3, -Infinity, 3, Infinity, -2]);
    expect(priorityOrder(tensors, key)).toEqual([1, 4, 0, 2, 3]);
  });
});
