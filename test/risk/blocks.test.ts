import { describe, expect, it } from "vitest";
import { FORMATS, roundTo } from "../../src/formats/index.js";
import { createRandom } from "../../src/numeric/index.js";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { blockScaledRisk } from "../../src/risk/blocks.js";
import { DEFAULT_THRESHOLDS, tensorFormatRisk, tensorStatistics, type RangeLimits, type RiskThresholds } from "../../src/risk/index.js";
import { E4M3_NAN, E4M3_SATURATING } from "./limits.js";

/**
 * The conversion rule itself, element by element, with the format model (SCIENCE.md §1.4, OCP MX v1.0 §6 /
 * Rouhani et al. 2023 Alg. 1, from memory): X = 2^(⌊log2 max|V|⌋ − emax), P_i = RNE(V_i/X) saturated.
 */
function monteCarlo(format: (typeof FORMATS)["e4m3"], blocks: number, seed: number) {
  const random = createRandom(seed);
  const block = new Float64Array(32);
  let flushed = 0;
  let clipped = 0;
  let energy = 0;
  let lostEnergy = 0;
  for (let b = 0; b < blocks; b++) {
    random.fillNormal(block);
    let max = 0;
    for (const v of block) max = Math.max(max, Math.abs(v));
    const X = 2 ** (Math.floor(Math.log2(max)) - format.emax);
    for (const v of block) {
      const q = roundTo(format, v / X, { overflow: "saturate" });
      energy += v * v;
      if (q === 0 && v !== 0) {
        flushed++;
        lostEnergy += v * v;
      }
      if (Math.abs(q) === format.maxFinite && Math.abs(v / X) > format.maxFinite) clipped++;
    }
  }
  return { flushedFraction: flushed / (32 * blocks), clippedFraction: clipped / (32 * blocks), flushedEnergy: lostEnergy / energy };
}

describe("blockScaledRisk (per-block scale factors, blocks of 32)", () => {
  it("agrees with a Monte Carlo of the conversion rule for e4m3", () => {
    const analytic = blockScaledRisk(FORMATS.e4m3);
    const measured = monteCarlo(FORMATS.e4m3, 20_000, 11);
    // 640,000 elements: the clipped share (about 0.5%) has a standard error near 1e-4
    expect(analytic.clippedFraction).toBeGreaterThan(0);
    expect(Math.abs(analytic.clippedFraction - measured.clippedFraction)).toBeLessThan(0.1 * measured.clippedFraction + 3e-4);
    // flushing is too rare to count in a Monte Carlo of this size (a few elements); bound it by hand instead:
    // block maxima of 32 |Z| lie in [2^0, 2^3) almost surely, so the flush level 2^(m − 8) · 2^-10 lies in
    // [2^-18, 2^-16): the share is between P(|Z| < 2^-18) and P(|Z| < 2^-16) (≈ 0.798·t for small t, SCIENCE.md §4)
    expect(analytic.flushedFraction).toBeGreaterThan(0.798 * 2 ** -18);
    expect(analytic.flushedFraction).toBeLessThan(0.798 * 2 ** -16);
    expect(measured.flushedFraction).toBeLessThan(1e-4);
  });

  it("agrees with a Monte Carlo for e5m2, whose wider range flushes less", () => {
    const analytic = blockScaledRisk(FORMATS.e5m2);
    const measured = monteCarlo(FORMATS.e5m2, 10_000, 12);
    expect(Math.abs(analytic.clippedFraction - measured.clippedFraction)).toBeLessThan(0.1 * measured.clippedFraction + 3e-4);
    expect(analytic.flushedFraction).toBeLessThan(blockScaledRisk(FORMATS.e4m3).flushedFraction);
    expect(analytic.flushedFraction).toBeLessThan(0.798 * 2 ** -23); // flush level 2^(m − 15) · 2^-17, m < 3
  });

  it("never clips a block whose maximum sits in the lower part of its binade (e4m3: below 1.75·2^m)", () => {
    // the clipped share is at most one element per block plus its near neighbours: well under 1/32 + slack
    expect(blockScaledRisk(FORMATS.e4m3).clippedFraction).toBeLessThan(1 / 32);
  });
});

