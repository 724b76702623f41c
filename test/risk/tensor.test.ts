import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import {
  DEFAULT_THRESHOLDS,
  FINDING_INFO,
  FINDING_KINDS,
  judge,
  riskProfile,
  scaleProfile,
  tensorFormatRisk,
  tensorStatistics,
  type RiskThresholds,
} from "../../src/risk/index.js";
import { BFLOAT16_FTZ, BINARY16, E4M3_NAN, E4M3_SATURATING } from "./limits.js";

function profile(partial: Partial<MagnitudeProfile>): MagnitudeProfile {
  return { elements: 1e5, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0, ...partial };
}

function tensor(partial: Partial<TensorPrediction> & Pick<TensorPrediction, "start" | "end">): TensorPrediction {
  return {
    id: "dense-1/weight-gradient",
    layer: "dense-1",
    layerIndex: 1,
    family: "dense",
    role: "weight-gradient",
    slot: "gradients",
    shape: [100, 1000],
    ledger: [],
    source: "predicted",
    ...partial,
  };
}

const options = { judged: true, perTensorScaling: false, thresholds: DEFAULT_THRESHOLDS as RiskThresholds };

describe("riskProfile", () => {
  it("is scaleProfile's copy with only the fields the risk numbers read (those sameDistribution compares)", () => {
    const full: MagnitudeProfile = { ...profile({ shape: "bounded", bound: 3, rms: 0.5 }), meanSquare: 0.2, maxElement: 2, coherentRms: 4 };
    expect(riskProfile(full, 8)).toEqual({ elements: 1e5, zeroFraction: 0, shape: "bounded", rms: 4, log2Spread: 0, bound: 24 });
    const scaled = scaleProfile(full, 8);
    expect(riskProfile(full, 8)).toEqual({ elements: scaled.elements, zeroFraction: scaled.zeroFraction, shape: scaled.shape, rms: scaled.rms, log2Spread: scaled.log2Spread, bound: scaled.bound });
    const logNormal = profile({ shape: "log-normal", elementLog2Spread: 1.5 });
    expect(riskProfile(logNormal)).toEqual(logNormal);
    expect(riskProfile(logNormal).bound).toBeUndefined();
  });

  it("gives every profile one layout: the same keys in the same order, whatever fields the prediction carried", () => {
    const keys = Object.keys(riskProfile(profile({})));
    expect(keys).toEqual(["elements", "zeroFraction", "shape", "rms", "log2Spread", "bound", "elementLog2Spread", "mixture"]);
    const full: MagnitudeProfile = { ...profile({ shape: "bounded", bound: 3 }), meanSquare: 0.2, maxElement: 2 };
    expect(Object.keys(riskProfile(full, 4))).toEqual(keys);
    expect(Object.keys(riskProfile(profile({ shape: "log-normal", elementLog2Spread: 1.5 })))).toEqual(keys);
    expect(Object.keys(riskProfile(profile({ shape: "gaussian-mixture", mixture: { activation: "gelu", inputVariance: 1 } })))).toEqual(keys);
  });
});

