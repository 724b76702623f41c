import { describe, expect, it } from "vitest";
import * as fc from "fast-check";
import type { MagnitudeProfile, TensorPrediction, TensorRole } from "../../src/magnitude/types.js";
import { erfc, normalPdf } from "../../src/numeric/normal.js";
import { countedFindings, decidedFindings, FormatDecision } from "../../src/risk/decide.js";
import { FOUND } from "../../src/risk/tensor-finding.js";
import { capWithin } from "../../src/risk/settle.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";
import { judgePrediction, limitsFor, planFor } from "../../src/risk/judge.js";
import { gaussianNoiseAbove, noiseAtMost, noiseWithin, subnormalNoise, subnormalNoiseLimit } from "../../src/risk/subnormal-noise.js";
import { riskProfile } from "../../src/risk/profile.js";
import { lossScaleFactor, tensorFormatRisk, tensorStatistics, type TensorRiskOptions } from "../../src/risk/tensor.js";
import type { Finding, RangeLimits, RiskThresholds } from "../../src/risk/types.js";
import { parseSpec } from "../../src/spec/index.js";
import { predict } from "../../src/magnitude/index.js";
import { buildGraph } from "../../src/graph/index.js";
// e5m2 and e4m3 (saturating) from the OCP 8-bit specification (OFP8 v1.0, Table 1), with the other formats
import { BFLOAT16_FTZ, BINARY16, BINARY32, E4M3_SATURATING, E5M2 } from "./limits.js";

// src/risk/decide.ts decides a tensor's findings from bounds, and src/risk/tensor-check.ts works its numbers out when
// first read. What they are held to: the findings tensorFormatRisk gives from the numbers themselves (the definition the
// check used before), exactly, wherever the bounds decide; the numbers read, and JSON.stringify of the result, what
// working them out at once gives; and each bound at least the draw integral it bounds, by an independent fine quadrature.

// E_z[f(z)], z ~ N(0, 1): composite Simpson with step 1/64 on [−12, 12] (Abramowitz & Stegun 25.4.5), the mass beyond
// ±12 (2e-33) left out
function fineMean(f: (z: number) => number): number {
  const steps = 24 * 64;
  let sum = 0;
  for (let i = 0; i <= steps; i++) {
    const z = -12 + i / 64;
    sum += (i === 0 || i === steps ? 1 : i % 2 === 1 ? 4 : 2) * normalPdf(z) * f(z);
  }
  return sum / 64 / 3;
}

const ROLES: TensorRole[] = ["activation", "pre-activation", "weight", "activation-gradient", "weight-gradient"];

// a side's profile: a Gaussian magnitude law, its rms anywhere from far under a format's subnormals to past its largest
// value (so every threshold is met near and far), a spread from none to 4.5 binades
const side = fc
  .record({
    shape: fc.constantFrom("gaussian" as const, "half-gaussian" as const, "bounded" as const),
    log2Rms: fc.double({ min: -40, max: 24, noNaN: true }),
    spread: fc.oneof(fc.constant(0), fc.double({ min: 1e-3, max: 4.5, noNaN: true })),
    log2Count: fc.double({ min: 0, max: 22, noNaN: true }),
    zeroFraction: fc.oneof(fc.constant(0), fc.constant(1), fc.double({ min: 0, max: 0.9, noNaN: true })),
    // the bound in binades above the rms (none: −1)
    boundAbove: fc.oneof(fc.constant(-1), fc.constant(-1), fc.double({ min: 0, max: 12, noNaN: true })),
  })
  .map(
    (x): MagnitudeProfile => ({
      elements: Math.max(1, Math.floor(2 ** x.log2Count)),
      zeroFraction: x.zeroFraction,
      shape: x.shape,
      rms: 2 ** x.log2Rms,
      log2Spread: x.spread,
      bound: x.boundAbove >= 0 ? 2 ** (x.log2Rms + x.boundAbove) : undefined,
    }),
  );

// the end of the horizon: the start again (one distribution), moved by a few binades, or a profile of its own
const tensors = fc
  .record({ role: fc.constantFrom(...ROLES), start: side, end: side, kind: fc.constantFrom("same", "moved", "own"), moved: fc.double({ min: -6, max: 6, noNaN: true }) })
  .map(({ role, start, end, kind, moved }): TensorPrediction => {
    const last = kind === "same" ? start : kind === "moved" ? riskProfile(start, 2 ** moved) : end;
    return { id: `dense-1/${role}`, layer: "dense-1", role, start, end: last } as unknown as TensorPrediction;
  });

// thresholds: the defaults, or each moved by up to 3 decades (so the bounds meet them at other levels)
const thresholds = fc.oneof(
  fc.constant(DEFAULT_THRESHOLDS),
  fc
    .record({ overflow: fc.double({ min: -3, max: 3, noNaN: true }), flushed: fc.double({ min: -3, max: 1, noNaN: true }), energy: fc.double({ min: -3, max: 2, noNaN: true }), noise: fc.double({ min: -3, max: 3, noNaN: true }), headroom: fc.double({ min: 0, max: 12, noNaN: true }) })
    .map(
      (m): RiskThresholds => ({
        ...DEFAULT_THRESHOLDS,
        overflowAtRisk: DEFAULT_THRESHOLDS.overflowAtRisk * 10 ** m.overflow,
        flushedAtRisk: DEFAULT_THRESHOLDS.flushedAtRisk * 10 ** m.flushed,
        energyAtRisk: DEFAULT_THRESHOLDS.energyAtRisk * 10 ** m.energy,
        subnormalNoiseAtRisk: DEFAULT_THRESHOLDS.subnormalNoiseAtRisk * 10 ** m.noise,
        headroomAtRisk: m.headroom,
      }),
    ),
);

