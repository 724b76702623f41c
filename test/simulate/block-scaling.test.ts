import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { FORMATS } from "../../src/formats/index.js";
import { createRandom } from "../../src/numeric/index.js";
import { blockScaledRisk } from "../../src/risk/blocks.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";
import { runSimulation } from "../../src/simulate/engine.js";
import { applyScales, countScaled, roundScaledInPlace, storageScales } from "../../src/simulate/scaling.js";
import { measureTensor } from "../../src/simulate/stats.js";

// The block conversion as SCIENCE.md §1.4 states it (OCP Microscaling v1.0 §6 / Rouhani et al. 2023 Alg. 1, from
// memory): blocks of 32 share X = 2^(⌊log2 max|V|⌋ − emax), X clamped to E8M0's 2^-127 … 2^127, and each element is
// stored as RNE(V/X) clamped to ± the element format's largest normal.

/** Store `values` in `format` with per-block scales, as the simulator stores a tensor. */
function storeBlocks(values: number[], format: (typeof FORMATS)["e4m3"], overflow: "saturate" | "infinity-or-nan"): Float64Array {
  const data = Float64Array.from(values);
  const scales = storageScales(data, format, "block");
  applyScales(data, scales);
  roundScaledInPlace(format, data, scales, { overflow });
  applyScales(data, scales, true);
  return data;
}

function block(first: number, rest = 1): number[] {
  return [first, ...new Array<number>(31).fill(rest)];
}

describe("per-block scale factors in the simulator", () => {
  it("clamps a block maximum that the floor rule puts past e4m3's 448, under either overflow mode", () => {
    // max 500: X = 2^(8 − 8) = 1, RNE(500) = 512 in e4m3's grid (spacing 64 in [256, 512)), clamped to 448. The
    // non-saturating conversion of the OCP 8-bit spec would give NaN for 500 > 464 (SCIENCE.md §1.3 table)
    for (const overflow of ["saturate", "infinity-or-nan"] as const) {
      const stored = storeBlocks(block(500), FORMATS.e4m3, overflow);
      expect(stored[0]).toBe(448);
      expect(stored[1]).toBe(1);
    }
    // e5m2 (emax 15): max 60000·2^-3 = 7500 → X = 2^(12 − 15), V/X = 60000 rounds to 61440 past 57344: clamped
    expect(storeBlocks(block(7500), FORMATS.e5m2, "infinity-or-nan")[0]).toBe(57344 * 2 ** -3);
  });

  it("overflows as the plan says only in a block whose shared exponent would pass E8M0's 127", () => {
    // e4m3: max 2^137 needs shared exponent 137 − 8 = 129 > 127, so X = 2^127 and V/X = 1024 > 464: NaN (no infinity
    // in e4m3, OCP 8-bit spec) or 448·2^127 when saturating; the block before it (max 500) is clamped as always
    const values = [...block(500), ...block(2 ** 137)];
    const nan = storeBlocks(values, FORMATS.e4m3, "infinity-or-nan");
    expect(nan[0]).toBe(448);
    expect(nan[32]).toBeNaN();
    // the clamped block's small elements are stored at 2^127 spacing: 1/2^127 underflows e4m3 and flushes to 0
    expect(nan[33]).toBe(0);
    expect(storeBlocks(values, FORMATS.e4m3, "saturate")[32]).toBe(448 * 2 ** 127);
    // e5m2: max 2^145 → shared exponent 130, V/X = 2^18 > 61440: +infinity (IEEE-like specials, OCP 8-bit spec)
    expect(storeBlocks(block(2 ** 145), FORMATS.e5m2, "infinity-or-nan")[0]).toBe(Infinity);
    // at the edge: max 2^136 − ε keeps shared exponent 127 and is clamped, 2^136 needs 128 and overflows
    expect(storeBlocks(block(2 ** 136 * (1 - 2 ** -20)), FORMATS.e4m3, "infinity-or-nan")[0]).toBe(448 * 2 ** 127);
    expect(storeBlocks(block(2 ** 136), FORMATS.e4m3, "infinity-or-nan")[0]).toBeNaN();
  });

  it("counts the conversion's own clamp as clipped, and only a clamped block's elements as overflowed or saturated", () => {
    const values = Float64Array.from([...block(500), ...block(2 ** 137, 2 ** 130), ...block(1)]);
    for (const overflow of ["saturate", "infinity-or-nan"] as const) {
      const counts = measureTensor(values, FORMATS.e4m3, { overflow }, storageScales(values, FORMATS.e4m3, "block")).counts;
      // the first block's maximum, 500, is clamped to 448 (the first case above): 1 of the 3 · 32 = 96 elements
      expect(counts.clipped).toBe(1 / 96);
      // the clamped block: 2^137/2^127 = 1024 and 2^130/2^127 = 8, so only its maximum leaves the range
      expect(overflow === "saturate" ? counts.saturated : counts.overflowed).toBe(1 / 96);
      expect(overflow === "saturate" ? counts.overflowed : counts.saturated).toBe(0);
    }
    // without scale factors there is no clamp of the conversion's own, and no clipped count
    expect(measureTensor(values, FORMATS.e4m3, { overflow: "saturate" }).counts.clipped).toBeUndefined();
  });

  it("clips Gaussian blocks as often as the block rule says RNE passes the largest value", () => {
    // RNE sends V/X past the largest value exactly when it passes the overflow threshold, max + half an ulp (464 for
    // e4m3, 61440 for e5m2; SCIENCE.md §1.3), so the clipped share is the block rule's clip share at that level
    for (const name of ["e4m3", "e5m2"] as const) {
      const format = FORMATS[name];
      const data = createRandom(21).fillNormal(new Float64Array(640_000));
      const scales = storageScales(data, format, "block");
      applyScales(data, scales);
      const { counts, clipped } = countScaled(format, data, scales, { overflow: "infinity-or-nan" });
      const share = clipped / data.length;
      const analytic = blockScaledRisk({ emax: format.emax, flushBound: format.flushBound, maxFinite: format.overflowThreshold }).clippedFraction;
      // 20,000 blocks: the clipped share (0.4–0.6%) has a standard error near 1e-4 (blocks.test.ts's tolerance)
      expect(Math.abs(share - analytic)).toBeLessThan(0.1 * analytic + 3e-4);
      expect(counts.overflowed + counts.saturated).toBe(0);
    }
  });
});