describe("tensorFormatRisk", () => {
  it("keeps the worse of start and end, and says when", () => {
    const t = tensor({ start: profile({ rms: 1e-3 }), end: profile({ rms: 1e-7 }) });
    const risk = tensorFormatRisk(t, BINARY16, tensorStatistics(t, 1, DEFAULT_THRESHOLDS), options);
    expect(risk.worst.flushedFraction).toBe(risk.end.flushedFraction);
    expect(risk.worst.flushAt).toBe("end");
    // σ = 1e-7 in binary16: 23.43% flushed (SCIENCE.md §4) → fails on flushed values and on gradient energy
    expect(risk.end.flushedFraction).toBeCloseTo(0.2343, 4);
    expect(risk.verdict).toBe("fails");
    expect(risk.findings.map((f) => f.kind).sort()).toEqual(["flushed-values", "gradient-energy-flushed", "subnormal-values"]);
  });

  it("tells a share of flushed elements at the moment that share is worst, even when the flushed energy is worst at the other", () => {
    // start: Gaussian σ = 1e-5, flushed ≈ 2^-25·√(2/π)/σ = 2.38e-3 (SCIENCE.md §4 small-t form; 2^-25 is half of
    // binary16's smallest subnormal 2^-24, IEEE 754-2019 Table 3.5). end: log-normal of rms 1 and log2 spread 6
    // (ln-sd s = 6·ln 2), median e^(−s²), so the share below 2^-25 is Φ((ln 2^-25 + s²)/s) ≈ 0.497 (definition of the
    // log-normal), while its energy flushed is far smaller than the start's
    const activation = tensor({
      id: "mixer/activation",
      role: "activation",
      slot: "activations",
      start: profile({ rms: 1e-5 }),
      end: profile({ shape: "log-normal", rms: 1, elementLog2Spread: 6 }),
    });
    const risk = tensorFormatRisk(activation, BINARY16, tensorStatistics(activation, 1, DEFAULT_THRESHOLDS), options);
    const s = 6 * Math.LN2;
    const phi = (x: number): number => 0.5 * (1 + Math.sign(x) * Math.sqrt(1 - Math.exp((-2 * x * x) / Math.PI))); // Pólya's approximation, within 3e-3
    expect(risk.end.flushedFraction).toBeCloseTo(phi((Math.log(2 ** -25) + s * s) / s), 2);
    expect(risk.start.flushedFraction).toBeCloseTo((2 ** -25 * Math.sqrt(2 / Math.PI)) / 1e-5, 4);
    expect(risk.start.flushedEnergy).toBeGreaterThan(risk.end.flushedEnergy);
    const flushed = risk.findings.find((f) => f.kind === "flushed-values");
    expect(flushed?.at).toBe("end");
    expect(flushed?.sentence).toContain("at the end of the horizon");
    // the subnormal noise is worst at the start (σ = 1e-5 lies below binary16's smallest normal 2^-14: about
    // Δ²/12/σ² = 2^-48/12/1e-10 ≈ 3e-6 of the squared norm, Δ = 2^-24; test/risk/subnormal-noise.test.ts)
    expect(risk.findings.find((f) => f.kind === "subnormal-values")?.at).toBe("start");
    // and its sentence says so, as the others do
    expect(risk.findings.find((f) => f.kind === "subnormal-values")?.sentence).toMatch(/^Rounding the subnormal elements of mixer\/activation in binary16 at the start of training adds noise of /);
    // log2 spread 12: Φ((ln 2^-25 + s²)/s) with s = 12·ln 2 is above 0.9995 but below 1, so the sentence opens
    // with "More than 99.9%", never "100%" (certainty; common practice)
    const wider = { ...activation, end: profile({ shape: "log-normal", rms: 1, elementLog2Spread: 12 }) };
    const widerRisk = tensorFormatRisk(wider, BINARY16, tensorStatistics(wider, 1, DEFAULT_THRESHOLDS), options);
    expect(widerRisk.end.flushedFraction).toBeGreaterThan(0.9995);
    expect(widerRisk.end.flushedFraction).toBeLessThan(1);
    expect(widerRisk.findings.find((f) => f.kind === "flushed-values")?.sentence).toMatch(/^More than 99\.9% of the nonzero elements of mixer\/activation round/);
  });

  it("applies the loss scale to gradients: 2^10 moves σ = 1e-7 up to where binary16 flushes almost nothing", () => {
    const t = tensor({ start: profile({ rms: 1e-7 }), end: profile({ rms: 1e-7 }) });
    const scaled = tensorFormatRisk(t, BINARY16, tensorStatistics(t, 1024, DEFAULT_THRESHOLDS), options);
    // σ = 1.024e-4: flushed ≈ 2^-25·√(2/π)/σ = 2.32e-4 (SCIENCE.md §4 small-t form)
    expect(scaled.worst.flushedFraction).toBeCloseTo((2 ** -25 * Math.sqrt(2 / Math.PI)) / 1.024e-4, 6);
    expect(scaled.findings.map((f) => f.kind)).not.toContain("flushed-values");
  });

  it("does not apply the loss scale to weights", () => {
    const w = tensor({ role: "weight", slot: "weights", start: profile({ rms: 0.02 }), end: profile({ rms: 0.02 }) });
    expect(tensorStatistics(w, 1024, DEFAULT_THRESHOLDS).factor).toBe(1);
  });

  it("a 1.5^100 growth (4.0656e17, SCIENCE.md §4) overflows binary16 but not bfloat16", () => {
    const grown = tensor({ role: "activation-gradient", start: profile({ rms: 1.5 ** 100 }), end: profile({ rms: 1.5 ** 100 }) });
    const stats = tensorStatistics(grown, 1, DEFAULT_THRESHOLDS);
    expect(tensorFormatRisk(grown, BINARY16, stats, options).findings[0]?.kind).toBe("overflow");
    expect(tensorFormatRisk(grown, BFLOAT16_FTZ, stats, options).verdict).toBe("fits");
  });

  it("flags little headroom when the max is within a binade of the largest finite value", () => {
    const near = tensor({ role: "activation", slot: "activations", start: profile({ shape: "constant", rms: 40000 }), end: profile({ shape: "constant", rms: 40000 }) });
    const risk = tensorFormatRisk(near, BINARY16, tensorStatistics(near, 1, DEFAULT_THRESHOLDS), options);
    expect(risk.findings.map((f) => f.kind)).toEqual(["little-headroom"]);
    expect(risk.verdict).toBe("at-risk");
  });

  it("saturating e4m3 reports saturation, not overflow", () => {
    const big = tensor({ role: "activation", slot: "activations", start: profile({ rms: 300 }), end: profile({ rms: 300 }) });
    const risk = tensorFormatRisk(big, E4M3_SATURATING, tensorStatistics(big, 1, DEFAULT_THRESHOLDS), options);
    expect(risk.findings[0]?.kind).toBe("saturation");
  });

  it("per-tensor scaling maps the predicted max under 448 and leaves no saturation for a steady scale", () => {
    const big = tensor({ role: "activation", slot: "activations", start: profile({ rms: 100 }), end: profile({ rms: 100 }) });
    const risk = tensorFormatRisk(big, E4M3_SATURATING, tensorStatistics(big, 1, DEFAULT_THRESHOLDS), { ...options, perTensorScaling: true });
    // max of 1e5 Gaussians exceeded once in 1000 steps ≈ 100·5.7; 2^⌊log2(448/570)⌋ = 2^-1, so saturation needs 8.96σ
    expect(risk.scaleLog2.start).toBe(-1);
    expect(risk.verdict).toBe("fits");
  });

  // A per-tensor scale set from the level passed once in 1,000 steps (maxQuantile) lets the step's largest elements
  // pass the format's max about that often. A saturating conversion clips them (OCP 8-bit specification: 465 → 448
  // when saturating, NaN otherwise; SCIENCE.md §3.4 "overflow a clipping event, not a NaN"): the scale rule at work,
  // not a finding. The same elements converted without saturation become NaN: an overflow finding.
  it("per-tensor scaling with no margin left by the power-of-two floor: saturation by the rule is no finding, NaN is", () => {
    const unit = tensor({ role: "activation", slot: "activations", start: profile({}), end: profile({}) });
    const rms = 440 / tensorStatistics(unit, 1, DEFAULT_THRESHOLDS).start.max;
    const t = tensor({ role: "activation", slot: "activations", start: profile({ rms }), end: profile({ rms }) });
    const stats = tensorStatistics(t, 1, DEFAULT_THRESHOLDS);
    expect(stats.start.max).toBeCloseTo(440, 6);
    const saturating = tensorFormatRisk(t, E4M3_SATURATING, stats, { ...options, perTensorScaling: true });
    // 2^⌊log2(448/440)⌋ = 2^0: the max stays at 440, 1.8% under 448
    expect(saturating.scaleLog2.start).toBe(0);
    expect(saturating.worst.overflowRisk).toBeGreaterThan(1e-4);
    expect(saturating.worst.overflowRisk).toBeLessThan(DEFAULT_THRESHOLDS.maxQuantile);
    expect(saturating.findings).toEqual([]);
    expect(saturating.verdict).toBe("fits");
    const nan = tensorFormatRisk(t, E4M3_NAN, stats, { ...options, perTensorScaling: true });
    expect(nan.worst.overflowRisk).toBeGreaterThan(DEFAULT_THRESHOLDS.overflowAtRisk);
    expect(nan.findings.map((f) => [f.kind, f.severity])).toEqual([["overflow", "at-risk"]]);
    // with no per-tensor scale (a fixed range, no rule that accepts it), the same chance of saturation is a finding
    const unscaled = tensorFormatRisk(t, E4M3_SATURATING, stats, options);
    expect(unscaled.findings.map((f) => f.kind)).toContain("saturation");
  });

  it("a format that does not hold the tensor reports numbers but no findings", () => {
    const t = tensor({ start: profile({ rms: 1e-7 }), end: profile({ rms: 1e-7 }) });
    const risk = tensorFormatRisk(t, BINARY16, tensorStatistics(t, 1, DEFAULT_THRESHOLDS), { ...options, judged: false });
    expect(risk.worst.flushedFraction).toBeGreaterThan(0.2);
    expect(risk.findings).toEqual([]);
    expect(risk.verdict).toBe("fits");
  });
});

describe("judge", () => {
  it("fits with no reasons when nothing is found", () => {
    expect(judge([])).toEqual({ verdict: "fits", reasons: [] });
  });

  it("puts failing kinds first and counts the other subjects of a kind", () => {
    const base = { format: "binary16" as const, source: "tensor" as const, threshold: 0 };
    const verdict = judge([
      { ...base, kind: "subnormal-values", severity: "at-risk", subject: "a", value: 0.3, sentence: "A is subnormal." },
      { ...base, kind: "overflow", severity: "fails", subject: "b", value: 0.5, sentence: "B overflows." },
      { ...base, kind: "overflow", severity: "fails", subject: "c", value: 0.9, sentence: "C overflows." },
    ]);
    expect(verdict.verdict).toBe("fails");
    expect(verdict.reasons).toEqual(["C overflows; 1 other tensor likewise (overflow).", "A is subnormal."]);
  });
});

describe("the catalogue", () => {
  it("describes every finding kind", () => {
    for (const kind of FINDING_KINDS) {
      expect(FINDING_INFO[kind].title.length).toBeGreaterThan(0);
      expect(FINDING_INFO[kind].description.length).toBeGreaterThan(40);
    }
  });
});