// the formats and the five offsets (decades, binades for the headroom) of the thresholds-near property tests
const NEAR_FORMATS = fc.constantFrom(BINARY16, BFLOAT16_FTZ, E5M2, E4M3_SATURATING);
const NEAR_OFFSETS = fc.array(fc.double({ min: -1.5, max: 1.5, noNaN: true }), { minLength: 5, maxLength: 5 });

/**
 * Thresholds that sit near the tensor's own numbers, so that every bound meets its threshold where the decision is
 * close: each at-risk threshold within 1.5 decades (binades for the headroom) of the worse end's number, moved by `off`,
 * the failing ones the defaults (overflow 0.5). The numbers themselves do not depend on the at-risk thresholds.
 */
function thresholdsNear(tensor: TensorPrediction, limits: RangeLimits, base: TensorRiskOptions, off: readonly number[]): RiskThresholds {
  const worst = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), base).worst;
  const near = (value: number, k: number, otherwise: number): number => (value > 0 && value < 1 ? value * 10 ** (off[k] as number) : otherwise);
  return {
    ...DEFAULT_THRESHOLDS,
    overflowAtRisk: near(worst.overflowRisk, 0, DEFAULT_THRESHOLDS.overflowAtRisk),
    overflowFails: 0.5,
    flushedAtRisk: near(worst.flushedFraction, 1, DEFAULT_THRESHOLDS.flushedAtRisk),
    energyAtRisk: near(worst.flushedEnergy, 2, DEFAULT_THRESHOLDS.energyAtRisk),
    subnormalNoiseAtRisk: near(worst.subnormalNoise, 3, DEFAULT_THRESHOLDS.subnormalNoiseAtRisk),
    headroomAtRisk: worst.headroom === null ? 1 : Math.max(0, worst.headroom + (off[4] as number)),
  };
}

// role, format, log2 rms in binary16's subnormal band (smallest normal 2^-14; IEEE 754-2019 Table 3.5) and spread of
// the noise tests' quiet side
const NOISE_BAND = [
  fc.constantFrom<TensorRole>("weight-gradient", "activation-gradient", "activation"),
  fc.constantFrom(BINARY16, E5M2),
  fc.double({ min: -19, max: -11, noNaN: true }),
  fc.double({ min: 1, max: 3, noNaN: true }),
] as const;