const SPEC = (scale: string, overflow: string): string => `name: tide-gauge-blocks
description: classifies readings of a fictional harbour's tide gauges into 16 sea states
input: { features: 256, scale: ${scale} }
training:
  batch: 64
  loss: { kind: cross-entropy, classes: 16 }
  optimizer: { kind: sgd, learning-rate: { peak: 0.01, end: 0.01 } }
precision:
  name: eight-bit-blocks
  activations: e4m3
  weights: e4m3
  gradients: e5m2
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
  overflow: ${overflow}
  scaling: block
layers:
  - { type: dense, width: 256, init: he-normal }
  - relu
  - { type: dense, width: 256, init: he-normal }
  - relu
  - { type: dense, name: classes, width: 16, init: glorot-normal }
`;

function spec(text: string): NetworkSpec {
  const parsed = parseSpec(text, "tide-gauge-blocks.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

describe("a block-scaled 8-bit plan simulated and checked", () => {
  it.each(["infinity-or-nan", "saturate"])("overflow %s: no NaN, no overflow, as check judges it", (overflow) => {
    const s = spec(SPEC("1.0", overflow));
    const result = runSimulation(s, { draws: 2 });
    expect(result.initialLoss.every(Number.isFinite)).toBe(true);
    const answer = check(s);
    const judged = new Map(answer.tensors.map((t) => [t.id, t]));
    const clipShare = blockScaledRisk(FORMATS.e4m3).clippedFraction;
    let weights = 0;
    for (const t of result.tensors) {
      for (const draw of t.draws) {
        expect(draw.counts.nonFinite, t.id).toBe(0);
        expect(draw.counts.overflowed + draw.counts.saturated, t.id).toBe(0);
      }
      // check: no overflow risk for any tensor it judges in an 8-bit format with these scale factors
      const risk = judged.get(t.id)?.risks.find((r) => r.format === t.median.counts.format);
      if (risk !== undefined) expect(risk.worst.overflowRisk, t.id).toBeLessThan(DEFAULT_THRESHOLDS.overflowAtRisk);
      // the weights are Gaussian draws: clipped (by at most 512/448), never beyond what the block rule puts past 448
      if (t.role === "weight" && t.median.rms > 0) {
        weights++;
        expect(t.median.counts.clipped, t.id).toBeGreaterThan(0);
        expect(t.median.counts.clipped!, t.id).toBeLessThan(clipShare);
      }
    }
    // the three dense layers of SPEC (invented for the demo), one weight each (bias of zeros: rms 0, not counted)
    expect(weights).toBe(3);
    expect(answer.formats.filter((f) => f.format !== "binary32").map((f) => [f.format, f.verdict])).toEqual([
      ["e4m3", "fits"],
      ["e5m2", "fits"],
    ]);
  });

  it.each(["infinity-or-nan", "saturate"] as const)("overflow %s: an input past 2^136 leaves e4m3's range in both, as check says", (overflow) => {
    // rms 1e42: elements at or above 2^136 ≈ 8.7e40 need a shared exponent past 127 (SCIENCE.md §1.4), a share
    // P(|Z| ≥ 0.0871) = 0.931 of a Gaussian (2Φ(−0.0871), erfc tables); with the clamped scale 2^127 the elements from
    // 464·2^127 ≈ 7.9e40 up pass the range too, P(|Z| ≥ 0.0790) = 0.937
    const s = spec(SPEC("1.0e42", overflow));
    const input = runSimulation(s).tensors.find((t) => t.id === "input/activation")!;
    const out = overflow === "saturate" ? input.median.counts.saturated : input.median.counts.overflowed;
    expect(out).toBeGreaterThan(0.92);
    expect(out).toBeLessThan(0.95);
    const judged = check(s).tensors.find((t) => t.id === "input/activation")!;
    const e4m3 = judged.risks.find((r) => r.format === "e4m3")!;
    // any of 64 · 256 elements, each past the range with probability 0.93 (above): 1 − 0.07^16384, 1 to double precision
    expect(e4m3.worst.overflowRisk).toBeGreaterThan(0.99);
    expect(e4m3.findings.map((f) => [f.kind, f.severity])).toContainEqual([overflow === "saturate" ? "saturation" : "overflow", "fails"]);
  });
});

describe("the simulation's assumptions", () => {
  it("state the block conversion's clamp for a block-scaled plan, and only there", () => {
    const blocks = runSimulation(spec(SPEC("1.0", "infinity-or-nan")), { shrink: { width: 4 } }).assumptions.join(" ");
    expect(blocks).toContain("only a block that would need a scale above 2^127 overflows or saturates");
    const perTensor = runSimulation(spec(SPEC("1.0", "infinity-or-nan").replace("scaling: block", "scaling: tensor")), { shrink: { width: 4 } }).assumptions.join(" ");
    expect(perTensor).not.toContain("per block");
  });
});
