// Two ways the window's search reuses what it knows of the flushed shares (src/scale/window.ts):
// - flushedEnergyGrowth: a share known a few binades up bounds it here. For a law whose magnitudes' density does not
//   rise away from 0, E[x²; |x| ≤ 2t] = 8·∫₀ᵗ y²·f(2y) dy ≤ 8·E[x²; |x| ≤ t] (substitution x = 2y, f(2y) ≤ f(y));
//   the curves claim 9 for the Gaussian laws without a cap (8 and room for the integrals' own error), which the
//   integrals of src/risk/profile.ts must honour;
// - FlushLike: a second set of curves whose shares are the first's a whole number of binades apart (bfloat16's flush
//   bound is binary16's times 2^-101, IEEE 754-2019 / the bfloat16 format: 2^-126 against half of 2^-24) reads the
//   first search's tables.
// Either must leave every window exactly the definition's: every exponent tried, every curve evaluated exactly.
import * as fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { energyBelow, limitsFor } from "../../src/risk/index.js";
import { FLUSH_GROWTH_ABSOLUTE, lossScaleWindow, lossScaleWindows, type ScaledTensorCurves, type WindowOptions } from "../../src/scale/window.js";
import { boundedLossScaleCurves } from "../../src/scale/recommend.js";
import { gradientProfiles } from "../../src/risk/curve-parts.js";
import type { TensorPrediction } from "../../src/magnitude/types.js";
import type { PrecisionPlan } from "../../src/spec/types.js";

const OPTIONS = { riskBudget: 1e-4, flushTolerance: 1e-3, marginBinades: 2, lowestLog2: -12, highestLog2: 12 } as const;

// The window by its definition, as test/scale/window-search.test.ts writes it out.
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
// (a search by firstTrue may give −0 for 0: the same number in every sentence and in JSON)
const plus = (k: number | null) => (k === null ? null : k + 0);
const edges = (w: ReturnType<typeof directWindow>) => ({ lowestLog2: plus(w.lowestLog2), highestLog2: plus(w.highestLog2), upperEdgeSetBy: w.upperEdgeSetBy, lowerEdgeSetBy: w.lowerEdgeSetBy });

interface Shape {
  overflowCentre: number;
  flushCentre: number;
  slope: number;
  slack: number;
  guess: number;
}
const shape: fc.Arbitrary<Shape> = fc.record({
  overflowCentre: fc.double({ min: -14, max: 14, noNaN: true }),
  flushCentre: fc.double({ min: -14, max: 14, noNaN: true }),
  slope: fc.double({ min: 0.3, max: 4, noNaN: true }),
  slack: fc.constantFrom(0, 1e-6, 1e-2, 0.5),
  guess: fc.integer({ min: -6, max: 6 }),
});

// Logistic curves in k (a share falling as e^{−slope} per binade far from its centre, so it grows at most e^{slope} per
// binade down: the growth offered), with loose bounds; `shift` moves the flush curve by whole binades, as another
// format's flush bound does.
function curves(shapes: readonly Shape[], shift = 0, growth = true): ScaledTensorCurves[] {
  return shapes.map((s, i) => {
    const flushedEnergy = (k: number) => 1 / (1 + Math.exp((k + shift - s.flushCentre) * s.slope));
    const overflowRisk = (k: number) => 1 / (1 + Math.exp(-(k - s.overflowCentre) * s.slope));
    const widen = (v: number): readonly [number, number] => [v * (1 - s.slack), Math.min(1, v * (1 + 1e3 * s.slack) + s.slack)];
    return {
      id: `t${i}`,
      overflowRisk,
      flushedEnergy,
      overflowRiskBounds: (k: number) => widen(overflowRisk(k)),
      flushedEnergyBounds: (k: number) => widen(flushedEnergy(k)),
      edgeGuessesLog2: { overflow: Math.round(s.overflowCentre) + s.guess, flush: Math.round(s.flushCentre) - shift - s.guess },
      ...(growth ? { flushedEnergyGrowth: Math.exp(s.slope) * (1 + 1e-9) } : {}),
      // rougher bounds, between the cheap bounds and the value
      overflowRiskRough: (k: number) => Math.min(1, overflowRisk(k) * (1 + 10 * s.slack) + s.slack / 10),
      overflowRiskRoughLower: (k: number) => overflowRisk(k) * (1 - s.slack / 2),
    };
  });
}