describe("findings decided by bounds", () => {
  it("are the findings tensorFormatRisk gives from the numbers, wherever the bounds decide them", () => {
    let decided = 0;
    let withFindings = 0;
    let undecided = 0;
    fc.assert(
      fc.property(tensors, fc.constantFrom(BINARY16, BFLOAT16_FTZ, BINARY32, E5M2, E4M3_SATURATING), thresholds, (tensor, limits, t) => {
        const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: t };
        const same = tensor.start === tensor.end;
        const found = decidedFindings(tensor, tensor.start, tensor.end, same, new FormatDecision(limits, t));
        if (found === null) {
          undecided++;
          return;
        }
        decided++;
        if (found.length > 0) withFindings++;
        const full = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, t), options);
        expect(found).toEqual(full.findings);
      }),
      { numRuns: 2500 },
    );
    // most tensors are decided, some with an overflow finding, and some are left to their numbers
    expect(decided).toBeGreaterThan(1500);
    expect(withFindings).toBeGreaterThan(40);
    expect(undecided).toBeGreaterThan(20);
  });

  it("give an overflow probability of 1 to a tensor far past the overflow level, as its law does", () => {
    let fixedScale = 0;
    fc.assert(
      fc.property(
        fc.double({ min: 30, max: 40, noNaN: true }),
        fc.oneof(fc.constant(0), fc.double({ min: 1e-3, max: 1, noNaN: true })),
        fc.integer({ min: 64, max: 1 << 20 }),
        fc.constantFrom<TensorRole>("activation", "weight-gradient"),
        (log2Rms, spread, elements, role) => {
          // binary16's overflow level 65520 = 2^16 − 2^4 (IEEE 754-2019 Table 3.5, round to nearest): the start fits, the
          // end sits past it by more than 6 binades even at its lowest draw that matters (7.65 standard deviations down)
          const start: MagnitudeProfile = { elements, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: spread };
          const end: MagnitudeProfile = { ...start, rms: 2 ** log2Rms };
          const tensor = { id: "dense-1/out", layer: "dense-1", role, start, end } as unknown as TensorPrediction;
          const found = decidedFindings(tensor, start, end, false, new FormatDecision(BINARY16, DEFAULT_THRESHOLDS));
          const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
          expect(found).toEqual(tensorFormatRisk(tensor, BINARY16, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), options).findings);
          expect(found?.[0]?.value).toBe(1);
          if (spread === 0) {
            // at a fixed scale n independent Gaussian magnitudes all stay under t with probability (1 − erfc(a/√2))^n,
            // a = t/rms (A&S 26.2.29): 1 less that is 1 in binary64 this far past the level
            fixedScale++;
            expect(1 - (1 - erfc(BINARY16.overflowLevel / end.rms / Math.SQRT2)) ** elements).toBe(1);
          }
        },
      ),
      { numRuns: 300 },
    );
    expect(fixedScale).toBeGreaterThan(50);
  });

  it("are those findings where every threshold sits near the tensor's own numbers", () => {
    let decided = 0;
    fc.assert(
      fc.property(
        tensors,
        NEAR_FORMATS,
        NEAR_OFFSETS,
        (tensor, limits, off) => {
          const base: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
          const t = thresholdsNear(tensor, limits, base, off);
          const options: TensorRiskOptions = { ...base, thresholds: t };
          const found = decidedFindings(tensor, tensor.start, tensor.end, tensor.start === tensor.end, new FormatDecision(limits, t));
          if (found === null) return;
          decided++;
          expect(found).toEqual(tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, t), options).findings);
        },
      ),
      { numRuns: 1500 },
    );
    expect(decided).toBeGreaterThan(300);
  });

  it("decide the headroom's finding where the predicted max meets the threshold", () => {
    let cleared = 0;
    let left = 0;
    fc.assert(
      fc.property(
        side.filter((p) => p.rms > 0 && p.zeroFraction < 1),
        fc.constantFrom(BINARY16, BFLOAT16_FTZ, E5M2),
        fc.double({ min: 0.5, max: 10, noNaN: true }),
        fc.double({ min: -0.4, max: 0.4, noNaN: true }),
        (profile, limits, h, off) => {
          // the profile moved so that its predicted max leaves h + off binades of headroom; overflow judged at a level
          // no tensor with that headroom reaches, so the headroom is what decides
          const t: RiskThresholds = { ...DEFAULT_THRESHOLDS, headroomAtRisk: h, overflowAtRisk: 1e-2, overflowFails: 0.5 };
          const max = tensorStatistics({ role: "activation", start: profile, end: profile } as unknown as TensorPrediction, 1, t).start.max;
          const start = riskProfile(profile, (limits.maxFinite * 2 ** -(h + off)) / max);
          const tensor = { id: "dense-1/activation", layer: "dense-1", role: "activation", start, end: start } as unknown as TensorPrediction;
          const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: t };
          const full = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, t), options);
          const found = decidedFindings(tensor, start, start, true, new FormatDecision(limits, t));
          if (found === null) left++;
          else {
            expect(found).toEqual(full.findings);
            if (off < 0.1) cleared++;
          }
        },
      ),
      { numRuns: 800 },
    );
    // near the level too (within 0.1 binade of it) the bound or the max itself decides it
    expect(cleared).toBeGreaterThan(50);
    expect(left).toBeGreaterThan(50);
  });

  it("decide a subnormal noise past its limit beside an overflow, as the numbers give both findings", () => {
    // a side in the subnormal band of binary16 (smallest normal 2^-14) and one overflowing (65520): the 1,000-layer
    // spec's growing weight gradients, whose remedy no loss scale gives (no headroom left)
    const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
    let both = 0;
    fc.assert(
      fc.property(
        ...NOISE_BAND,
        fc.double({ min: 10, max: 24, noNaN: true }),
        fc.boolean(),
        (role, limits, low, spread, high, lowFirst) => {
          const quiet: MagnitudeProfile = { elements: 65536, zeroFraction: 0, shape: "gaussian", rms: 2 ** low, log2Spread: spread };
          const loud: MagnitudeProfile = { elements: 65536, zeroFraction: 0, shape: "gaussian", rms: 2 ** high, log2Spread: spread / 2 };
          const [start, end] = lowFirst ? [quiet, loud] : [loud, quiet];
          const tensor = { id: `dense-1/${role}`, layer: "dense-1", role, start, end } as unknown as TensorPrediction;
          const found = decidedFindings(tensor, start, end, false, new FormatDecision(limits, DEFAULT_THRESHOLDS));
          if (found === null) return;
          const full = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), options).findings;
          expect(found).toEqual(full);
          if (found.length === 2 && found[1]?.kind === "subnormal-values") both++;
        },
      ),
      { numRuns: 600 },
    );
    expect(both).toBeGreaterThan(30);
  });

  it("decide a subnormal noise past its limit alone, its remedy a loss scale searched within the headroom", () => {
    // one side in the subnormal band of binary16 (smallest normal 2^-14), the other moved by a few binades and far from
    // overflow: a gradient's remedy names the loss scale that lifts both within the limit, or says none does
    const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
    let alone = 0;
    let lifted = 0;
    fc.assert(
      fc.property(
        ...NOISE_BAND,
        fc.double({ min: -4, max: 8, noNaN: true }),
        fc.boolean(),
        (role, limits, low, spread, moved, same) => {
          const start: MagnitudeProfile = { elements: 65536, zeroFraction: 0, shape: "gaussian", rms: 2 ** low, log2Spread: spread };
          const end = same ? start : riskProfile(start, 2 ** moved);
          const tensor = { id: `dense-1/${role}`, layer: "dense-1", role, start, end } as unknown as TensorPrediction;
          const found = decidedFindings(tensor, start, end, same, new FormatDecision(limits, DEFAULT_THRESHOLDS));
          if (found === null) return;
          expect(found).toEqual(tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), options).findings);
          if (found.length === 1 && found[0]?.kind === "subnormal-values") {
            alone++;
            if (found[0].sentence.includes("a loss scale of")) lifted++;
          }
        },
      ),
      { numRuns: 600 },
    );
    expect(alone).toBeGreaterThan(30);
    expect(lifted).toBeGreaterThan(5);
  });

  it("leave a tie of overflow probabilities, and laws other than the Gaussian's, to the numbers", () => {
    const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
    const hot = { elements: 4096, zeroFraction: 0, shape: "gaussian" as const, rms: 2 ** 20, log2Spread: 0 };
    const tie = { id: "a/activation", role: "activation", start: hot, end: { ...hot, elements: 8192 } } as unknown as TensorPrediction;
    // both ends overflow with probability 1: which end is worse goes by the headroom
    expect(tensorFormatRisk(tie, BINARY16, tensorStatistics(tie, 1, DEFAULT_THRESHOLDS), options).findings[0]?.value).toBe(1);
    expect(decidedFindings(tie, tie.start, tie.end, false, new FormatDecision(BINARY16, DEFAULT_THRESHOLDS))).toBeNull();
    const uniform = { ...hot, rms: 1, shape: "uniform" as const };
    const other = { id: "a/activation", role: "activation", start: uniform, end: uniform } as unknown as TensorPrediction;
    expect(decidedFindings(other, uniform, uniform, true, new FormatDecision(BINARY16, DEFAULT_THRESHOLDS))).toBeNull();
    // and decide a Gaussian one far inside every limit, with no finding
    const calm = { ...hot, rms: 1 };
    const fits = { id: "a/activation", role: "activation", start: calm, end: calm } as unknown as TensorPrediction;
    expect(decidedFindings(fits, calm, calm, true, new FormatDecision(BINARY16, DEFAULT_THRESHOLDS))).toEqual([]);
  });
});