describe("check with per-block scale factors", () => {
  it("flushes no more than per-tensor scaling and turns saturation into bounded clipping", async () => {
    const { loadSpec } = await import("../../src/spec/index.js");
    const { check } = await import("../../src/check.js");
    const { ROOT } = await import("../helpers/run.js");
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/transformer-encoder.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    const eightBit = loaded.spec.plans.find((p) => p.weights === "e4m3");
    if (!eightBit) throw new Error("the example has no 8-bit plan");
    const judged = (scaling: "tensor" | "block") => check({ ...loaded.spec, precision: { ...eightBit, scaling, overflow: "saturate" } });
    const worst = (r: ReturnType<typeof judged>) =>
      Math.max(...r.tensors.flatMap((t) => t.risks.filter((x) => x.judged && x.format === "e4m3").map((x) => x.worst.flushedFraction)));
    const perTensor = judged("tensor");
    const perBlock = judged("block");
    expect(worst(perBlock)).toBeLessThanOrEqual(worst(perTensor));
    const saturations = (r: ReturnType<typeof judged>) => r.tensors.flatMap((t) => t.risks.flatMap((x) => x.findings)).filter((f) => f.kind === "saturation");
    expect(saturations(perBlock)).toHaveLength(0);
  });

  it("judges an 8-bit plan the same whether its conversions saturate or give infinity or NaN (no scale reaches E8M0's limit)", async () => {
    const { loadSpec } = await import("../../src/spec/index.js");
    const { check } = await import("../../src/check.js");
    const { ROOT } = await import("../helpers/run.js");
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/transformer-encoder.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    const eightBit = loaded.spec.plans.find((p) => p.weights === "e4m3");
    if (!eightBit) throw new Error("the example has no 8-bit plan");
    const judged = (overflow: "saturate" | "infinity-or-nan") => check({ ...loaded.spec, precision: { ...eightBit, scaling: "block", overflow } });
    const eightBitFindings = (r: ReturnType<typeof judged>) =>
      r.tensors.flatMap((t) => t.risks.flatMap((x) => x.findings)).filter((f) => f.format === "e4m3" || f.format === "e5m2");
    const nan = judged("infinity-or-nan");
    expect(eightBitFindings(nan).filter((f) => f.kind === "overflow")).toEqual([]);
    const held = (r: ReturnType<typeof judged>) =>
      r.tensors.flatMap((t) => t.risks.filter((x) => x.judged && (x.format === "e4m3" || x.format === "e5m2")).map((x) => [t.id, x.format, x.worst.overflowRisk]));
    expect(held(nan).length).toBeGreaterThan(0);
    expect(held(nan)).toEqual(held(judged("saturate")));
    expect(eightBitFindings(nan).map((f) => [f.subject, f.kind])).toEqual(eightBitFindings(judged("saturate")).map((f) => [f.subject, f.kind]));
  });
});

// e5m2 written out from the OCP 8-bit specification (SCIENCE.md check values 12, 14, 15): largest finite 57344,
// 61440 rounds to infinity, 2^-17 and below to zero
const E5M2_INFINITY: RangeLimits = {
  format: "e5m2",
  maxFinite: 57344,
  overflowLevel: 61440,
  saturates: false,
  flushBound: 2 ** -17,
  minNormal: 2 ** -14,
  smallest: 2 ** -16,
  unitRoundoff: 2 ** -3,
};
const E5M2_SATURATING: RangeLimits = { ...E5M2_INFINITY, overflowLevel: 57344, saturates: true };

function activation(start: Partial<MagnitudeProfile>): TensorPrediction {
  const profile: MagnitudeProfile = { elements: 1e6, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0, ...start };
  return { id: "mixer/activation", layer: "mixer", layerIndex: 1, family: "dense", role: "activation", slot: "activations", shape: [1000, 1000], ledger: [], source: "predicted", start: profile, end: profile };
}