describe("flushedEnergyGrowth", () => {
  it("holds for the Gaussian laws' computed shares (and a scale mixture's): a halved threshold keeps at most 9 times the share, plus 1e-12", () => {
    fc.assert(
      fc.property(
        fc.constantFrom("gaussian" as const, "half-gaussian" as const, "gaussian-mixture" as const),
        fc.double({ min: -30, max: 30, noNaN: true }),
        fc.double({ min: 0, max: 8.5, noNaN: true }),
        fc.constantFrom(1, 16, 256, 65_536, 1e8),
        fc.double({ min: 0, max: 0.9, noNaN: true }),
        fc.double({ min: -40, max: 10, noNaN: true }),
        (law, rmsLog2, log2Spread, elements, zeroFraction, below) => {
          const profile: MagnitudeProfile = { elements, zeroFraction, rms: 2 ** rmsLog2, log2Spread, shape: law };
          // the gradient behind a GELU: a scale mixture of Gaussians, whose density does not rise away from 0 either
          if (law === "gaussian-mixture") profile.mixture = { activation: "gelu", inputVariance: 2 };
          const t = 2 ** (rmsLog2 + below);
          expect(energyBelow(profile, t / 2)).toBeLessThanOrEqual(9 * energyBelow(profile, t) + FLUSH_GROWTH_ABSOLUTE);
        },
      ),
      { numRuns: 3000 },
    );
  });

  it("is offered only for the Gaussian laws (and scale mixtures) without a cap, where a cap's jump to 1 would break it", () => {
    const capped: MagnitudeProfile = { elements: 256, zeroFraction: 0, rms: 100, log2Spread: 0.5, shape: "bounded", bound: 2 };
    // at the cap the whole share lies below; half-way it is a small Gaussian share (a counterexample to any factor near 8)
    expect(energyBelow(capped, 2)).toBeGreaterThan(1000 * energyBelow(capped, 1));
    const tensor = (id: string, p: Partial<MagnitudeProfile>): TensorPrediction =>
      ({ id, role: "weight-gradient", start: { elements: 256, zeroFraction: 0, rms: 1, log2Spread: 0.5, shape: "gaussian", ...p }, end: { elements: 256, zeroFraction: 0, rms: 2, log2Spread: 0.7, shape: "gaussian", ...p } }) as TensorPrediction;
    const limits = limitsFor({ gradients: "binary16" } as PrecisionPlan, "binary16");
    const growths = boundedLossScaleCurves(
      [
        tensor("g", {}),
        tensor("h", { shape: "half-gaussian" }),
        tensor("b", { shape: "bounded", bound: 2 }),
        tensor("c", { bound: 4 }),
        tensor("u", { shape: "uniform" }),
        tensor("m", { shape: "gaussian-mixture", mixture: { activation: "silu", inputVariance: 1 } }),
      ],
      limits,
    ).map((c) => c.flushedEnergyGrowth);
    expect(growths).toEqual([9, 9, undefined, undefined, undefined, 9]);
  });

  it("leaves every window and subset window the definition's", () => {
    fc.assert(
      fc.property(fc.array(shape, { minLength: 1, maxLength: 10 }), fc.array(fc.array(fc.nat(12), { maxLength: 3 }), { maxLength: 3 }), (shapes, asides) => {
        const tensors = curves(shapes);
        const windowOf = lossScaleWindows(tensors, OPTIONS);
        expect(edges(windowOf())).toEqual(edges(directWindow(tensors, OPTIONS)));
        for (const aside of asides) {
          const ids = new Set(aside.map((i) => tensors[i % tensors.length]!.id));
          const rest = tensors.filter((t) => !ids.has(t.id));
          if (rest.length === 0) continue;
          expect(edges(windowOf(ids))).toEqual(edges(directWindow(rest, OPTIONS)));
        }
      }),
      { numRuns: 300 },
    );
  });
});