// what a counted finding carries (src/risk/decide.ts countedFindings): a finding without its sentence and moment
function countedPart(f: Finding): Omit<Finding, "sentence" | "at"> {
  return { format: f.format, subject: f.subject, source: f.source, kind: f.kind, severity: f.severity, value: f.value, threshold: f.threshold };
}

// countedFindings's findings as an array (it leaves them at the start of FOUND), null where it leaves the tensor
function counted(tensor: TensorPrediction, limits: RangeLimits, t: RiskThresholds): Omit<Finding, "sentence" | "at">[] | null {
  const n = countedFindings(tensor, tensor.start, tensor.end, tensor.start === tensor.end, new FormatDecision(limits, t));
  return n < 0 ? null : FOUND.slice(0, n).map(countedPart);
}

describe("findings that are only counted", () => {
  it("have the kinds, severities, values and thresholds tensorFormatRisk gives from the numbers", () => {
    let withFindings = 0;
    const kinds = new Set<string>();
    fc.assert(
      fc.property(tensors, fc.constantFrom(BINARY16, BFLOAT16_FTZ, BINARY32, E5M2, E4M3_SATURATING), thresholds, (tensor, limits, t) => {
        const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: t, countOnly: true };
        const found = counted(tensor, limits, t);
        // every Gaussian law is counted
        expect(found).not.toBeNull();
        const full = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, t), options);
        expect(found).toEqual(full.findings.map(countedPart));
        if (full.findings.length > 1) withFindings++;
        for (const f of full.findings) kinds.add(f.kind);
      }),
      { numRuns: 2500 },
    );
    // several findings per tensor, and every kind a Gaussian tensor can have
    expect(withFindings).toBeGreaterThan(30);
    expect([...kinds].sort()).toEqual(["flushed-values", "gradient-energy-flushed", "little-headroom", "overflow", "saturation", "subnormal-values"]);
  });

  it("have them where every threshold sits near the tensor's own numbers", () => {
    fc.assert(
      fc.property(
        tensors,
        NEAR_FORMATS,
        NEAR_OFFSETS,
        (tensor, limits, off) => {
          const base: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS, countOnly: true };
          const t = thresholdsNear(tensor, limits, base, off);
          const options: TensorRiskOptions = { ...base, thresholds: t };
          expect(counted(tensor, limits, t)).toEqual(tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, t), options).findings.map(countedPart));
        },
      ),
      { numRuns: 1500 },
    );
  });

  it("count a subnormal noise past its limit as the numbers give it, with its share of subnormal elements", () => {
    // one side in the subnormal band of binary16 (smallest normal 2^-14; IEEE 754-2019 Table 3.5), the other moved by
    // a few binades: the noise is counted where the share of subnormal elements is positive (settledRisk reports 0
    // noise where it is 0), which the bounds decide without the shares where the flushed share lies far under it
    let noisy = 0;
    fc.assert(
      fc.property(...NOISE_BAND, fc.double({ min: -4, max: 8, noNaN: true }), fc.boolean(), (role, limits, low, spread, moved, same) => {
        const start: MagnitudeProfile = { elements: 65536, zeroFraction: 0, shape: "gaussian", rms: 2 ** low, log2Spread: spread };
        const end = same ? start : riskProfile(start, 2 ** moved);
        const tensor = { id: `dense-1/${role}`, layer: "dense-1", role, start, end } as unknown as TensorPrediction;
        const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS, countOnly: true };
        const found = counted(tensor, limits, DEFAULT_THRESHOLDS);
        expect(found).toEqual(tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), options).findings.map(countedPart));
        if (found?.some((f) => f.kind === "subnormal-values") === true) noisy++;
      }),
      { numRuns: 600 },
    );
    expect(noisy).toBeGreaterThan(100);
  });

  it("count a subnormal noise whose limit sits at or near half its value or its value itself as the numbers do", () => {
    // the count takes a side as past its limit without its noise where a lower bound puts the noise at twice the limit
    // or more: limits just above and below the worse side's noise, and just above and below half of it (where that
    // bound meets its own target), are where a bound that decided wrongly would count a finding the numbers do not
    // give, or miss one; the value, worked out when read, is the numbers' too, in the finding's JSON as well
    let lazy = 0;
    let past = 0;
    let within = 0;
    fc.assert(
      fc.property(
        ...NOISE_BAND,
        fc.double({ min: -4, max: 8, noNaN: true }),
        fc.boolean(),
        fc.constantFrom(-1e-6, 1e-6, -1e-3, 1e-3, -1 - 1e-6, -1 + 1e-6, -1 - 1e-3, -1 + 1e-3, -2, -4),
        (role, limits, low, spread, moved, same, off) => {
          const start: MagnitudeProfile = { elements: 65536, zeroFraction: 0, shape: "gaussian", rms: 2 ** low, log2Spread: spread };
          const end = same ? start : riskProfile(start, 2 ** moved);
          const tensor = { id: `dense-1/${role}`, layer: "dense-1", role, start, end } as unknown as TensorPrediction;
          const base: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS, countOnly: true };
          const noise = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), base).worst.subnormalNoise;
          const atRisk = noise * 2 ** off;
          // a limit the format's own rounding noise does not replace (subnormalNoiseLimit)
          fc.pre(noise > 0 && subnormalNoiseLimit(limits, atRisk) === atRisk);
          const t: RiskThresholds = { ...DEFAULT_THRESHOLDS, subnormalNoiseAtRisk: atRisk };
          const full = tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, t), { ...base, thresholds: t }).findings;
          const n = countedFindings(tensor, tensor.start, tensor.end, same, new FormatDecision(limits, t));
          const found = FOUND.slice(0, n);
          const noisy = found.find((f) => f.kind === "subnormal-values");
          // an unread value is an own enumerable accessor: plain data to Object.keys and a spread (which reads it)
          if (noisy !== undefined && Object.getOwnPropertyDescriptor(noisy, "value")?.get !== undefined) {
            lazy++;
            expect(Object.keys(noisy)).toEqual(["format", "subject", "source", "kind", "severity", "value", "threshold", "sentence"]);
            const copy = { ...noisy };
            expect(Object.getOwnPropertyDescriptor(noisy, "value")?.value).toBe(copy.value);
          }
          expect(found.map(countedPart)).toEqual(full.map(countedPart));
          if (noisy === undefined) {
            within++;
            return;
          }
          past++;
          const expected = full.find((f) => f.kind === "subnormal-values") as Finding;
          const { at: _at, ...plain } = { ...expected, sentence: "" };
          expect(JSON.stringify(noisy)).toBe(JSON.stringify(plain));
        },
      ),
      { numRuns: 1500 },
    );
    // both sides of the limit met, and values worked out when read
    expect(past).toBeGreaterThan(200);
    expect(within).toBeGreaterThan(200);
    expect(lazy).toBeGreaterThan(100);
  });

  it("leave laws other than the Gaussian's to the numbers", () => {
    const uniform = { elements: 4096, zeroFraction: 0, shape: "uniform" as const, rms: 1, log2Spread: 0 };
    const other = { id: "a/activation", role: "activation", start: uniform, end: uniform } as unknown as TensorPrediction;
    expect(counted(other, BINARY16, DEFAULT_THRESHOLDS)).toBeNull();
  });
});

