// The segment upper bounds that let the window and the dynamic-scale simulation skip integrals must bound the
// draw integrals of src/risk/profile.ts from above, for every element shape, spread, size and threshold; and they
// must be tight enough in the tail to be worth having.
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { ElementShape, MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { energyBelow, lossScaleCurves, probabilityAnyAbove, type RangeLimits } from "../../src/risk/index.js";
import { energyBelowBounds, energyBelowUpper, energyBelowWithinLog2, probabilityAnyAboveBounds, probabilityAnyAboveUpper, ProfileDrawBounds } from "../../src/risk/bounds.js";
import { boundedLossScaleCurves } from "../../src/scale/recommend.js";
import { lossScaleWindow } from "../../src/scale/window.js";

const SHAPES: { shape: ElementShape; bound?: number; elementLog2Spread?: number; mixture?: MagnitudeProfile["mixture"] }[] = [
  { shape: "gaussian" },
  { shape: "half-gaussian" },
  { shape: "uniform" },
  { shape: "constant" },
  { shape: "bounded", bound: 4 },
  { shape: "log-normal", elementLog2Spread: 1.5 },
  // the gradient behind a SiLU: a scale mixture of Gaussians, whose tail is the weighted sum of theirs
  { shape: "gaussian-mixture", mixture: { activation: "silu", inputVariance: 1.5 } },
];

function profiles(): MagnitudeProfile[] {
  const out: MagnitudeProfile[] = [];
  for (const s of SHAPES) {
    for (const log2Spread of [0, 0.02, 0.3, 1, 2.25, 4]) {
      for (const elements of [1, 256, 65_536, 1e8]) {
        out.push({ elements, zeroFraction: elements === 256 ? 0.5 : 0, rms: 1, log2Spread, ...s });
      }
    }
  }
  return out;
}

// thresholds from 60 binades below the rms to 60 above, in steps of 3/8 binade (the window steps by whole binades;
// these steps land between the rule's nodes as well as on them)
const THRESHOLDS = Array.from({ length: 321 }, (_, i) => 2 ** (-60 + (3 * i) / 8));

describe("segment upper bounds", () => {
  it("bound the probability that any element exceeds a threshold, for every shape, spread, size and threshold", () => {
    let checked = 0;
    for (const p of profiles()) {
      for (const t of THRESHOLDS) {
        const exact = probabilityAnyAbove(p, t);
        const upper = probabilityAnyAboveUpper(p, t);
        if (!(upper >= exact)) throw new Error(`probabilityAnyAboveUpper below the integral: ${JSON.stringify(p)} t=${t}: ${upper} < ${exact}`);
        checked++;
      }
    }
    expect(checked).toBe(SHAPES.length * 24 * THRESHOLDS.length);
  });

  it("bound the share of the energy below a threshold, for every shape, spread, size and threshold", () => {
    for (const p of profiles()) {
      for (const t of THRESHOLDS) {
        const exact = energyBelow(p, t);
        const upper = energyBelowUpper(p, t);
        if (!(upper >= exact)) throw new Error(`energyBelowUpper below the integral: ${JSON.stringify(p)} t=${t}: ${upper} < ${exact}`);
      }
    }
  });

  it("are far tighter than 1 in the tail, where they save integrals", () => {
    // a Gaussian tensor of 65,536 elements spread by 2 binades: 40 binades above the rms, the chance of reaching
    // the threshold is astronomically small, and the bound says so
    const p: MagnitudeProfile = { elements: 65_536, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 2 };
    expect(probabilityAnyAboveUpper(p, 2 ** 40)).toBeLessThan(1e-15);
    // within a factor of a thousand of the integral a few binades into the tail (one segment spans 2 binades here)
    const t = 2 ** 10;
    expect(probabilityAnyAboveUpper(p, t)).toBeLessThan(1000 * probabilityAnyAbove(p, t));
    // and the flushed energy far below the rms
    expect(energyBelowUpper(p, 2 ** -30)).toBeLessThan(1e-6);
  });
});

// E over the draws z ~ N(0, 1) of E[Z²; |Z| ≤ a], a = t/(rms·2^{s·z}), by the definition alone: the inner integral
// 2∫₀^a x²φ(x) dx and the outer one over z on ±10 both by composite Simpson (Abramowitz & Stegun 25.4.6), fine enough
// that the shares checked here are good to a few parts in a million
function energyShareByDefinition(t: number, rms: number, s: number): number {
  const phi = (x: number): number => Math.exp(-0.5 * x * x) / Math.sqrt(2 * Math.PI);
  const simpson = (f: (x: number) => number, lo: number, hi: number, steps: number): number => {
    const h = (hi - lo) / steps;
    let sum = f(lo) + f(hi);
    for (let i = 1; i < steps; i++) sum += (i % 2 === 1 ? 4 : 2) * f(lo + i * h);
    return (sum * h) / 3;
  };
  const inner = (a: number): number => (a >= 12 ? 1 : 2 * simpson((x) => x * x * phi(x), 0, a, 400));
  return simpson((z) => phi(z) * inner(t / (rms * 2 ** (s * z))), -10, 10, 2000);
}

describe("the Gaussian law's flushed-share upper bound", () => {
  it("stays above the share by its definition and within a few tenths of it (the closed form of src/risk/settle.ts)", () => {
    let checked = 0;
    for (const shape of ["gaussian", "half-gaussian"] as const) {
      for (const log2Spread of [0.5, 1, 2, 3, 4]) {
        const p: MagnitudeProfile = { elements: 65_536, zeroFraction: 0, shape, rms: 1, log2Spread };
        for (let x = -12 * log2Spread; x <= 0; x += log2Spread / 2) {
          const t = 2 ** x;
          const share = energyShareByDefinition(t, 1, log2Spread);
          // the tolerances the window compares with lie at 1e-3 and more; below 1e-9 the quadrature's digits thin out
          if (!(share > 1e-9 && share < 0.2)) continue;
          const upper = energyBelowUpper(p, t);
          expect(upper).toBeGreaterThanOrEqual(share);
          // about the tolerances (shares of 1e-2 and less) within 1.3× of the share (the segments' bound was up to 40×
          // above it); it loosens toward shares of 1, where the cap takes over
          if (share < 1e-2) expect(upper).toBeLessThanOrEqual(1.35 * share);
          checked++;
        }
      }
    }
    expect(checked).toBeGreaterThan(60);
  });

  it("stays above the share as computed at every spread the tables serve, both sides of the bound's switch", () => {
    fc.assert(
      fc.property(
        fc.constantFrom("gaussian" as const, "half-gaussian" as const),
        fc.double({ min: 0.2, max: 8.6, noNaN: true }),
        fc.double({ min: -30, max: 30, noNaN: true }),
        fc.double({ min: -80, max: 10, noNaN: true }),
        (shape, log2Spread, rmsLog2, offset) => {
          const p: MagnitudeProfile = { elements: 4096, zeroFraction: 0.5, shape, rms: 2 ** rmsLog2, log2Spread };
          const t = p.rms * 2 ** offset;
          expect(energyBelowUpper(p, t)).toBeGreaterThanOrEqual(energyBelow(p, t));
        },
      ),
      { numRuns: 5000 },
    );
  });
});

// The threshold below which the closed form is within a tolerance, from Chernoff's bound on it (E[min(1, Y)] ≤ E[Y^θ],
// θ in [0, 1]; Chernoff 1952): held to the closed form and to the share as computed, at thresholds at and below it, and
// to the share by its definition; the searches take a tensor as tolerated there without any bound at the threshold.
describe("the flushed share's tolerated threshold", () => {
  it("keeps the share as computed, and the closed form, within the tolerance at and below it", () => {
    fc.assert(
      fc.property(
        fc.constantFrom("gaussian" as const, "half-gaussian" as const),
        fc.oneof(fc.double({ min: 1e-3, max: 0.25, noNaN: true }), fc.double({ min: 0.25, max: 9, noNaN: true })),
        fc.double({ min: -30, max: 30, noNaN: true }),
        fc.constantFrom(1e-4, 1e-3, 1e-2, 0.1),
        fc.double({ min: 0, max: 6, noNaN: true }),
        (shape, log2Spread, rmsLog2, tolerance, below) => {
          const p: MagnitudeProfile = { elements: 4096, zeroFraction: 0.5, shape, rms: 2 ** rmsLog2, log2Spread };
          const log2T = energyBelowWithinLog2(p, tolerance);
          expect(log2T).toBeGreaterThan(-Infinity);
          const t = 2 ** (log2T - below);
          expect(energyBelowUpper(p, t)).toBeLessThanOrEqual(tolerance);
          expect(energyBelow(p, t)).toBeLessThanOrEqual(tolerance);
        },
      ),
      { numRuns: 5000 },
    );
  });

  it("holds the share by its definition within the tolerance there, and lies within a few binades of where it is reached", () => {
    let checked = 0;
    for (const log2Spread of [0.05, 0.5, 1, 2, 3, 4]) {
      for (const tolerance of [1e-3, 1e-2]) {
        const p: MagnitudeProfile = { elements: 65_536, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread };
        const log2T = energyBelowWithinLog2(p, tolerance);
        expect(energyShareByDefinition(2 ** log2T, 1, log2Spread)).toBeLessThanOrEqual(tolerance);
        // not so loose as to decide nothing: the share reaches the tolerance within 4 binades above (a narrow spread's
        // share grows eightfold per binade, a wide one's more slowly, where Chernoff's bound is looser)
        expect(energyShareByDefinition(2 ** (log2T + 4), 1, log2Spread)).toBeGreaterThan(tolerance);
        checked++;
      }
    }
    expect(checked).toBe(12);
  });

  it("is −∞ for a law the closed form does not take", () => {
    for (const s of SHAPES.filter((x) => x.shape !== "gaussian" && x.shape !== "half-gaussian")) {
      expect(energyBelowWithinLog2({ elements: 256, zeroFraction: 0, rms: 1, log2Spread: 1, ...s }, 1e-3)).toBe(-Infinity);
    }
    expect(energyBelowWithinLog2({ elements: 256, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0 }, 1e-3)).toBe(-Infinity);
  });
});

// Off the grids above: any scale, spread, size and threshold (the draws' scales and the thresholds between the rule's
// nodes and the segments' ends). The bound's reason is an upper Riemann sum of a monotone integrand (each segment at
// most its mass times the integrand at its worse end; Apostol, Mathematical Analysis, 2nd ed. 1974, §7.3; from memory)
// times a factor for the rule, so a profile where it fell below the integral would show that factor too small.
const randomProfile = fc
  .record({
    s: fc.constantFrom(...SHAPES),
    log2Spread: fc.oneof(fc.double({ min: 1e-3, max: 0.1, noNaN: true }), fc.double({ min: 0.1, max: 5, noNaN: true })),
    elements: fc.oneof(fc.constant(1), fc.integer({ min: 2, max: 1 << 20 }), fc.constant(3e9)),
    rmsLog2: fc.double({ min: -30, max: 30, noNaN: true }),
  })
  .map(({ s, log2Spread, elements, rmsLog2 }): MagnitudeProfile => ({ elements, zeroFraction: 0, rms: 2 ** rmsLog2, log2Spread, ...s }));

describe("segment upper bounds at random profiles", () => {
  it("stay at or above the energy share below a threshold", () => {
    fc.assert(
      fc.property(randomProfile, fc.double({ min: -40, max: 30, noNaN: true }), (p, offset) => {
        const t = p.rms * 2 ** offset;
        expect(energyBelowUpper(p, t)).toBeGreaterThanOrEqual(energyBelow(p, t));
      }),
      { numRuns: 3000 },
    );
  });

  it("stay at or above the probability that any element exceeds a threshold", () => {
    fc.assert(
      fc.property(randomProfile, fc.double({ min: -30, max: 40, noNaN: true }), (p, offset) => {
        const t = p.rms * 2 ** offset;
        expect(probabilityAnyAboveUpper(p, t)).toBeGreaterThanOrEqual(probabilityAnyAbove(p, t));
      }),
      { numRuns: 3000 },
    );
  });
});

describe("ProfileDrawBounds", () => {
  it("gives the extreme-draw bounds of every profile bit for bit, at every threshold", () => {
    // the same arithmetic on the same values as laws.ts's drawBounds: the window's search takes the same steps
    let checked = 0;
    const extra: MagnitudeProfile[] = [
      { elements: 65_536, zeroFraction: 0.3, shape: "gaussian", rms: 7e-5, log2Spread: 3.16 },
      { elements: 256, zeroFraction: 0.05, shape: "half-gaussian", rms: 2e-3, log2Spread: 2.2 },
      { elements: 4096, zeroFraction: 0, shape: "gaussian", rms: 1e-4, log2Spread: 0.017, bound: 2 ** 40 },
      { elements: 4096, zeroFraction: 0, shape: "gaussian", rms: 0, log2Spread: 1 },
    ];
    for (const p of [...profiles(), ...extra]) {
      const fast = new ProfileDrawBounds(p);
      for (const t of THRESHOLDS) {
        expect(fast.anyAbove(t)).toEqual(probabilityAnyAboveBounds(p, t));
        expect(fast.energyBelow(t)).toEqual(energyBelowBounds(p, t));
        // the in-place forms, written at an offset, give the same numbers
        const into = new Float64Array(5);
        fast.anyAboveInto(t, into, 1);
        fast.energyBelowInto(t, into, 3);
        expect([into[1], into[2]]).toEqual(probabilityAnyAboveBounds(p, t));
        expect([into[3], into[4]]).toEqual(energyBelowBounds(p, t));
        checked++;
      }
    }
    expect(checked).toBe((SHAPES.length * 24 + 4) * THRESHOLDS.length);
  });

  it("gives [0, 0] where the highest draw's tail underflows, as the draw rule does, and not short of it", () => {
    // a Gaussian tail erfc(x) ≈ e^{−x²}/(x√π) is below the smallest binary64 subnormal 2^−1074 (IEEE 754-2019 §3.6)
    // once x² passes about 745 (x ≈ 27.3): the rule's every node is 0 there; at x = 26 it is about 1e-296, not 0
    const p: MagnitudeProfile = { elements: 65_536, zeroFraction: 0.3, shape: "gaussian", rms: 7e-5, log2Spread: 3.16 };
    const highest = 7e-5 * 2 ** (9 * 3.16);
    const fast = new ProfileDrawBounds(p);
    for (const x of [26, 27, 27.5, 28, 40, 1e6]) {
      const t = x * Math.SQRT2 * highest;
      const expected = probabilityAnyAboveBounds(p, t);
      expect(fast.anyAbove(t)).toEqual(expected);
      if (x >= 28) expect(expected).toEqual([0, 0]);
      if (x <= 26) expect(expected[1]).toBeGreaterThan(0);
    }
  });
});

describe("boundedLossScaleCurves", () => {
  // gradients whose start and end differ (a factor of 2^±30 in rms, other spreads), and some that do not change
  const tensors: TensorPrediction[] = [];
  let n = 0;
  for (const s of SHAPES) {
    for (const [startRms, endRms, startSpread, endSpread] of [
      [1e-4, 1e-4, 0.3, 0.3],
      [1e-4, 1e5, 1.5, 1.6],
      [3e-3, 3e-12, 0.02, 2.25],
      [1, 1, 0, 0],
    ] as const) {
      const profile = (rms: number, log2Spread: number): MagnitudeProfile => ({ elements: 65_536, zeroFraction: 0.25, rms, log2Spread, ...s });
      tensors.push({
        id: `g${n++}`,
        layer: "d",
        layerIndex: 0,
        family: "dense",
        role: n % 2 === 0 ? "activation-gradient" : "weight-gradient",
        slot: "gradients",
        shape: [65_536],
        start: profile(startRms, startSpread),
        end: profile(endRms, endSpread),
        ledger: [],
        source: "predicted",
      });
    }
  }
  // binary16's overflow level and flush bound (IEEE 754-2019: largest finite 65504, half the smallest subnormal 2^-25)
  const limits = { overflowLevel: 65504, flushBound: 2 ** -25 } as RangeLimits;

  it("give the curves' own values, bit for bit, with valid tighter upper bounds", () => {
    const plain = lossScaleCurves(tensors, limits);
    const bounded = boundedLossScaleCurves(tensors, limits);
    expect(bounded.map((c) => c.id)).toEqual(plain.map((c) => c.id));
    for (let k = -40; k <= 64; k += 3) {
      bounded.forEach((c, i) => {
        const p = plain[i]!;
        // the upper bounds first (asked before the value, as the searches do), then the values
        const overflowUpper = c.overflowRiskUpper!(k);
        const flushUpper = c.flushedEnergyUpper!(k);
        expect(c.overflowRisk(k)).toBe(p.overflowRisk(k));
        expect(c.flushedEnergy(k)).toBe(p.flushedEnergy(k));
        expect(overflowUpper).toBeGreaterThanOrEqual(p.overflowRisk(k));
        expect(flushUpper).toBeGreaterThanOrEqual(p.flushedEnergy(k));
      });
    }
  });

  it("give quick overflow bounds that hold the curves' own values, where the law has moment bounds", () => {
    const plain = lossScaleCurves(tensors, limits);
    const bounded = boundedLossScaleCurves(tensors, limits);
    const into = new Float64Array(2);
    let offered = 0;
    // half-binade steps too, between the whole exponents the window asks for
    for (let k = -40; k <= 64; k += 0.5) {
      bounded.forEach((c, i) => {
        if (!c.overflowRiskQuickInto!(k, into)) return;
        offered++;
        const value = plain[i]!.overflowRisk(k);
        expect(into[0]).toBeLessThanOrEqual(value);
        expect(into[1]).toBeGreaterThanOrEqual(value);
      });
    }
    // the Gaussian-law tensors with a spread have them (half-Gaussian and bounded laws too: the moment bounds' laws)
    expect(offered).toBeGreaterThan(100);
  });

  it("decline the quick overflow bounds only where their upper end would not come below the level asked", () => {
    // the edge setter's scan passes the largest value found: where the quick bounds' remainder alone reaches it, the
    // curve declines them; where it gives them, they are the bounds it gives unasked (overflow-enclosure.ts enclosureQuick)
    const bounded = boundedLossScaleCurves(tensors, limits);
    const free = new Float64Array(2);
    const asked = new Float64Array(2);
    let declined = 0;
    let given = 0;
    for (let k = -40; k <= 64; k += 0.5) {
      bounded.forEach((c) => {
        if (!c.overflowRiskQuickInto!(k, free)) return;
        for (const below of [1e-12, 1e-9, 1e-7, 1e-5, 1e-3, 0.1, 0.9]) {
          asked.fill(NaN);
          if (c.overflowRiskQuickInto!(k, asked, below)) {
            given++;
            expect([...asked]).toEqual([...free]);
          } else {
            declined++;
            expect(free[1]).toBeGreaterThanOrEqual(below);
          }
        }
      });
    }
    expect(declined).toBeGreaterThan(50);
    expect(given).toBeGreaterThan(50);
  });

  it("give the window the plain curves give", () => {
    const plain = lossScaleWindow(lossScaleCurves(tensors, limits));
    expect(lossScaleWindow(boundedLossScaleCurves(tensors, limits))).toEqual(plain);
  });
});