describe("the tables' bits", () => {
  it("give the definition's window past 32 exponents of one curve, where every table is scanned", () => {
    // tensors whose own flush edges lie far apart, each guessed far off: the search visits many exponents
    const wide = { ...OPTIONS, lowestLog2: -60, highestLog2: 60 };
    const shapes: Shape[] = Array.from({ length: 40 }, (_, i) => ({ overflowCentre: 50 - i / 7, flushCentre: -55 + ((i * 37) % 40) * 2.5, slope: 3, slack: 0.5, guess: (i % 7) - 3 }));
    const tensors = curves(shapes);
    const windowOf = lossScaleWindows(tensors, wide);
    expect(edges(windowOf())).toEqual(edges(directWindow(tensors, wide)));
    // each held set drops the next most flush-prone tensor: each window's lower edge, and its setter's gallop, lie lower
    const byFlush = [...tensors].sort((a, b) => b.flushedEnergy(0) - a.flushedEnergy(0));
    for (let j = 1; j <= 30; j++) {
      const held = new Set(byFlush.slice(0, j).map((t) => t.id));
      expect(edges(windowOf(held))).toEqual(edges(directWindow(tensors.filter((t) => !held.has(t.id)), wide)));
    }
  });
});

describe("overflowRiskRough", () => {
  it("bounds the gradient curves' overflow risk from above, and its lower end from below, at every exponent", () => {
    const limits = limitsFor({ gradients: "binary16" } as PrecisionPlan, "binary16");
    const tensors: TensorPrediction[] = [];
    for (const shape of ["gaussian", "half-gaussian", "bounded", "uniform"] as const) {
      for (const [startRms, endRms, s0, s1, elements] of [
        [1e-4, 1e5, 1.5, 2.5, 65_536],
        [3e-3, 3e-12, 0.02, 2.25, 256],
        [1, 1, 0.5, 0.5, 16],
        [1e-2, 1e3, 3, 0.3, 1e8],
      ] as const) {
        const p = (rms: number, log2Spread: number): MagnitudeProfile => ({ elements, zeroFraction: 0.25, rms, log2Spread, shape, ...(shape === "bounded" ? { bound: 8 } : {}) });
        tensors.push({ id: `g${tensors.length}`, role: "weight-gradient", start: p(startRms, s0), end: p(endRms, s1) } as TensorPrediction);
      }
    }
    let informative = 0;
    for (const c of boundedLossScaleCurves(tensors, limits)) {
      for (let k = -40; k <= 64; k += 2) {
        if (c.overflowRiskRoughLower!(k) > 0) informative++;
        const value = c.overflowRisk(k);
        expect(c.overflowRiskRough!(k)).toBeGreaterThanOrEqual(value);
        expect(c.overflowRiskRoughLower!(k)).toBeLessThanOrEqual(value);
      }
      // asked apart from the upper end, at an exponent other than the last one asked
      expect(c.overflowRiskRoughLower!(3)).toBeLessThanOrEqual(c.overflowRisk(3));
    }
    // the lower end says something where the shifted tails apply (not 0 throughout)
    expect(informative).toBeGreaterThan(20);
  });
});