describe("findings decided at a loss scale", () => {
  it("are tensorFormatRisk's at that scale, the decision applying the tensor's factor to its profiles", () => {
    // the caller passes the prediction's own profiles and the tensor's loss-scale factor (a gradient's: the scale; 1 for
    // the others), as judgeTensor does; the reference scales them first (riskProfile) and judges the numbers
    let decided = 0;
    let scaled = 0;
    fc.assert(
      fc.property(tensors, fc.constantFrom(BINARY16, BFLOAT16_FTZ, E5M2), fc.integer({ min: -24, max: 24 }), (tensor, limits, k) => {
        const lossScale = 2 ** k;
        const factor = lossScaleFactor(tensor.role, lossScale);
        const same = tensor.start === tensor.end;
        const statistics = tensorStatistics(tensor, lossScale, DEFAULT_THRESHOLDS);
        const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
        const found = decidedFindings(tensor, tensor.start, tensor.end, same, new FormatDecision(limits, DEFAULT_THRESHOLDS), factor);
        if (found !== null) {
          decided++;
          expect(found).toEqual(tensorFormatRisk(tensor, limits, statistics, options).findings);
          if (factor !== 1 && found.length > 0) scaled++;
        }
        const n = countedFindings(tensor, tensor.start, tensor.end, same, new FormatDecision(limits, DEFAULT_THRESHOLDS), factor);
        expect(n).toBeGreaterThanOrEqual(0);
        expect(FOUND.slice(0, n).map(countedPart)).toEqual(tensorFormatRisk(tensor, limits, statistics, { ...options, countOnly: true }).findings.map(countedPart));
      }),
      { numRuns: 1500 },
    );
    expect(decided).toBeGreaterThan(800);
    expect(scaled).toBeGreaterThan(50);
  });
});