function blockJudged(t: TensorPrediction, limits: RangeLimits) {
  const format = limits.format === "e4m3" ? FORMATS.e4m3 : FORMATS.e5m2;
  return tensorFormatRisk(t, limits, tensorStatistics(t, 1, DEFAULT_THRESHOLDS), {
    judged: true,
    perTensorScaling: true,
    blockScaling: blockScaledRisk(format),
    thresholds: DEFAULT_THRESHOLDS as RiskThresholds,
  });
}

// The conversion of one block (OCP MX v1.0 §6 / Rouhani et al. 2023 Alg. 1, from memory; SCIENCE.md §1.4): the
// shared exponent ⌊log2 max|V|⌋ − emax, clamped to the E8M0 range 2^-127 … 2^127 [S]; each element clamped to ± the
// largest normal while the scale follows the block's maximum. Past E8M0's largest scale the maximum lands at
// 2^(emax+1) or more, beyond the element range, and the plan's overflow mode decides; below its smallest the scale
// stays at 2^-127 and small elements flush.
function convertBlock(block: Float64Array, format: (typeof FORMATS)["e4m3"], overflow: "saturate" | "infinity-or-nan"): Float64Array {
  let max = 0;
  for (const v of block) max = Math.max(max, Math.abs(v));
  const shared = Math.floor(Math.log2(max)) - format.emax;
  const X = 2 ** Math.max(-127, Math.min(127, shared));
  return block.map((v) => roundTo(format, v / X, { overflow: shared > 127 ? overflow : "saturate" }));
}

