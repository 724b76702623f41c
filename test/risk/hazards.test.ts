import { describe, expect, it } from "vitest";
import type { HazardSite, MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { DEFAULT_THRESHOLDS, evaluateHazard, hazardVerdict, judgePrediction, rangeLimits, tensorFormatRisk, tensorStatistics, type HazardContext } from "../../src/risk/index.js";
import { getFormat } from "../../src/formats/index.js";
import { BFLOAT16_FTZ, BINARY16, BINARY32, E4M3_NAN, E4M3_SATURATING } from "./limits.js";
import { context, profile, site } from "./hazard-sites.js";
import { buildGraph } from "../../src/graph/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { predict } from "../../src/magnitude/index.js";
import { dense, features, he, makeSpec } from "../magnitude/build-spec.js";

describe("softmax exp overflow", () => {
  // exp(x) rounds to infinity in binary16 from x = ln 65520 = 11.090110719 (SCIENCE.md §4)
  it("logits of 11.1 overflow exp in binary16 without max subtraction; logits of 11.0 do not", () => {
    const high = evaluateHazard(site({ kind: "softmax-exp", input: profile({ shape: "constant", rms: 11.1, elements: 64 }) }), context());
    const low = evaluateHazard(site({ kind: "softmax-exp", input: profile({ shape: "constant", rms: 11.0, elements: 64 }) }), context());
    expect(high.evaluations[0]?.criticalLevel).toBeCloseTo(11.090110719, 9);
    expect(high.evaluations[0]?.value).toBe(1);
    expect(hazardVerdict(high)).toBe("fails");
    expect(high.findings[0]?.kind).toBe("softmax-exp-overflow");
    expect(hazardVerdict(low)).toBe("fits");
  });

  it("the same logits in bfloat16 are safe: exp overflows there only from ln(3.3961775e38) = 88.720884077 (SCIENCE.md §4)", () => {
    const check = evaluateHazard(
      site({ kind: "softmax-exp", input: profile({ shape: "constant", rms: 11.1, elements: 64 }) }),
      context({ activations: BFLOAT16_FTZ }),
    );
    expect(check.evaluations[0]?.criticalLevel).toBeCloseTo(88.720884077, 8);
    expect(hazardVerdict(check)).toBe("fits");
  });

  it("Gaussian logits: only the positive tail counts, P(any of n logits > c) = 1 − (1 − Q(c/σ))^n", () => {
    // σ = 11.090110719/4, so c/σ = 4 and Q(4) = P(|Z| > 4)/2 = 6.334248e-5/2 (SCIENCE.md §4)
    const sigma = 11.090110719 / 4;
    const check = evaluateHazard(site({ kind: "softmax-exp", input: profile({ rms: sigma, elements: 1000 }) }), context());
    const expected = 1 - (1 - 6.334248e-5 / 2) ** 1000;
    expect(Math.abs((check.evaluations[0]?.value ?? 0) - expected) / expected).toBeLessThan(1e-5);
  });

  it("with the row maximum subtracted exp cannot overflow; only a denominator of ≥ 65520 terms can", () => {
    const guarded = evaluateHazard(site({ kind: "softmax-exp", guarded: true, terms: 4096, input: profile({ shape: "constant", rms: 50 }) }), context());
    expect(hazardVerdict(guarded)).toBe("fits");
    const long = evaluateHazard(site({ kind: "softmax-exp", guarded: true, terms: 70000 }), context());
    expect(long.findings[0]?.kind).toBe("softmax-sum-overflow");
  });

  it("the denominator is summed in the accumulate format: 70,000 keys fail in a binary16 accumulator, are at most at risk kept in binary16 activations, and fit in binary32", () => {
    // binary16's overflow threshold 65520 (IEEE 754-2019 Table 3.5, max finite 65504 plus half an ulp)
    const sums = (ctx: Partial<HazardContext>) => evaluateHazard(site({ kind: "softmax-exp", guarded: true, terms: 70000 }), context(ctx));
    expect(hazardVerdict(sums({ accumulate: BINARY16 }))).toBe("fails");
    const widened = sums({ accumulate: BINARY32 });
    expect(hazardVerdict(widened)).toBe("at-risk");
    expect(widened.findings.map((f) => [f.format, f.severity])).toEqual([["binary16", "at-risk"]]);
    expect(widened.evaluations.find((e) => e.format === "binary32")?.value).toBe(0);
    expect(widened.findings[0]?.sentence ?? widened.evaluations[0]?.sentence).toContain("if the sum is kept in the activation format");
  });

  it("512 keys in e4m3 activations (largest finite 448, OCP 8-bit spec): at risk unscaled and kept narrow, fits with per-tensor scale factors", () => {
    const unscaled = evaluateHazard(site({ kind: "softmax-exp", guarded: true, terms: 512 }), context({ activations: E4M3_SATURATING, accumulate: BINARY32, scaling: "none" }));
    expect(hazardVerdict(unscaled)).toBe("at-risk");
    const scaled = evaluateHazard(site({ kind: "softmax-exp", guarded: true, terms: 512 }), context({ activations: E4M3_SATURATING, accumulate: BINARY32, scaling: "tensor" }));
    expect(hazardVerdict(scaled)).toBe("fits");
    expect(scaled.evaluations[0]?.sentence).toContain("stays within e4m3 with its scale factor");
  });
});

describe("a summed loss's rounding error", () => {
  // 4096 per-example losses summed: √n·u as an accumulation's (Higham & Mary 2019, Theorem 2.4; from memory), u = 2^-8
  // in bfloat16 (Intel, bfloat16 – Hardware Numerics Definition, 2018), 2^-24 in binary32 (IEEE 754-2019 Table 3.5)
  const loss = (terms: number) => site({ kind: "loss-value", layer: "loss", terms, input: profile({ shape: "constant", rms: 7.4 }) });
  // terms of 7.4 stall a sequential bfloat16 sum at 2048, where half an ulp (8) passes them (the binade [2048, 4096) has
  // ulp 2^(11 − 7) = 16, IEEE 754-2019 §2.1 with p = 8): 1 − 2048/(4096·7.4) short, beyond √n·u = 0.25
  const stalled = 1 - 2048 / (4096 * 7.4);
  it("summed in a bfloat16 accumulator: stalls at 2048, 93% short (beyond √4096·2^-8 = 0.25), fails with the remedy; in binary32 it fits", () => {
    const narrow = evaluateHazard(loss(4096), context({ activations: BFLOAT16_FTZ, accumulate: BFLOAT16_FTZ }));
    const error = narrow.evaluations.find((e) => e.measure === "relative-error");
    expect(error?.value).toBe(stalled);
    expect(error?.sentence).toContain("once a sequential sum passes 2048");
    expect(error?.verdict).toBe("fails");
    expect(error?.sentence).toContain("accumulate in binary32 (`accumulate: binary32`)");
    const wide = evaluateHazard(loss(4096), context({ activations: BFLOAT16_FTZ, accumulate: BINARY32 }));
    expect(wide.evaluations.find((e) => e.measure === "relative-error")?.value).toBeCloseTo(64 * 2 ** -24, 15);
    expect(wide.findings.some((f) => f.kind === "accumulation-error")).toBe(false);
  });
  it("a loss of one term adds no rounding evaluation; a mean of 4096 terms is their sum divided: it stalls in bfloat16 as the sum does, and fails", () => {
    expect(evaluateHazard(loss(1), context()).evaluations.some((e) => e.measure === "relative-error")).toBe(false);
    const mean = evaluateHazard({ ...loss(1), averaged: 4096 }, context({ activations: BFLOAT16_FTZ, accumulate: BFLOAT16_FTZ }));
    const error = mean.evaluations.find((e) => e.measure === "relative-error");
    expect(error?.value).toBe(stalled);
    expect(error?.verdict).toBe("fails");
    expect(error?.sentence).toContain("The loss averages 4096 terms, summed in bfloat16");
  });

  it("a spec's mean reduction sums one term per sample and position (cross-entropy) or per output element (squared error)", () => {
    // invented: a 64-sample batch of 16 features into 10 outputs
    const averagedOf = (loss: string) => {
      const text = `name: mean-terms\ninput: { features: 16 }\ntraining: { batch: 64, loss: ${loss} }\nlayers:\n  - { type: dense, width: 10 }\n`;
      const parsed = parseSpec(text, "mean-terms.yaml");
      if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
      const graph = buildGraph(parsed.spec);
      if (!graph.ok) throw new Error("does not build");
      const result = judgePrediction(parsed.spec, predict(graph.graph, parsed.spec));
      return result.hazards.find((h) => h.kind === "loss-value")?.evaluations.find((e) => e.measure === "relative-error")?.sentence;
    };
    expect(averagedOf("{ kind: cross-entropy, classes: 10 }")).toContain("averages 64 terms");
    expect(averagedOf("{ kind: mean-squared-error }")).toContain("averages 640 terms");
  });
});

describe("the cross-entropy's own softmax", () => {
  // invented: a 120,000-class catalogue head; the log-sum-exp subtracts the row maximum (common practice), so its
  // denominator of up to one term per class passes binary16's 65520 (IEEE 754-2019 Table 3.5) only when summed there
  const judged = (accumulate: string) => {
    const text = `name: catalogue-head\ninput: { features: 16 }\ntraining: { batch: 8, loss: { kind: cross-entropy, classes: 120000 } }\nprecision: { activations: binary16, accumulate: ${accumulate} }\nlayers:\n  - { type: dense, width: 120000 }\n`;
    const parsed = parseSpec(text, "catalogue-head.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const graph = buildGraph(parsed.spec);
    if (!graph.ok) throw new Error("does not build");
    return judgePrediction(parsed.spec, predict(graph.graph, parsed.spec)).hazards.find((h) => h.kind === "softmax-exp" && h.layer === "loss");
  };
  it("fails with a binary16 accumulator, is at most at risk kept in binary16 activations beside a binary32 one", () => {
    const narrow = judged("binary16");
    expect(narrow?.findings.map((f) => [f.format, f.severity])).toEqual([["binary16", "fails"]]);
    expect(narrow?.evaluations[0]?.sentence).toContain("The softmax of the cross-entropy loss subtracts the row maximum, but its denominator, up to 120000");
    const wide = judged("binary32");
    expect(wide?.findings.map((f) => [f.format, f.severity])).toEqual([["binary16", "at-risk"]]);
  });

  it("a softmax layer the spec names \"loss\" is told by its name, and the cross-entropy's own softmax is still judged", () => {
    const text = `name: catalogue-head\ninput: { features: 16 }\ntraining: { batch: 8, loss: { kind: cross-entropy, classes: 16 } }\nprecision: { activations: binary16 }\nlayers:\n  - { type: softmax, name: loss }\n  - { type: dense, width: 16 }\n`;
    const parsed = parseSpec(text, "catalogue-head.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const graph = buildGraph(parsed.spec);
    if (!graph.ok) throw new Error("does not build");
    const softmaxes = judgePrediction(parsed.spec, predict(graph.graph, parsed.spec)).hazards.filter((h) => h.kind === "softmax-exp");
    expect(softmaxes.map((h) => h.origin)).toEqual(["prediction", "training setup"]);
    expect(softmaxes[0]?.evaluations[0]?.sentence).toMatch(/^The softmax of loss /);
    expect(softmaxes[1]?.evaluations[0]?.sentence).toMatch(/^The softmax of the cross-entropy loss /);
  });
});

describe("norm sums of squares", () => {
  // Σx² over N features overflows binary16 once rms > √(65504/N): 4.0 at N = 4096 (DESIGN.md §5 item 7)
  const norm = (rms: number): HazardSite =>
    site({ kind: "norm-sum-of-squares", terms: 4096, input: profile({ rms, elements: 4096 * 512 }) });

  it("the critical rms is √(65520/4096) ≈ 4.0 for a binary16 accumulator", () => {
    const check = evaluateHazard(norm(4.2), context({ accumulate: BINARY16 }));
    expect(check.evaluations).toHaveLength(1);
    expect(check.evaluations[0]?.criticalLevel).toBeCloseTo(Math.sqrt(65520 / 4096), 12);
  });

  it("rms 4.2 over 4096 features fails with a binary16 accumulator; rms 3.5 fits", () => {
    expect(hazardVerdict(evaluateHazard(norm(4.2), context({ accumulate: BINARY16 })))).toBe("fails");
    expect(hazardVerdict(evaluateHazard(norm(3.5), context({ accumulate: BINARY16 })))).toBe("fits");
  });

  it("with a binary32 accumulator the overflow is only a risk of implementations that keep statistics in binary16", () => {
    const check = evaluateHazard(norm(4.2), context());
    expect(check.evaluations.map((e) => [e.format, e.heldIn, e.verdict])).toEqual([
      ["binary16", "activations", "at-risk"],
      ["binary32", "accumulate", "fits"],
    ]);
  });
});

describe("a limit and a prediction that read alike at three digits", () => {
  it("a norm's sum of squares over 256 features of rms 16 in binary16: exceeds 15.998 (predicted 16), not 16 (predicted 16)", () => {
    // √(65520/256) = 15.998046875: binary16 overflows from 65520 under RNE (IEEE 754-2019 Table 3.5; SCIENCE.md §1.2)
    const check = evaluateHazard(site({ kind: "norm-sum-of-squares", terms: 256, input: profile({ shape: "constant", rms: 16, elements: 256 * 2048 }) }), context());
    expect(check.evaluations[0]?.sentence).toContain("overflows binary16 once the input rms exceeds 15.998 (predicted 16);");
  });

  it("an unscaled summed loss names no loss scale of 1; a scaled one names it", () => {
    // 4096 terms of ln 1000 = 6.91 each: 28294 < 65520 unscaled (binary16, IEEE 754-2019 Table 3.5 with RNE)
    const loss = site({ kind: "loss-value", layer: "loss", terms: 4096, input: profile({ shape: "constant", rms: Math.log(1000) }) });
    expect(evaluateHazard(loss, context({ accumulate: BINARY16 })).evaluations[0]?.sentence).toMatch(/^The loss \(4096 terms summed\) overflows binary16 when a term exceeds 16 /);
    expect(evaluateHazard(loss, context({ accumulate: BINARY16, lossScale: 4 })).evaluations[0]?.sentence).toMatch(/^The loss \(4096 terms summed, times the loss scale 2\^2\) overflows binary16 when an unscaled term exceeds 4 /);
    // binary16's overflow threshold 65520 in full: three digits would write 65500, a value binary16 holds
    const single = site({ kind: "loss-value", layer: "loss", terms: 1, input: profile({ shape: "constant", rms: 2 }) });
    expect(evaluateHazard(single, context({ accumulate: BINARY16 })).evaluations[0]?.sentence).toMatch(/^The loss overflows binary16 when it exceeds 65520 /);
  });

  it("a loss of 8 times the loss scale 2^13 in binary16: the unscaled loss exceeds 7.998 (predicted 8)", () => {
    // 65520 / 8192 = 7.998046875 (binary16's overflow threshold, IEEE 754-2019 Table 3.5 with RNE)
    const loss = site({ kind: "loss-value", terms: 1, input: profile({ shape: "constant", rms: 8 }) });
    const check = evaluateHazard(loss, context({ accumulate: BINARY16, lossScale: 8192 }));
    // the limit is the unscaled loss's: "it" after "times the loss scale" would read as the scaled loss
    expect(check.evaluations[0]?.sentence).toContain("overflows binary16 when the unscaled loss exceeds 7.998 (predicted 8);");
  });
});

describe("accumulation", () => {
  it("relative error √n·u: 4096 terms give 64·2^-11 = 0.03125 in binary16 (at risk), 64·2^-8 = 0.25 in bfloat16 (fails)", () => {
    const sum = site({ kind: "accumulation", terms: 4096, input: profile({ rms: 1e-2, elements: 4096 * 100 }) });
    const half = evaluateHazard(sum, context({ accumulate: BINARY16 }));
    const brain = evaluateHazard(sum, context({ accumulate: BFLOAT16_FTZ }));
    const single = evaluateHazard(sum, context());
    expect(half.evaluations[0]?.value).toBe(0.03125);
    expect(half.evaluations[0]?.verdict).toBe("at-risk");
    expect(brain.evaluations[0]?.value).toBe(0.25);
    expect(brain.evaluations[0]?.verdict).toBe("fails");
    expect(hazardVerdict(single)).toBe("fits");
  });

  it("random-sign partial sums overflow when √n·rms approaches the threshold", () => {
    const big = site({ kind: "accumulation", terms: 4096, input: profile({ rms: 2000, elements: 4096 * 8 }) });
    const check = evaluateHazard(big, context({ accumulate: BINARY16 }));
    // √4096·2000 = 128000 > 65520: the final sum alone passes the threshold with probability 2·Q(0.512) ≈ 0.61
    expect(check.evaluations[1]?.value).toBeGreaterThan(0.6);
    expect(check.findings.map((f) => f.kind)).toContain("accumulation-overflow");
  });
});

describe("the loss value", () => {
  it("sum reduction over 4096 positions of a loss near ln 1000 = 6.91 overflows binary16 (4096·6.908 = 28294 fits unscaled, not times 4)", () => {
    const loss = site({ kind: "loss-value", terms: 4096, input: profile({ shape: "constant", rms: Math.log(1000) }) });
    const unscaled = evaluateHazard(loss, context({ accumulate: BINARY16 }));
    expect(unscaled.evaluations.filter((e) => e.measure === "overflow-risk").map((e) => e.verdict)).toEqual(["fits"]);
    // the sum's rounding: beyond √4096·2^-11 = 0.031 in binary16 (IEEE 754-2019 Table 3.5, p = 11), a sequential sum
    // of terms of 6.91 stalls at 16384, where half an ulp (8) passes them: 1 − 16384/28294 = 42% short, which fails
    expect(unscaled.findings.map((f) => [f.kind, f.severity])).toEqual([["accumulation-error", "fails"]]);
    expect(unscaled.findings[0]?.value).toBeCloseTo(1 - 16384 / (4096 * Math.log(1000)), 12);
    const scaled = evaluateHazard(loss, context({ accumulate: BINARY16, lossScale: 4 }));
    expect(hazardVerdict(scaled)).toBe("fails");
    expect(scaled.findings[0]?.kind).toBe("loss-value-overflow");
  });
});

describe("the loss value in an 8-bit format with scale factors", () => {
  // a loss of 1000 kept in e4m3 (activations), the reduction in binary32: 1000 > 464, the non-saturating conversion's
  // NaN bound without scale factors (OCP 8-bit specification; SCIENCE.md check value 13)
  const loss = site({ kind: "loss-value", layer: "loss", terms: 1, input: profile({ shape: "constant", rms: 1000 }) });
  const e4m3 = (scaling?: HazardContext["scaling"], activations = E4M3_NAN) => evaluateHazard(loss, context({ activations, ...(scaling === undefined ? {} : { scaling }) }));

  it("without scale factors is judged as before: overflows e4m3 past 464", () => {
    const plain = e4m3();
    expect(plain.evaluations[0]?.criticalLevel).toBe(464);
    expect(plain.evaluations[0]?.value).toBe(1);
    expect(plain.evaluations[0]?.sentence).toMatch(/^The loss overflows e4m3 when it exceeds 464 \(predicted 1000\); probability 1 per step if the loss is kept in the activation format \(at risk\)\.$/);
    expect(hazardVerdict(plain)).toBe("at-risk");
    expect(e4m3("none")).toEqual(plain);
    // a scaling setting touches only 8-bit formats: a binary16 plan reads the same with any of them
    const half = evaluateHazard(loss, context({ accumulate: BINARY16 }));
    expect(evaluateHazard(loss, context({ accumulate: BINARY16, scaling: "block" }))).toEqual(half);
  });

  it("a saturating conversion is said to saturate, not overflow, as the tensors' findings say (OCP 8-bit specification: saturating mode clips to 448)", () => {
    const saturating = e4m3(undefined, E4M3_SATURATING);
    expect(saturating.evaluations[0]?.sentence).toMatch(/^The loss saturates in e4m3 when it exceeds 448 \(predicted 1000\)/);
    expect(e4m3().evaluations[0]?.sentence).toMatch(/^The loss overflows e4m3 when/);
  });

  it("with per-block scale factors, a block of one: clamped into the range, it overflows only past 2^127·2^9 = 2^136", () => {
    // shared exponent ⌊log2 1000⌋ − 8 = 1, so 1000/2 = 500 rounds to 512 and is clamped to 448 (OCP MX v1.0 §6 /
    // Rouhani et al. 2023 Alg. 1, from memory; SCIENCE.md §1.4): no NaN, under either overflow mode
    for (const limits of [E4M3_NAN, E4M3_SATURATING]) {
      const block = e4m3("block", limits);
      expect(block.evaluations[0]?.value).toBe(0);
      expect(block.evaluations[0]?.criticalLevel).toBe(2 ** 136);
      expect(hazardVerdict(block)).toBe("fits");
    }
    expect(e4m3("block").evaluations[0]?.sentence).toMatch(/^The loss overflows e4m3 past its own block's largest scale factor, 2\^127, when it exceeds 8\.71e40 \(predicted 1000\); probability 0 per step/);
    // past 2^136 ≈ 8.71e40 the shared exponent would pass E8M0's 127 (SCIENCE.md §1.4): the value leaves the range
    const huge = evaluateHazard(site({ kind: "loss-value", layer: "loss", terms: 1, input: profile({ shape: "constant", rms: 1e41 }) }), context({ activations: E4M3_NAN, scaling: "block" }));
    expect(huge.evaluations[0]?.value).toBe(1);
    expect(huge.evaluations[0]?.verdict).toBe("at-risk");
    // (and so does binary32's sum, past (2 − 2^-24)·2^127 ≈ 3.4e38: IEEE 754-2019 Table 3.5 with RNE)
    expect(huge.evaluations[1]?.verdict).toBe("fails");
  });

  it("with a per-tensor scale factor 2^⌊log2(448/1000)⌋ = 2^-2, the loss overflows only past 464·4 = 1856", () => {
    // the per-tensor rule of Micikevicius et al. 2022 (SCIENCE.md §3.4), from the loss's predicted max (1000: constant)
    const tensor = e4m3("tensor");
    expect(tensor.evaluations[0]?.criticalLevel).toBe(1856);
    expect(tensor.evaluations[0]?.value).toBe(0);
    expect(tensor.evaluations[0]?.sentence).toMatch(/^The loss overflows e4m3 with its per-tensor scale factor 2\^-2 when it exceeds 1856 \(predicted 1000\)/);
    expect(hazardVerdict(tensor)).toBe("fits");
  });

  it("a loss that varies from draw to draw is judged by the tensor rule of an 8-bit tensor with a per-tensor scale", () => {
    // the same number as the check gives a one-element tensor of that profile held in e4m3 with per-tensor scaling
    const spread = profile({ shape: "constant", rms: 1000, log2Spread: 1 });
    const hazard = evaluateHazard(site({ kind: "loss-value", layer: "loss", terms: 1, input: spread }), context({ activations: E4M3_NAN, scaling: "tensor" }));
    const tensor: TensorPrediction = {
      id: "loss/loss", layer: "loss", layerIndex: 0, family: "loss", role: "loss", slot: "activations", shape: [1], source: "predicted", start: spread, end: spread,
    } as TensorPrediction;
    const options = { judged: true, perTensorScaling: true, thresholds: DEFAULT_THRESHOLDS };
    const rule = tensorFormatRisk(tensor, E4M3_NAN, tensorStatistics(tensor, 1, DEFAULT_THRESHOLDS), options);
    expect(rule.worst.overflowRisk).toBeGreaterThan(0);
    expect(hazard.evaluations[0]?.value).toBeCloseTo(rule.worst.overflowRisk, 15);
    expect(hazard.evaluations[0]?.sentence).toContain(`per-tensor scale factor 2^${rule.scaleLog2.start} `);
  });
});

describe("gradient sums across workers", () => {
  it("without a predicted sum, 64 contributions of magnitude 2000 are summed coherently (128000) and overflow binary16", () => {
    const gradients = site({ kind: "gradient-sum", terms: 64, input: profile({ shape: "constant", rms: 2000, elements: 10 }) });
    expect(hazardVerdict(evaluateHazard(gradients, context({ workers: 64 })))).toBe("fails");
  });

  it("the engine's predicted sum, when given, is judged instead (independent signs: √64·2000 = 16000 fits)", () => {
    const gradients = site({
      kind: "gradient-sum",
      terms: 64,
      input: profile({ shape: "constant", rms: 2000, elements: 10 }),
      output: profile({ shape: "constant", rms: 16000, elements: 10 }),
    });
    expect(hazardVerdict(evaluateHazard(gradients, context({ workers: 64 })))).toBe("fits");
  });

  it("dividing by the worker count before the sum flushes small gradients (a risk: the order is the implementation's)", () => {
    const small = site({ kind: "gradient-sum", terms: 64, input: profile({ rms: 1e-6, elements: 1e6 }) });
    const check = evaluateHazard(small, context({ workers: 64, workerGradients: "average" }));
    const flush = check.findings.find((f) => f.kind === "gradient-sum-flush");
    expect(flush?.severity).toBe("at-risk");
  });

  it("names the weight gradient of its site, so a layer's weight and bias sites read apart", () => {
    const sum = (id: string) =>
      site({ kind: "gradient-sum", layer: "words", tensor: id, detail: `${id}: 4 accumulation steps × 16 workers summed`, terms: 64, input: profile({ shape: "constant", rms: 2000, elements: 10 }) });
    const weight = evaluateHazard(sum("words/weight-gradient"), context({ workers: 16 })).evaluations[0]?.sentence;
    const bias = evaluateHazard(sum("words/weight-gradient:bias"), context({ workers: 16 })).evaluations[0]?.sentence;
    expect(weight).toMatch(/^The sum of 64 gradient contributions of words\/weight-gradient \(rms/);
    expect(bias).toMatch(/^The sum of 64 gradient contributions of words\/weight-gradient:bias \(rms/);
    // a site that names no tensor keeps its layer, whatever its detail says
    const plain = site({ kind: "gradient-sum", layer: "words", detail: "words/weight-gradient: summed", terms: 64, input: profile({ shape: "constant", rms: 2000, elements: 10 }) });
    expect(evaluateHazard(plain, context({ workers: 16 })).evaluations[0]?.sentence).toMatch(/contributions of words \(rms/);
  });

  it("the engine names each gradient-sum site's weight gradient (a layer with a weight and a bias)", () => {
    // a scorer for an invented sensor feed, trained on 4 workers with 2 accumulation steps
    const spec = makeSpec([dense("scorer", 8, he, true)], { input: features(16), training: { batch: 8, workers: 4, accumulationSteps: 2 } });
    const graph = buildGraph(spec);
    if (!graph.ok) throw new Error("does not build");
    const sites = predict(graph.graph, spec).hazards.filter((s) => s.kind === "gradient-sum");
    expect(sites.map((s) => s.tensor)).toEqual(["scorer/weight-gradient", "scorer/weight-gradient:bias"]);
  });
});

describe("optimizer constants", () => {
  // ε = 1e-8 rounds to 0 in binary16 (|1e-8| < 2^-25); in bfloat16 it is 1.00117e-8 (SCIENCE.md §3.3, check 41)
  const adam = (gradient: MagnitudeProfile): HazardSite => site({ kind: "optimizer-constant", constant: 1e-8, input: gradient });
  const secondMoment = (gradient: MagnitudeProfile): HazardSite => site({ kind: "optimizer-second-moment", input: gradient });

  it("ε = 1e-8 held in binary16 is flagged; with gradients whose (1 − β2)g² flushes it fails", () => {
    const small = evaluateHazard(adam(profile({ rms: 1e-4, elements: 1e5 })), context({ optimizerStates: BINARY16 }));
    expect(small.findings.map((f) => f.kind)).toEqual(["optimizer-epsilon-flushed"]);
    expect(hazardVerdict(small)).toBe("fails");
  });

  it("the second moment is a site of its own kind, judged by the share of (1 − β2)g² that flushes", () => {
    const small = evaluateHazard(secondMoment(profile({ rms: 1e-4, elements: 1e5 })), context({ optimizerStates: BINARY16 }));
    expect(small.kind).toBe("optimizer-second-moment");
    expect(small.evaluations.map((e) => [e.heldIn, e.measure])).toEqual([["optimizerStates", "flushed-share"]]);
    // |g| ≤ √(2^-25/0.001) ≈ 5.5e-3 flushes (1 − β2)·g² (DESIGN.md §5 item 5): nearly all of a gradient of rms 1e-4
    expect(small.evaluations[0]?.criticalLevel).toBeCloseTo(Math.sqrt(2 ** -25 / 0.001), 12);
    expect(small.findings.map((f) => [f.kind, f.severity])).toEqual([["second-moment-flushed", "fails"]]);
  });

  it("with large gradients and no zeros, ε rounding to zero is at risk rather than failing", () => {
    const large = evaluateHazard(adam(profile({ shape: "constant", rms: 1, elements: 1e5 })), context({ optimizerStates: BINARY16 }));
    expect(hazardVerdict(large)).toBe("at-risk");
  });

  it("ε = 1e-8 and the second moment of gradients near 1e-4 stay nonzero in bfloat16 and binary32", () => {
    const gradient = profile({ rms: 1e-4, elements: 1e5 });
    expect(hazardVerdict(evaluateHazard(adam(gradient), context({ optimizerStates: BFLOAT16_FTZ })))).toBe("fits");
    expect(hazardVerdict(evaluateHazard(adam(gradient), context()))).toBe("fits");
  });

  // Whether ε survives is decided by rounding it (IEEE 754-2019 §4.3.1, ties to even), at the exact boundaries:
  // binary16's half smallest subnormal 2^-25 ties to 0 and anything above it rounds up to 2^-24 (IEEE 754-2019
  // Table 3.5: emin −14, p = 11); bfloat16 with flushed subnormals keeps its smallest normal 2^-126 (emin −126)
  // and loses everything below it
  const epsilonAt = (constant: number, states: HazardContext["optimizerStates"]) =>
    evaluateHazard(site({ kind: "optimizer-constant", constant, input: profile({ rms: 1e-4, elements: 1e5 }) }), context({ optimizerStates: states }));
  const kept = (check: ReturnType<typeof evaluateHazard>) => check.findings.length === 0 && hazardVerdict(check) === "fits";
  it.each([
    { at: "binary16, 2^-25 (a tie, to even: 0)", epsilon: 2 ** -25, states: BINARY16, expected: false },
    { at: "binary16, just above 2^-25 (rounds to 2^-24)", epsilon: 2 ** -25 * (1 + 2 ** -20), states: BINARY16, expected: true },
    { at: "bfloat16 flushing subnormals, 2^-126 (its smallest normal)", epsilon: 2 ** -126, states: BFLOAT16_FTZ, expected: true },
    // within half a subnormal step (2^-134) below 2^-126 rounding gives 2^-126 itself, which is kept
    { at: "bfloat16 flushing subnormals, 2^-126·(1 − 2^-20) (rounds up to 2^-126)", epsilon: 2 ** -126 * (1 - 2 ** -20), states: BFLOAT16_FTZ, expected: true },
    { at: "bfloat16 flushing subnormals, 2^-126 − 2^-133 (its largest subnormal)", epsilon: 2 ** -126 - 2 ** -133, states: BFLOAT16_FTZ, expected: false },
  ])("ε at $at: kept $expected, as rounding decides", ({ epsilon, states, expected }) => {
    expect(kept(epsilonAt(epsilon, states))).toBe(expected);
  });
});

describe("Adam's epsilon of the training setup, counted over the context's weight gradients", () => {
  // (1 − β2)·g² flushes in binary16 (flush bound 2^-25: half its smallest subnormal 2^-24, IEEE 754-2019 Table 3.5)
  // for |g| ≤ √(2^-25/(1 − 0.999)) (DESIGN.md §5 item 5); a Gaussian gradient of rms σ has 2Φ(bound/σ) − 1 of its
  // elements below that. Φ by Abramowitz & Stegun 26.2.17 (|error| < 7.5e-8), independent of the engine's normal.
  const normalCdf = (x: number): number => {
    const t = 1 / (1 + 0.2316419 * x);
    const poly = t * (0.31938153 + t * (-0.356563782 + t * (1.781477937 + t * (-1.821255978 + t * 1.330274429))));
    return 1 - (Math.exp((-x * x) / 2) / Math.sqrt(2 * Math.PI)) * poly;
  };
  const bound = Math.sqrt(2 ** -25 / 0.001);
  const zeros = (elements: number, rms: number) => elements * (2 * normalCdf(bound / rms) - 1);
  const gradient = (id: string, start: number, end: number): TensorPrediction => ({
    id,
    layer: id.split("/")[0] as string,
    layerIndex: 0,
    family: "dense",
    role: "weight-gradient",
    slot: "gradients",
    shape: [100],
    start: profile({ rms: start, elements: 100 }),
    end: profile({ rms: end, elements: 100 }),
    ledger: [],
    source: "predicted",
  });
  // two layers of 100 elements: together below one zero second moment per step at the start (about 0.55 + 0.36),
  // above one at the end (about 1.45 + 0.44)
  const weightGradients = [gradient("a/weight-gradient", 0.8, 0.3), gradient("b/weight-gradient", 1.2, 1)];
  const epsilonSite = site({ kind: "optimizer-constant", constant: 1e-8, input: weightGradients[1]!.start });
  const states = context({ optimizerStates: BINARY16, weightGradients });

  it("sums over every weight gradient at the worse side of the horizon, with no end of its own", () => {
    const start = zeros(100, 0.8) + zeros(100, 1.2);
    const end = zeros(100, 0.3) + zeros(100, 1);
    expect(start).toBeLessThan(1);
    expect(end).toBeGreaterThan(1);
    const judged = evaluateHazard(epsilonSite, states, "training setup");
    expect(judged.evaluations).toHaveLength(1);
    const evaluation = judged.evaluations[0]!;
    expect(evaluation.at).toBe("end");
    // the engine integrates the Gaussian law numerically: held to 1e-4 relative
    expect(Math.abs(evaluation.value / end - 1)).toBeLessThan(1e-4);
    expect(judged.findings.map((f) => [f.kind, f.severity, f.at])).toEqual([["optimizer-epsilon-flushed", "fails", "end"]]);
  });

  it("names the layer of the gradient contributing most, on the check alone: its evaluation names no other", () => {
    // at the end "a" gives about 1.45 of the 1.89 zero second moments (the counts above)
    expect(zeros(100, 0.3)).toBeGreaterThan(zeros(100, 1));
    const judged = evaluateHazard(epsilonSite, states, "training setup");
    expect(judged.layer).toBe("a");
    expect(judged.input).toBe(weightGradients[0]!.end);
    expect(judged.evaluations[0]).not.toHaveProperty("layer");
    expect(judged.findings.map((f) => f.subject)).toEqual(["a"]);
  });

  it("judges a site of the prediction at its own gradient, whatever weight gradients the context has", () => {
    const judged = evaluateHazard(epsilonSite, states, "prediction");
    const own = zeros(100, 1.2);
    expect(own).toBeLessThan(1);
    expect(Math.abs(judged.evaluations[0]!.value / own - 1)).toBeLessThan(1e-4);
    expect(judged.findings.map((f) => [f.severity, f.at])).toEqual([["at-risk", undefined]]);
  });
});

describe("tiny modelled shares in the sentences", () => {
  // a share below the display floor 1e-8 reads "less than 1e-6%" (src/risk/words.ts), not the law's far tail
  it("a second moment far above bfloat16's flush bound: less than 1e-6% of its elements flush", () => {
    // (1 − β2)·g² flushes below 2^-126 with bfloat16's subnormals flushed (SCIENCE.md §1.2), i.e. for
    // |g| ≤ √(2^-126/0.001) ≈ 3.4e-18; for a Gaussian of rms 1e-3 that is 2Φ(b/σ) − 1 ≈ 0.798·b/σ ≈ 2.7e-15 of it
    const judged = evaluateHazard(site({ kind: "optimizer-second-moment", input: profile({ rms: 1e-3, elements: 1e5 }) }), context({ optimizerStates: BFLOAT16_FTZ }));
    const evaluation = judged.evaluations[0]!;
    expect(evaluation.value).toBeGreaterThan(0);
    expect(evaluation.value).toBeLessThan(1e-8);
    expect(evaluation.sentence).toMatch(/: less than 1e-6% of its elements \(fits\)\.$/);
  });

  it("gradients averaged over 8 workers, each divided before the sum: less than 1e-6% more of their squared norm flushes", () => {
    // dividing a Gaussian of rms 1 by 8 moves the binary16 flush bound 2^-25 to 2^-22 of it: the energy below is
    // about (2/3)·φ(0)·t³ ≈ 2.5e-20 (the integral of x² over |x| < t), far under the floor
    const judged = evaluateHazard(site({ kind: "gradient-sum", terms: 8, input: profile({ rms: 1, elements: 1e5 }) }), context({ workers: 8, workerGradients: "average" }));
    const flush = judged.evaluations.find((e) => e.measure === "flushed-energy")!;
    expect(flush.value).toBeLessThan(1e-8);
    expect(flush.sentence).toBe(
      "If each worker divides the gradients of layer by 8 before the sum, less than 1e-6% more of their squared norm flushes in binary16 (fits).",
    );
  });
});

describe("the start and the end of the horizon", () => {
  // each evaluation reports the worse of the two (higher verdict, then higher value): the same number as judging
  // the worse side on its own, whichever way the cheap bounds settle the comparison
  const alone = (input: MagnitudeProfile, output: MagnitudeProfile | undefined, ctx: HazardContext) =>
    evaluateHazard(site({ kind: "gradient-sum", terms: 4, input, ...(output ? { output } : {}) }), ctx);
  const ctx = context({ workers: 4, workerGradients: "average" });
  const cases: [string, MagnitudeProfile, MagnitudeProfile][] = [
    ["gradients that explode by the end", profile({ rms: 1e-3, log2Spread: 2, elements: 65536 }), profile({ rms: 1e17, log2Spread: 2, elements: 65536 })],
    ["gradients that shrink by the end", profile({ rms: 1e3, log2Spread: 1.5, elements: 65536 }), profile({ rms: 1e-6, log2Spread: 1.5, elements: 65536 })],
    ["gradients that barely move", profile({ rms: 3000, log2Spread: 0.5, elements: 4096 }), profile({ rms: 3100, log2Spread: 0.5, elements: 4096 })],
    ["gradients without a spread", profile({ rms: 1e-7, elements: 4096 }), profile({ rms: 2e-7, elements: 4096 })],
  ];
  for (const [name, start, end] of cases) {
    it(`${name}: each evaluation is the worse side's, judged alone`, () => {
      const both = evaluateHazard(site({ kind: "gradient-sum", terms: 4, input: start, end: { input: end } }), ctx);
      const first = alone(start, undefined, ctx);
      const second = alone(end, undefined, ctx);
      expect(both.evaluations).toHaveLength(first.evaluations.length);
      both.evaluations.forEach((evaluation, i) => {
        const a = first.evaluations[i]!;
        const b = second.evaluations[i]!;
        const rank = { fits: 0, "at-risk": 1, fails: 2 };
        const endWorse = rank[b.verdict] > rank[a.verdict] || (rank[b.verdict] === rank[a.verdict] && b.value > a.value);
        const expected = endWorse ? b : a;
        expect(evaluation.at).toBe(endWorse ? "end" : "start");
        expect(evaluation.value).toBe(expected.value);
        expect(evaluation.verdict).toBe(expected.verdict);
        // the sum's rounding error √n·u is the same at both sides, and its sentence names none
        if (evaluation.measure === "relative-error") {
          expect(evaluation.sentence).toBe(expected.sentence);
          expect(evaluation.sentence).not.toMatch(/at the (start|end) of/);
          return;
        }
        // the same sentence, saying which side of the horizon its numbers are from
        const side = endWorse ? " at the end of the horizon" : " at the start of training";
        expect(evaluation.sentence).toContain(side);
        expect(evaluation.sentence.replace(side, "")).toBe(expected.sentence);
      });
    });
  }

  it("a softmax whose logits grow past exp's limit by the end says so; one judged only at the start names no side", () => {
    // exp overflows binary16 from ln 65520 = 11.09 (SCIENCE.md §4): logits of 5 never reach it, logits of 40 always do
    const grows = evaluateHazard(
      site({ kind: "softmax-exp", input: profile({ shape: "constant", rms: 5, elements: 64 }), end: { input: profile({ shape: "constant", rms: 40, elements: 64 }) } }),
      context(),
    );
    expect(grows.evaluations[0]?.at).toBe("end");
    expect(grows.evaluations[0]?.sentence).toContain("reached with probability 1 per step at the end of the horizon (fails).");
    const once = evaluateHazard(site({ kind: "softmax-exp", input: profile({ shape: "constant", rms: 40, elements: 64 }) }), context());
    expect(once.evaluations[0]?.sentence).toContain("reached with probability 1 per step (fails).");
  });
});

describe("one site judged under several plans", () => {
  const norm = (): HazardSite =>
    site({ kind: "norm-sum-of-squares", terms: 4096, input: profile({ rms: 3.9, log2Spread: 0.3, elements: 4096 * 512 }) });
  const plans = [context({ accumulate: BINARY16 }), context({ activations: BINARY32 }), context({ accumulate: BINARY16, lossScale: 8 })];

  it("gives, plan after plan, what a fresh copy of the site gives under each plan alone", () => {
    const shared = norm();
    for (const plan of [...plans, ...plans]) expect(evaluateHazard(shared, plan)).toEqual(evaluateHazard(norm(), plan));
  });

  it("follows a change to the site's numbers made in place", () => {
    const shared = norm();
    const before = evaluateHazard(shared, plans[0]!);
    shared.input.rms = 4.2;
    const after = evaluateHazard(shared, plans[0]!);
    expect(after).toEqual(evaluateHazard({ ...norm(), input: { ...norm().input, rms: 4.2 } }, plans[0]!));
    expect(after.evaluations[0]?.value).not.toBe(before.evaluations[0]?.value);
  });

  it("hands each call its own evaluation objects", () => {
    const shared = norm();
    const first = evaluateHazard(shared, plans[1]!);
    const second = evaluateHazard(shared, plans[1]!);
    expect(second.evaluations[0]).toEqual(first.evaluations[0]);
    expect(second.evaluations[0]).not.toBe(first.evaluations[0]);
  });
});

describe("one layout for every result", () => {
  // sites of every kind, some with an end, under plans that give one, two and three evaluations per site
  const input = profile({ rms: 2, log2Spread: 1, elements: 65536, bound: 40 });
  const end = { input: profile({ rms: 900, log2Spread: 1, elements: 65536 }) };
  const sites: HazardSite[] = [
    site({ kind: "softmax-exp", input, terms: 64 }),
    site({ kind: "softmax-exp", input, terms: 70000, guarded: true, end }),
    site({ kind: "norm-sum-of-squares", input, terms: 4096, end }),
    site({ kind: "accumulation", input, terms: 1 << 20 }),
    site({ kind: "loss-value", layer: "loss", input, terms: 8, end }),
    site({ kind: "gradient-sum", input, terms: 4, output: profile({ rms: 1e5, elements: 65536 }), end }),
    site({ kind: "optimizer-constant", input: profile({ rms: 1e-3, log2Spread: 1, elements: 65536 }), constant: 1e-8 }),
    site({ kind: "optimizer-constant", input, constant: 0.5, end }),
    site({ kind: "optimizer-second-moment", input: profile({ rms: 1e-3, log2Spread: 1, elements: 65536 }) }),
    site({ kind: "optimizer-second-moment", input, end }),
  ];
  const plans = [context(), context({ accumulate: BINARY16, workerGradients: "average", workers: 8, lossScale: 1024 })];

  it("gives every evaluation, finding and check the same keys in the same order, with or without an end", () => {
    const keys = (o: object) => Object.keys(o).join(",");
    const checks = plans.flatMap((plan) => sites.map((s) => evaluateHazard(s, plan)));
    expect(new Set(checks.map(keys)).size).toBe(1);
    expect(new Set(checks.flatMap((c) => c.evaluations.map(keys))).size).toBe(1);
    const findings = checks.flatMap((c) => c.findings);
    expect(findings.length).toBeGreaterThan(3);
    expect(new Set(findings.map(keys)).size).toBe(1);
    // JSON still leaves out what a site does not have: `at` without an end, `constant` without a constant
    expect(JSON.parse(JSON.stringify(checks[0]))).not.toHaveProperty("constant");
    checks.forEach((c, i) => {
      const ended = sites[i % sites.length]?.end !== undefined;
      for (const f of c.findings) expect("at" in JSON.parse(JSON.stringify(f))).toBe(ended);
    });
  });

  it("gives a site the same result whatever was judged before it (the working records are reused)", () => {
    const forward = sites.map((s) => JSON.stringify(evaluateHazard(s, plans[1]!)));
    const reversed = [...sites].reverse().map((s) => JSON.stringify(evaluateHazard(s, plans[1]!))).reverse();
    expect(reversed).toEqual(forward);
  });
});

describe("hazards of 8-bit formats with scale factors: the scale moves with the values", () => {
  // e5m2: smallest subnormal 2^-16, largest finite 57344 (OCP 8-bit floating point specification rev. 1.0, E5M2)
  const E5M2 = rangeLimits(getFormat("e5m2"), { saturate: true, flushSubnormals: false });
  it("the e5m2 limits are the OCP specification's", () => {
    expect(E5M2.smallest).toBe(2 ** -16);
    expect(E5M2.maxFinite).toBe(57344);
  });

  const small = site({ kind: "gradient-sum", terms: 4, input: profile({ rms: 2 ** -14, elements: 1e6 }) });
  const flushOf = (scaling: HazardContext["scaling"], workers = 4) =>
    evaluateHazard(small, context({ gradients: E5M2, workers, workerGradients: "average", scaling })).evaluations.find((e) => e.measure === "flushed-energy")!;

  it("without scale factors, dividing gradients of rms 2^-14 by 4 before the sum flushes more of them in e5m2 (at risk)", () => {
    expect(flushOf("none").verdict).toBe("at-risk");
  });

  it("a per-tensor scale absorbs a division by 4, a power of two: nothing more flushes", () => {
    // the scale 2^⌊log2(max finite/amax)⌋ (Micikevicius et al. 2022 per-tensor scaling; SCIENCE.md §3.4) of the divided
    // tensor is 4 times the undivided one's, so the scaled elements are the same numbers
    expect(flushOf("tensor").value).toBe(0);
    expect(flushOf("tensor").verdict).toBe("fits");
  });

  it("per-block scales follow each block's maximum, so a division by any worker count changes nothing", () => {
    // each block of 32 takes its own shared exponent (OCP MX v1.0 §6, from memory); far from E8M0's 2^-127 floor
    for (const workers of [3, 4, 64]) {
      // only the energy below the floor of a scale clamped at 2^-127 remains: 2^-127·2^-17 against an rms of 2^-14/3
      expect(flushOf("block", workers).value).toBeLessThan(1e-100);
      expect(flushOf("block", workers).verdict).toBe("fits");
    }
  });

  it("a per-tensor scale absorbs a division by 3 to within the binade it floors to: less lost than unscaled", () => {
    expect(flushOf("tensor", 3).value).toBeLessThan(flushOf("none", 3).value);
  });

  it("the summed gradients overflow e5m2 with a per-tensor scale only as often as the scale rule clips", () => {
    const large = site({ kind: "gradient-sum", terms: 64, input: profile({ shape: "constant", rms: 2000, elements: 10 }) });
    // 64 × 2000 = 128000 > 57344: past e5m2's range unscaled; a scale of 2^⌊log2(57344/128000)⌋ = 2^-2 brings it to 32000
    const unscaled = evaluateHazard(large, context({ gradients: E5M2, workers: 64 })).evaluations[0]!;
    const scaled = evaluateHazard(large, context({ gradients: E5M2, workers: 64, scaling: "tensor" })).evaluations[0]!;
    expect(unscaled.verdict).toBe("fails");
    expect(scaled.value).toBe(0);
    expect(scaled.verdict).toBe("fits");
  });

  it("a norm's sum of squares kept in e4m3 with a per-tensor or per-block scale does not overflow at rms 1.35 over 512 features", () => {
    // unscaled it passes 448 (OCP E4M3 largest finite) once rms > √(448/512) = 0.935; scaled, the sums (about
    // 512·1.35² = 933) take the scale 2^⌊log2(448/max)⌋ = 2^-2 or less, and pass the format's level no more often than
    // the rule's own quantile (1e-3 per step)
    const norm = site({ kind: "norm-sum-of-squares", terms: 512, input: profile({ rms: 1.35, elements: 512 * 256 }) });
    const held = (scaling: HazardContext["scaling"]) => evaluateHazard(norm, context({ activations: E4M3_SATURATING, scaling })).evaluations[0]!;
    expect(held("none").criticalLevel).toBeCloseTo(Math.sqrt(448 / 512), 12);
    expect(held("none").verdict).toBe("at-risk");
    expect(held("tensor").value).toBeLessThanOrEqual(DEFAULT_THRESHOLDS.maxQuantile);
    expect(held("tensor").verdict).toBe("fits");
    expect(held("block").value).toBe(0);
    expect(held("block").verdict).toBe("fits");
  });
});