describe("weights that share their profile objects", () => {
  it("are decided with one format's decision as each alone, each finding naming its own tensor", () => {
    // a prediction shares one profile object among equal weights (the layers of one width); a decision keeps the latest
    // weights decided without findings by those objects, so these are judged in an order that meets laws again, more
    // of them than it keeps
    let again = 0;
    fc.assert(
      fc.property(
        fc.array(tensors, { minLength: 1, maxLength: 12 }),
        fc.array(fc.nat(), { minLength: 4, maxLength: 40 }),
        fc.constantFrom(BINARY16, BFLOAT16_FTZ, E5M2),
        (drawn, picks, limits) => {
          // every other law starts as the one before it (the same object) and ends as its own
          const laws = drawn.map((law, j) => (j % 2 === 1 ? { ...law, start: (drawn[j - 1] as TensorPrediction).start } : law));
          const decision = new FormatDecision(limits, DEFAULT_THRESHOLDS);
          const seen = new Set<number>();
          picks.forEach((pick, i) => {
            const law = laws[pick % laws.length] as TensorPrediction;
            const tensor = { ...law, id: `dense-${i}/weight`, layer: `dense-${i}`, role: "weight" } as TensorPrediction;
            const same = tensor.start === tensor.end;
            const found = decidedFindings(tensor, tensor.start, tensor.end, same, decision);
            const alone = new FormatDecision(limits, DEFAULT_THRESHOLDS);
            expect(found).toEqual(decidedFindings(tensor, tensor.start, tensor.end, same, alone));
            if (found !== null) {
              // the side numbers the tensor's risk reports (read where the findings were decided)
              expect([decision.startOverflow, decision.endOverflow]).toEqual([alone.startOverflow, alone.endOverflow]);
              const options: TensorRiskOptions = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS };
              expect(found).toEqual(tensorFormatRisk(tensor, limits, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), options).findings);
              if (found.length === 0 && seen.has(pick % laws.length)) again++;
            }
            seen.add(pick % laws.length);
          });
        },
      ),
      { numRuns: 300 },
    );
    expect(again).toBeGreaterThan(200);
  });
});

// a number spread evenly over [min, max] (fast-check's doubles gather at the ends and near 0)
function spreadOver(min: number, max: number): fc.Arbitrary<number> {
  return fc.integer({ min: 0, max: 1 << 20 }).map((i) => min + ((max - min) * i) / (1 << 20));
}