describe("overflowRiskFarInto", () => {
  it("bounds the gradient curves' overflow risk by a tiny number at every exponent up to its own", () => {
    // the shifted tails past their grid's reads (src/scale/overflow-enclosure.ts shiftTabledFarFrom): the risk itself,
    // integrated, and the rougher bound the searches would take there, both at most the far bound, for laws with and
    // without those tails (a bound past which the risk is 0, a uniform law without them)
    const limits = limitsFor({ gradients: "binary16" } as PrecisionPlan, "binary16");
    const profile = fc.record({
      rms: fc.double({ min: 1e-9, max: 1e6, noNaN: true }),
      log2Spread: fc.oneof(fc.constant(0), fc.double({ min: 0.01, max: 6, noNaN: true })),
    });
    let told = 0;
    let checked = 0;
    fc.assert(
      fc.property(
        fc.constantFrom("gaussian" as const, "half-gaussian" as const, "bounded" as const, "uniform" as const),
        fc.constantFrom(8, 16, 256, 65_536, 1e8),
        fc.constantFrom(0, 0.5),
        profile,
        fc.option(profile, { nil: null }),
        (shape, elements, zeroFraction, a, b) => {
          const p = (q: { rms: number; log2Spread: number }): MagnitudeProfile => ({ elements, zeroFraction, shape, ...q, ...(shape === "bounded" ? { bound: 8 * q.rms } : {}) });
          const tensor = { id: "g", role: "weight-gradient", start: p(a), end: p(b ?? a) } as TensorPrediction;
          const [c] = boundedLossScaleCurves([tensor], limits);
          const into = new Float64Array(2);
          if (!c!.overflowRiskFarInto!(into)) return;
          told++;
          const [to, bound] = [into[0]!, into[1]!];
          expect(bound).toBeLessThan(1e-18);
          for (let k = Math.min(to, 64); k >= Math.max(to - 8, -64); k--) {
            checked++;
            expect(c!.overflowRisk(k)).toBeLessThanOrEqual(bound);
            const rough = c!.overflowRiskRough!(k);
            // (1 where the tails do not apply at t: past a bound, where the risk is 0)
            if (rough < 1) expect(rough).toBeLessThanOrEqual(bound);
          }
        },
      ),
      { numRuns: 300 },
    );
    // the Gaussian laws of 16 elements or more with a spread have the far bound (not none throughout)
    expect(told).toBeGreaterThan(20);
    expect(checked).toBeGreaterThan(100);
  });
});