describe("overflow with per-block scale factors", () => {
  it("a Gaussian tensor converted without saturation is not judged overflowing: the block conversion clamps its binade's top", () => {
    // the rule itself on 20,000 blocks: every stored value finite, and the largest clipped by at most 2^(emax+1)/max
    // (e4m3 512/448, e5m2 65536/57344: both 8/7)
    const random = createRandom(21);
    const block = new Float64Array(32);
    for (const format of [FORMATS.e4m3, FORMATS.e5m2]) {
      let nonFinite = 0;
      let clipped = 0;
      for (let b = 0; b < 20_000; b++) {
        random.fillNormal(block);
        const stored = convertBlock(block, format, "infinity-or-nan");
        let max = 0;
        for (const v of block) max = Math.max(max, Math.abs(v));
        const X = 2 ** (Math.floor(Math.log2(max)) - format.emax);
        for (let i = 0; i < 32; i++) {
          if (!Number.isFinite(stored[i] as number)) nonFinite++;
          const ratio = Math.abs((block[i] as number) / X) / Math.abs(stored[i] as number);
          if (Math.abs((block[i] as number) / X) > format.maxFinite) {
            clipped++;
            expect(ratio).toBeLessThan(8 / 7);
          }
        }
      }
      expect(nonFinite).toBe(0);
      expect(clipped).toBeGreaterThan(0); // the clamp is at work: the floor rule puts block maxima past the largest value
    }
    // so the judgement: no overflow for a million Gaussian elements, in e4m3 and e5m2, under either overflow mode
    for (const limits of [E4M3_NAN, E4M3_SATURATING, E5M2_INFINITY, E5M2_SATURATING]) {
      const risk = blockJudged(activation({ rms: 3 }), limits);
      expect(risk.worst.overflowRisk).toBe(0);
      expect(risk.findings).toEqual([]);
      expect(risk.verdict).toBe("fits");
    }
  });

  it("an all-zero tensor (a bias at initialisation) cannot overflow", () => {
    const risk = blockJudged(activation({ zeroFraction: 1, rms: 0 }), E4M3_NAN);
    expect(risk.worst.overflowRisk).toBe(0);
    expect(risk.verdict).toBe("fits");
  });

  it("still overflows where a block's scale is clamped at E8M0's largest, 2^127, as the element-by-element rule does", () => {
    // constant magnitudes c around the level where ⌊log2 c⌋ − emax passes 127 (e4m3: 2^136, e5m2: 2^143): the check
    // overflows exactly where the rule gives a non-finite value, and saturates there instead when the plan saturates
    for (const [format, nan, saturating] of [
      [FORMATS.e4m3, E4M3_NAN, E4M3_SATURATING],
      [FORMATS.e5m2, E5M2_INFINITY, E5M2_SATURATING],
    ] as const) {
      const level = 2 ** (127 + format.emax + 1);
      for (const c of [level / 2, level * (1 - 2 ** -20), level, level * 1.5, level * 4]) {
        const stored = convertBlock(new Float64Array(32).fill(c), format, "infinity-or-nan")[0] as number;
        const expected = Number.isFinite(stored) ? 0 : 1;
        const t = activation({ shape: "constant", rms: c });
        const risk = blockJudged(t, nan);
        expect(risk.worst.overflowRisk).toBe(expected);
        expect(risk.findings.map((f) => [f.kind, f.severity])).toEqual(expected ? [["overflow", "fails"]] : []);
        const clipped = blockJudged(t, saturating);
        expect(clipped.worst.overflowRisk).toBe(expected);
        expect(clipped.findings.map((f) => [f.kind, f.severity])).toEqual(expected ? [["saturation", "fails"]] : []);
      }
      // a Gaussian tensor whose largest elements reach that level (rms 2^(level's exponent + 4)) overflows almost surely,
      // one 2^16 below it almost never
      expect(blockJudged(activation({ rms: level * 16 }), nan).worst.overflowRisk).toBeGreaterThan(0.99);
      expect(blockJudged(activation({ rms: level * 2 ** -16 }), nan).worst.overflowRisk).toBeLessThan(1e-12);
    }
  });

  it("flushes below 2^-127 times the element flush bound where a block's scale is clamped at E8M0's smallest", () => {
    // e4m3, rms 2^-125: a block's maximum of 32 normals lies near 2^-124, so its shared exponent would be about −132
    // and stays at −127; elements at or below 2^-127 · 2^-10 = 2^-137, i.e. |Z| ≤ 2^-12, flush: about 0.798 · 2^-12
    // (P(|Z| ≤ t) ≈ √(2/π)·t for small t, SCIENCE.md §4), against the block rule's 5.4e-6 where the scale follows
    const rms = 2 ** -125;
    const random = createRandom(31);
    const block = new Float64Array(32);
    let flushed = 0;
    const blocks = 50_000;
    for (let b = 0; b < blocks; b++) {
      random.fillNormal(block);
      for (let i = 0; i < 32; i++) block[i] = (block[i] as number) * rms;
      const stored = convertBlock(block, FORMATS.e4m3, "infinity-or-nan");
      for (let i = 0; i < 32; i++) if (stored[i] === 0 && block[i] !== 0) flushed++;
    }
    const measured = flushed / (32 * blocks); // about 310 of 1.6 million: a standard error near 6%
    const risk = blockJudged(activation({ rms }), E4M3_NAN);
    expect(Math.abs(risk.worst.flushedFraction - measured)).toBeLessThan(0.2 * measured);
    expect(risk.worst.flushedFraction).toBeCloseTo(Math.sqrt(2 / Math.PI) * 2 ** -12, 5);
    // e5m2 at rms 2^-118: the shared exponent would be about −132 as well; flushed at or below 2^-127 · 2^-17, |Z| ≤ 2^-26
    const e5m2 = blockJudged(activation({ rms: 2 ** -118 }), E5M2_INFINITY);
    expect(e5m2.worst.flushedFraction / (Math.sqrt(2 / Math.PI) * 2 ** -26)).toBeCloseTo(1, 3);
    // where the scale follows the block (rms 1), the block rule's share stands
    expect(blockJudged(activation({ rms: 1 }), E4M3_NAN).worst.flushedFraction).toBe(blockScaledRisk(FORMATS.e4m3).flushedFraction);
  });
});