describe("the bounds", () => {
  it("the share below a threshold h is at least 1/2 − Q(h/rms) (the draws z ≤ 0 at the value of z = 0)", () => {
    // P(|x| ≤ h | r) = erf(h/(r·√2)) for a Gaussian magnitude of rms r = rms·2^(S·z) (Abramowitz & Stegun 7.1.1), over
    // z ~ N(0, 1) by the fine quadrature; Q(a) = erfc(a/√2)/2
    fc.assert(
      fc.property(fc.double({ min: -12, max: 6, noNaN: true }), fc.double({ min: 0, max: 6, noNaN: true }), (log2A, spread) => {
        const a = 2 ** log2A;
        const share = fineMean((z) => 1 - erfc((a * 2 ** (-spread * z)) / Math.SQRT2));
        expect(share).toBeGreaterThanOrEqual(0.5 - erfc(a / Math.SQRT2) / 2 - 1e-15);
      }),
      { numRuns: 400 },
    );
  });

  it("capWithin: E[min(1, c·e^(−m·z))] is at most the target wherever it says so", () => {
    fc.assert(
      fc.property(fc.double({ min: -40, max: 5, noNaN: true }), fc.double({ min: 0, max: 6, noNaN: true }), fc.double({ min: -12, max: 0, noNaN: true }), (log10C, m, log10Target) => {
        const c = 10 ** log10C;
        const target = 10 ** log10Target;
        const exact = fineMean((z) => Math.min(1, c * Math.exp(-m * z)));
        if (capWithin(c, m, target)) expect(exact).toBeLessThanOrEqual(target * (1 + 1e-9) + 1e-300);
        // the exact form past the first bound: what is within half the target is told so
        if (exact <= target / 2) expect(capWithin(c, m, target)).toBe(true);
      }),
      { numRuns: 400 },
    );
  });

  it("noiseWithin: the subnormal noise's draw integral is at most the target wherever it says so", () => {
    // the noise's definition (src/risk/subnormal-noise.ts): per draw r, P(flush bound < |x| < h − Δ/2 | r)·Δ²/(12r²), Δ the
    // smallest subnormal (IEEE 754-2019 §3.3), for Gaussian magnitudes P(|x| ≤ t | r) = erf(t/(r√2)) (A&S 7.1.1, 26.2.29)
    const gaussianBelow = (r: number, t: number): number => 1 - erfc(t / (r * Math.SQRT2));
    let told = 0;
    fc.assert(
      fc.property(side, fc.constantFrom(BINARY16, E5M2, E4M3_SATURATING), fc.double({ min: -14, max: -3, noNaN: true }), (profile, limits, log10Target) => {
        const target = 10 ** log10Target;
        if (!noiseWithin(profile, limits, target)) return;
        told++;
        const delta = limits.smallest;
        const high = limits.minNormal - delta / 2;
        const bound = profile.bound;
        const nonzero = profile.rms > 0 && profile.elements * (1 - profile.zeroFraction) > 0;
        const exact = !nonzero
          ? 0
          : fineMean((z) => {
              const r = profile.rms * 2 ** (profile.log2Spread * z);
              const below = (t: number) => (bound !== undefined && t >= bound ? 1 : gaussianBelow(r, t));
              return (Math.max(0, below(high) - below(limits.flushBound)) * delta * delta) / 12 / (r * r);
            });
        expect(exact).toBeLessThanOrEqual(target * (1 + 1e-6));
      }),
      { numRuns: 600 },
    );
    expect(told).toBeGreaterThan(100);
  });

  it("gaussianNoiseAbove: the subnormal noise's draw integral is at least the target wherever it says so", () => {
    // the noise's definition as in noiseWithin's test above, by the independent fine quadrature; sides near the band
    // (their rms 12 binades under the smallest normal to 10 above it), spreads of half a
    // binade to 4.5, bounds above the rms; targets from an eighth of the integral to a little past it
    const gaussianBelow = (r: number, t: number): number => 1 - erfc(t / (r * Math.SQRT2));
    let told = 0;
    let near = 0;
    fc.assert(
      fc.property(
        fc.constantFrom(BINARY16, E5M2, E4M3_SATURATING),
        spreadOver(-12, 10),
        spreadOver(0.5, 4.5),
        fc.oneof(fc.constant(-1), spreadOver(0, 12)),
        spreadOver(-3, 0.25),
        (limits, aboveNormal, spread, boundAbove, off) => {
          // the rms a number of binades from the smallest normal
          const log2Rms = Math.log2(limits.minNormal) + aboveNormal;
          const rms = 2 ** log2Rms;
          const bound = boundAbove >= 0 ? 2 ** (log2Rms + boundAbove) : 0;
          const delta = limits.smallest;
          const high = limits.minNormal - delta / 2;
          const exact = fineMean((z) => {
            const r = rms * 2 ** (spread * z);
            const below = (t: number) => (bound > 0 && t >= bound ? 1 : gaussianBelow(r, t));
            return (Math.max(0, below(high) - below(limits.flushBound)) * delta * delta) / 12 / (r * r);
          });
          // never past the integral itself
          expect(gaussianNoiseAbove(rms, spread * Math.LN2, bound, limits, exact * (1 + 1e-6))).toBe(false);
          const target = exact * 2 ** off;
          if (!(target > 0) || !gaussianNoiseAbove(rms, spread * Math.LN2, bound, limits, target)) return;
          told++;
          expect(exact).toBeGreaterThanOrEqual(target * (1 - 1e-6));
          if (off > -1) near++;
        },
      ),
      { numRuns: 1500 },
    );
    // told often, and within a factor 2 of the integral at times (the bound is not far below it)
    expect(told).toBeGreaterThan(100);
    expect(near).toBeGreaterThan(10);
  });

  it("noiseAtMost is the comparison of the noise itself with the limit", () => {
    let bounded = 0;
    fc.assert(
      fc.property(side, fc.constantFrom(BINARY16, E5M2, E4M3_SATURATING), fc.double({ min: -10, max: -3, noNaN: true }), (profile, limits, log10Limit) => {
        const limit = 10 ** log10Limit;
        expect(noiseAtMost(profile, limits, limit)).toBe(subnormalNoise(profile, limits) <= limit);
        if (noiseWithin(profile, limits, limit / 2) && subnormalNoise(profile, limits) > 0) bounded++;
      }),
      { numRuns: 1500 },
    );
    // the bounds decide some with a band of subnormals, not only the empty ones
    expect(bounded).toBeGreaterThan(50);
  });
});

// squared error: no tensor shares a stored array (whose parts carry the array's max, as the reference below does not)
const SPEC = `name: lazy
input: { features: 64 }
training:
  batch: 32
  loss: { kind: mean-squared-error }
  horizon: { steps: 1000, weight-growth: 3 }
precision:
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary16
  accumulate: binary32
layers:
  - type: dense
    width: 64
  - relu
  - type: dense
    width: 64
  - tanh
  - type: dense
    width: 10
`;