describe("FlushLike", () => {
  it("gives the window of curves whose shares lie whole binades apart as a fresh search does", () => {
    fc.assert(
      fc.property(
        fc.array(shape, { minLength: 1, maxLength: 10 }),
        fc.array(fc.nat(12), { maxLength: 3 }),
        fc.integer({ min: -20, max: 20 }),
        fc.boolean(),
        (shapes, aside, shift, growth) => {
          const first = curves(shapes, 0, growth);
          const windowOf = lossScaleWindows(first, OPTIONS);
          windowOf();
          if (aside.length > 0) windowOf(new Set(aside.map((i) => first[i % first.length]!.id)));
          // the second curves at k are the first's at k + shift
          const second = curves(shapes, shift, growth);
          const shared = lossScaleWindows(second, OPTIONS, { windows: windowOf, shift })();
          expect(shared).toEqual(lossScaleWindow(second, OPTIONS));
          expect(edges(shared)).toEqual(edges(directWindow(second, OPTIONS)));
        },
      ),
      { numRuns: 300 },
    );
  });

  it("reads the earlier search's shares: the second search evaluates no flushed share the first knew", () => {
    const shapes: Shape[] = Array.from({ length: 40 }, (_, i) => ({ overflowCentre: 6 + i / 10, flushCentre: -3 - i / 20, slope: 2, slack: 0.5, guess: 1 }));
    const first = curves(shapes);
    const windowOf = lossScaleWindows(first, OPTIONS);
    const w = windowOf();
    let asked = 0;
    const second = curves(shapes, 4).map((c) => ({
      ...c,
      flushedEnergy: (k: number) => (asked++, c.flushedEnergy(k)),
      flushedEnergyBounds: (k: number) => (asked++, c.flushedEnergyBounds!(k)),
    }));
    // four binades apart, the lowest edge moves by four and every tensor was found tolerated there before
    const shared = lossScaleWindows(second, OPTIONS, { windows: windowOf, shift: 4 })();
    expect(shared.lowestLog2).toBe(w.lowestLog2! - 4);
    // not one share or bound asked: every one the second search needed, the first had learnt (a "fewer than one per
    // tensor" count would pass with part of the sharing broken)
    expect(asked).toBe(0);
    // the same curves searched afresh ask at least once per tensor: the count above tells sharing from a search that
    // needs nothing
    expect(lossScaleWindow(second, OPTIONS)).toEqual(shared);
    expect(asked).toBeGreaterThanOrEqual(second.length);
  });

  it("refuses other tensors or another tolerance", () => {
    const first = curves([{ overflowCentre: 3, flushCentre: -3, slope: 1, slack: 0, guess: 0 }]);
    const windowOf = lossScaleWindows(first, OPTIONS);
    expect(() => lossScaleWindows(first, { ...OPTIONS, flushTolerance: 1e-2 }, { windows: windowOf, shift: 1 })).toThrow(RangeError);
    expect(() => lossScaleWindows([{ ...first[0]!, id: "other" }], OPTIONS, { windows: windowOf, shift: 1 })).toThrow(RangeError);
    expect(() => lossScaleWindows(first, OPTIONS, { windows: windowOf, shift: 0.5 })).toThrow(RangeError);
  });

  it("tells the tensors by their sources where both curves have one (one source, one id), else by their ids", () => {
    const shapes: Shape[] = Array.from({ length: 5 }, (_, i) => ({ overflowCentre: 4 + i, flushCentre: -4 + i / 3, slope: 1.5, slack: 1e-2, guess: 0 }));
    const sources = shapes.map(() => ({}));
    const first = curves(shapes).map((c, i) => ({ ...c, source: sources[i]! }));
    const windowOf = lossScaleWindows(first, OPTIONS);
    windowOf();
    // the same sources: the same tensors, shared as by their ids
    const second = curves(shapes, 3).map((c, i) => ({ ...c, source: sources[i]! }));
    expect(lossScaleWindows(second, OPTIONS, { windows: windowOf, shift: 3 })()).toEqual(lossScaleWindow(second, OPTIONS));
    // other sources, or none, with other ids: other tensors
    const renamed = (c: ScaledTensorCurves, i: number) => ({ ...c, id: `other${i}` });
    expect(() => lossScaleWindows(second.map(renamed).map((c) => ({ ...c, source: {} })), OPTIONS, { windows: windowOf, shift: 3 })).toThrow(RangeError);
    expect(() => lossScaleWindows(curves(shapes, 3).map(renamed), OPTIONS, { windows: windowOf, shift: 3 })).toThrow(RangeError);
    // other sources with the same ids: still the same tensors by their ids
    expect(lossScaleWindows(curves(shapes, 3).map((c) => ({ ...c, source: {} })), OPTIONS, { windows: windowOf, shift: 3 })()).toEqual(lossScaleWindow(second, OPTIONS));
  });

  it("gives the answer's curves, made from one set of profiles for two formats, one source per tensor, of that tensor", () => {
    // the remedies' bfloat16 search shares binary16's flush tables (src/scale/recommend.ts rankRemedies), both made from
    // one set of profiles: each tensor's two curves have one source, and curves of two tensors never share one
    const profile = (rms: number): MagnitudeProfile => ({ elements: 4096, zeroFraction: 0, shape: "gaussian", rms, log2Spread: 0.5 });
    const tensors = [1e-3, 2e-2, 5].map(
      (rms, i) => ({ id: `g${i}`, layer: `d${i}`, layerIndex: i, family: "dense", role: "weight-gradient", slot: "gradients", shape: [64, 64], start: profile(rms), end: profile(rms * 2), source: "predicted" }) as unknown as TensorPrediction,
    );
    const plan = { gradients: "binary16" } as unknown as PrecisionPlan;
    const profiles = gradientProfiles(tensors);
    const half = limitsFor(plan, "binary16");
    const bfloat = limitsFor({ ...plan, gradients: "bfloat16" }, "bfloat16");
    const a = boundedLossScaleCurves(tensors, half, profiles);
    const b = boundedLossScaleCurves(tensors, bfloat, profiles);
    for (let i = 0; i < tensors.length; i++) {
      expect(a[i]!.source).toBe(profiles[i]);
      expect(b[i]!.source).toBe(a[i]!.source);
      expect(a[i]!.id).toBe(tensors[i]!.id);
      expect(b[i]!.id).toBe(tensors[i]!.id);
      for (let j = 0; j < i; j++) expect(a[j]!.source).not.toBe(a[i]!.source);
    }
    // so the second search shares the first's tables, and gives the window a fresh search gives
    const windowOf = lossScaleWindows(a, OPTIONS);
    windowOf();
    // (the two flush bounds a whole number of binades apart, as rankRemedies' flushShift asks)
    const shift = Math.round(Math.log2(half.flushBound / bfloat.flushBound));
    expect(bfloat.flushBound * 2 ** shift).toBe(half.flushBound);
    expect(lossScaleWindows(b, OPTIONS, { windows: windowOf, shift })()).toEqual(lossScaleWindow(b, OPTIONS));
  });
});
