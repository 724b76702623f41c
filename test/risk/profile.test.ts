import { describe, expect, it } from "vitest";
import { f16round } from "@petamoriken/float16";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import {
  energyBelow,
  fractionBelow,
  probabilityAnyAbove,
  profileRisk,
  profileStatistics,
  rangeLimits,
} from "../../src/risk/index.js";
import { normalUpperQuantile } from "../../src/risk/_math.js";
import { lawOverDraws } from "../../src/risk/laws.js";
import { FORMATS } from "../../src/formats/index.js";
import { BFLOAT16_FTZ, BINARY16, BINARY32, E4M3_SATURATING } from "./limits.js";

function profile(partial: Partial<MagnitudeProfile>): MagnitudeProfile {
  return { elements: 1, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0, ...partial };
}

function relative(actual: number, expected: number): number {
  return Math.abs(actual - expected) / Math.abs(expected);
}

describe("flushed and subnormal fractions of a Gaussian tensor in binary16 (SCIENCE.md §4)", () => {
  // P(|x| ≤ 2^-25) = erf(2^-25/(σ√2)); P(|x| < 2^-14) for the subnormal-or-flushed share
  const cases = [
    { sigma: 1e-3, flushed: 2.378e-5, belowNormal: 0.04867 },
    { sigma: 1e-4, flushed: 2.378e-4, belowNormal: 0.4584 },
    { sigma: 1e-6, flushed: 0.02378, belowNormal: 1 },
    { sigma: 1e-7, flushed: 0.2343, belowNormal: 1 },
  ];
  for (const { sigma, flushed, belowNormal } of cases) {
    it(`σ = ${sigma}: flushed ${flushed}, flushed + subnormal ${belowNormal}`, () => {
      const risk = profileRisk(profile({ rms: sigma, elements: 1e6 }), BINARY16);
      expect(relative(risk.flushedFraction, flushed)).toBeLessThan(1e-3);
      expect(relative(risk.flushedFraction + risk.subnormalFraction, belowNormal)).toBeLessThan(1e-3);
    });
  }

  it("agrees with rounding Gaussian quantiles through @petamoriken/float16 (flushed share, subnormal share, energy)", () => {
    // a deterministic sample: the N midpoint quantiles of N(0, σ²), each rounded by the reference library
    const sigma = 2e-6;
    const count = 200_000;
    let flushed = 0;
    let subnormal = 0;
    let energy = 0;
    let flushedEnergy = 0;
    for (let i = 0; i < count; i++) {
      const x = sigma * -normalUpperQuantile((i + 0.5) / count);
      const rounded = f16round(x);
      energy += x * x;
      if (rounded === 0) {
        flushed++;
        flushedEnergy += x * x;
      } else if (Math.abs(rounded) < 2 ** -14) subnormal++;
    }
    const risk = profileRisk(profile({ rms: sigma, elements: count }), BINARY16);
    expect(risk.flushedFraction).toBeCloseTo(flushed / count, 3);
    expect(risk.subnormalFraction).toBeCloseTo(subnormal / count, 3);
    expect(relative(risk.flushedEnergy, flushedEnergy / energy)).toBeLessThan(2e-2);
  });
});