describe("a result whose numbers are worked out when first read", () => {
  const parsed = parseSpec(SPEC, "lazy.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  const spec = parsed.spec;
  const built = buildGraph(spec);
  if (!built.ok) throw new Error("graph");
  const prediction = predict(built.graph, spec);
  // bfloat16 and binary32 not in the plan: judged holding its reduced entries, or every tensor reported in them
  const options = { lossScale: 2 ** 10, everyFormat: true, formats: ["binary16", "bfloat16", "binary32"] as const };

  // every tensor's statistics and risks as tensorStatistics and tensorFormatRisk give them at once (the definition)
  function eager(lossScale = 2 ** 10): unknown[] {
    return prediction.tensors.map((t) => {
      const statistics = tensorStatistics(t, lossScale, DEFAULT_THRESHOLDS);
      return {
        statistics,
        risks: options.formats.map((format) => {
          const plan = planFor(spec.precision, format);
          const entry = t.role === "loss" ? "accumulate" : t.slot;
          return tensorFormatRisk(t, limitsFor(plan, format), statistics, { judged: plan[entry] === format, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS });
        }),
      };
    });
  }

  it("reads the numbers of the definition, in whichever order they are read, as JSON and as fields", () => {
    const expected = JSON.stringify(eager());
    const first = judgePrediction(spec, prediction, { ...options, formats: [...options.formats] });
    // risks first, the worst before the ends, then the statistics
    for (const t of first.tensors) for (const r of t.risks) void [r.worst.overflowRisk, r.end.footroom, r.start.headroom];
    expect(JSON.stringify(first.tensors.map((t) => ({ statistics: t.statistics, risks: t.risks })))).toBe(expected);
    // the statistics first, then JSON alone
    const second = judgePrediction(spec, prediction, { ...options, formats: [...options.formats] });
    for (const t of second.tensors) void t.statistics.end.max;
    expect(JSON.stringify(second.tensors.map((t) => ({ statistics: t.statistics, risks: t.risks })))).toBe(expected);
    expect(JSON.stringify(judgePrediction(spec, prediction, { ...options, formats: [...options.formats] }))).toBe(JSON.stringify(first));
  });

  it("reports the overflow probabilities its findings were decided with as the definition gives them", () => {
    // at 2^20 the gradients overflow binary16 with probabilities between 0 and 1: integrated while the findings are
    // decided, and those values are the ones the numbers report
    const scaled = { ...options, lossScale: 2 ** 20, formats: [...options.formats] };
    const result = judgePrediction(spec, prediction, scaled);
    const integrated = result.tensors.flatMap((t) => t.risks).filter((r) => r.findings.some((f) => f.kind === "overflow" && f.value > 1e-6 && f.value < 0.99));
    expect(integrated.length).toBeGreaterThan(3);
    expect(JSON.stringify(result.tensors.map((t) => ({ statistics: t.statistics, risks: t.risks })))).toBe(JSON.stringify(eager(2 ** 20)));
  });

  it("stays plain data: the fields are the objects' own, in the documented order, and an assigned one is kept", () => {
    const result = judgePrediction(spec, prediction, { ...options, formats: [...options.formats] });
    const tensor = result.tensors[1]!;
    expect(Object.keys(tensor)).toEqual(["id", "layer", "layerIndex", "family", "role", "slot", "shape", "source", "start", "end", "statistics", "risks", "verdict"]);
    expect(Object.keys(tensor.risks[0]!)).toEqual(["format", "judged", "scaleLog2", "start", "end", "worst", "verdict", "findings"]);
    // a copy by spread or by structuredClone holds every number
    const spread = { ...tensor.risks[0]! };
    expect(JSON.stringify(spread)).toBe(JSON.stringify(tensor.risks[0]));
    expect(structuredClone(result)).toEqual(JSON.parse(JSON.stringify(result)));
    // one object per field, read as often as it is read
    expect(tensor.statistics).toBe(tensor.statistics);
    expect(tensor.risks[0]!.worst).toBe(tensor.risks[0]!.worst);
    const worst = { ...tensor.risks[0]!.worst, overflowRisk: 0.5 };
    tensor.risks[0]!.worst = worst;
    expect(tensor.risks[0]!.worst).toBe(worst);
    expect(Object.keys(tensor.risks[0]!)).toEqual(["format", "judged", "scaleLog2", "start", "end", "worst", "verdict", "findings"]);
    // the risks, made when first read, are one array read as often as it is read, and an assigned one is kept
    const other = result.tensors[2]!;
    expect(other.risks).toBe(other.risks);
    expect(other.risks[0]).toBe(other.risks[0]);
    const risks = [{ ...other.risks[0]! }];
    other.risks = risks;
    expect(other.risks).toBe(risks);
    expect(Object.keys(other)).toEqual(["id", "layer", "layerIndex", "family", "role", "slot", "shape", "source", "start", "end", "statistics", "risks", "verdict"]);
  });

  it("gives each tensor's risks their own findings arrays, and each format the findings its tensors' risks hold", () => {
    const result = judgePrediction(spec, prediction, { ...options, lossScale: 2 ** 20, formats: [...options.formats] });
    const arrays = result.tensors.flatMap((t) => t.risks.map((r) => r.findings));
    expect(new Set(arrays).size).toBe(arrays.length);
    for (const format of result.formats) {
      const held = result.tensors.flatMap((t) => t.risks.filter((r) => r.format === format.format).flatMap((r) => r.findings));
      expect(format.findings.filter((f) => f.source === "tensor")).toEqual(held);
      expect(format.tensorsJudged).toBe(result.tensors.filter((t) => t.risks.some((r) => r.format === format.format && r.judged)).length);
    }
  });
});