describe("element shapes", () => {
  it("uniform: P(|x| ≤ t) = t/A and energy share (t/A)³ with A = rms·√3", () => {
    const p = profile({ shape: "uniform", rms: 1 / Math.sqrt(3) });
    expect(fractionBelow(p, 0.25)).toBeCloseTo(0.25, 12);
    expect(energyBelow(p, 0.5)).toBeCloseTo(0.125, 12);
    expect(probabilityAnyAbove(p, 0.9)).toBeCloseTo(0.1, 12);
  });

  it("log-normal: P(|x| < t) = Φ((ln t − μ)/s) (SCIENCE.md §4), with μ set by the rms", () => {
    const s = 3; // binades
    const rms = 1e-3;
    const p = profile({ shape: "log-normal", rms, elementLog2Spread: s });
    // log2|x| ~ N(m, s²) with m = log2(rms) − s²·ln 2 (so that E[x²] = rms²)
    const m = Math.log2(rms) - s * s * Math.LN2;
    const t = 2 ** (m - 1.5 * s);
    // Φ(−1.5) = 0.0668072 (standard normal table)
    expect(fractionBelow(p, t)).toBeCloseTo(0.0668072, 6);
  });

  it("constant: all or nothing without spread; the draw tail with spread (Q(2) = 0.02275013, SCIENCE.md §4)", () => {
    expect(probabilityAnyAbove(profile({ shape: "constant", rms: 100 }), 99)).toBe(1);
    expect(probabilityAnyAbove(profile({ shape: "constant", rms: 100 }), 101)).toBe(0);
    const spread = profile({ shape: "constant", rms: 2 ** 10, log2Spread: 0.5 });
    // reaching 2^11 needs a draw 1 binade up, i.e. z ≥ 2: P(|Z| > 2)/2
    expect(relative(probabilityAnyAbove(spread, 2 ** 11), 0.04550026 / 2)).toBeLessThan(1e-6);
  });

  it("a bound caps any shape: nothing above it, and the predicted max stops there", () => {
    const capped = profile({ shape: "log-normal", rms: 1e-3, elementLog2Spread: 2, bound: 2 ** -8, elements: 1e4 });
    expect(probabilityAnyAbove(capped, 2 ** -7)).toBe(0);
    expect(fractionBelow(capped, 2 ** -8)).toBe(1);
    expect(profileStatistics(capped).max).toBe(2 ** -8);
  });

  it("exact zeros (a ReLU's half) are neither flushed nor counted as elements that can overflow", () => {
    const relu = profile({ shape: "half-gaussian", zeroFraction: 0.5, elements: 2000 });
    const dense = profile({ elements: 1000 });
    expect(probabilityAnyAbove(relu, 4)).toBeCloseTo(probabilityAnyAbove(dense, 4), 12);
  });
});

describe("overflow risk per step", () => {
  it("n independent Gaussian elements: 1 − (1 − P(|Z| > 4))^n with P(|Z| > 4) = 6.334248e-5 (SCIENCE.md §4)", () => {
    const expected = 1 - (1 - 6.334248e-5) ** 1000;
    expect(relative(probabilityAnyAbove(profile({ elements: 1000 }), 4), expected)).toBeLessThan(1e-6);
  });

  it("stays accurate when the per-element tail is tiny: n·P(|Z| > 6) for n = 1e6 (P = 1.973175e-9)", () => {
    const expected = -Math.expm1(1e6 * Math.log1p(-1.973175e-9));
    expect(relative(probabilityAnyAbove(profile({ elements: 1e6 }), 6), expected)).toBeLessThan(1e-6);
  });

  it("integrates over the spread of the scale: one log-normal element with draw spread d has total spread √(s² + d²)", () => {
    const s = 1.5;
    const d = 0.8;
    const rms = 1;
    const p = profile({ shape: "log-normal", rms, elementLog2Spread: s, log2Spread: d });
    const m = Math.log2(rms) - s * s * Math.LN2;
    const t = 2 ** (m + 3 * Math.hypot(s, d));
    // P(Z > 3) = P(|Z| > 3)/2 = 2.699796e-3/2 (SCIENCE.md §4)
    expect(relative(probabilityAnyAbove(p, t), 2.699796e-3 / 2)).toBeLessThan(1e-4);
  });

  it("saturating e4m3 counts values past 448; infinity-or-nan e4m3 past the RNE threshold 464 (OCP 8-bit spec)", () => {
    const e4m3 = {
      name: "e4m3" as const,
      maxFinite: 448,
      overflowThreshold: 464,
      minNormal: 2 ** -6,
      minSubnormal: 2 ** -9,
      flushBound: 2 ** -10,
      unitRoundoff: 2 ** -4,
    };
    const value = profile({ shape: "constant", rms: 455 });
    expect(profileRisk(value, rangeLimits(e4m3, { saturate: true, flushSubnormals: false })).overflowRisk).toBe(1);
    expect(profileRisk(value, rangeLimits(e4m3, { saturate: false, flushSubnormals: false })).overflowRisk).toBe(0);
    expect(E4M3_SATURATING.overflowLevel).toBe(448);
  });
});

describe("headroom and footroom", () => {
  it("a constant tensor: headroom log2(65504/rms), footroom log2(rms/2^-24) in binary16", () => {
    const risk = profileRisk(profile({ shape: "constant", rms: 1024, elements: 100 }), BINARY16);
    expect(risk.headroom).toBeCloseTo(Math.log2(65504 / 1024), 9);
    expect(risk.footroom).toBeCloseTo(Math.log2(1024 / 2 ** -24), 9);
  });

  it("the predicted max of one Gaussian element is its two-sided 1e-3 quantile, 3.2905 (standard normal table)", () => {
    expect(profileStatistics(profile({})).max).toBeCloseTo(3.2905, 4);
  });

  it("the low magnitude is the 1% quantile: 0.012533 for a Gaussian (P(|Z| ≤ t) = 0.01; standard normal table)", () => {
    expect(profileStatistics(profile({})).low).toBeCloseTo(0.012533, 5);
  });

  it("an all-zero tensor has no headroom or footroom to report and no risk", () => {
    const risk = profileRisk(profile({ rms: 0, elements: 10 }), BINARY16);
    expect(risk).toEqual({
      flushedFraction: 0,
      subnormalFraction: 0,
      flushedEnergy: 0,
      overflowRisk: 0,
      headroom: null,
      footroom: null,
    });
  });
});

describe("rangeLimits from the format model", () => {
  it("matches the limits written out from the standards (IEEE 754-2019; OCP 8-bit specification)", () => {
    expect(rangeLimits(FORMATS.binary16, { saturate: false, flushSubnormals: false })).toEqual(BINARY16);
    expect(rangeLimits(FORMATS.binary32, { saturate: false, flushSubnormals: false })).toEqual(BINARY32);
    expect(rangeLimits(FORMATS.bfloat16, { saturate: false, flushSubnormals: true })).toEqual(BFLOAT16_FTZ);
    expect(rangeLimits(FORMATS.e4m3, { saturate: true, flushSubnormals: false })).toEqual(E4M3_SATURATING);
  });
});

describe("the draw-integral table behind fractionBelow, energyBelow and probabilityAnyAbove", () => {
  // the table may only ever return what lawOverDraws (src/risk/laws.ts) computes for the same inputs, bit for bit
  it("gives lawOverDraws' own numbers, on first and repeated calls, for every shape and optional field", () => {
    const shapes: MagnitudeProfile["shape"][] = ["gaussian", "half-gaussian", "uniform", "constant", "bounded", "log-normal"];
    const seen: MagnitudeProfile[] = [];
    for (const shape of shapes) {
      for (const spread of [0.25, 1.5]) {
        for (const extra of [{}, { bound: 3e-3 }, { elementLog2Spread: 1.2 }, { bound: 3e-3, elementLog2Spread: 0.7 }]) {
          seen.push(profile({ shape, rms: 1e-3, log2Spread: spread, elements: 4096, zeroFraction: 0.25, ...extra }));
        }
      }
    }
    for (let round = 0; round < 2; round++) {
      for (const p of seen) {
        for (const t of [2 ** -24, 2 ** -14, 1e-3, 5e-3, 65504]) {
          // the tail any element reaches: the closed forms apply to constant-like profiles only, lawOverDraws otherwise
          if (p.shape !== "constant" && !(p.shape === "log-normal" && !((p.elementLog2Spread ?? 0) > 0))) {
            expect(Object.is(probabilityAnyAbove(p, t), lawOverDraws(p, "any-above", t))).toBe(true);
            expect(Object.is(probabilityAnyAbove(p, t, true), lawOverDraws(p, "any-above", t, true))).toBe(true);
          }
        }
      }
    }
    // a profile differing in one field only is a different entry, never the neighbour's number
    const base = profile({ shape: "uniform", rms: 1e-3, log2Spread: 1, elements: 4096 });
    const variants = [base, { ...base, zeroFraction: 0.5 }, { ...base, elements: 4097 }, { ...base, bound: 2e-3 }, { ...base, log2Spread: 1.0000001 }];
    for (let round = 0; round < 2; round++) {
      for (const p of variants) {
        for (const t of [1e-4, 3e-3]) {
          expect(Object.is(fractionBelow(p, t), lawOverDraws(p, "below", t))).toBe(true);
          expect(Object.is(energyBelow(p, t), lawOverDraws(p, "energy-below", t))).toBe(true);
        }
      }
    }
    const bounded = { ...base, bound: 2e-3 };
    expect(fractionBelow(bounded, 3e-3)).toBe(1);
    expect(fractionBelow(base, 3e-3)).toBeLessThan(1);
  });
});
