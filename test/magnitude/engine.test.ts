/** The engine's bookkeeping: loss seeds, reductions, workers and accumulation, zero mass, ledgers, hazards. */
import { readFileSync, readdirSync } from "node:fs";
import { describe, expect, test } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { createRandom, gaussianSoftmaxMoments } from "../../src/numeric/index.js";
import { predict } from "../../src/magnitude/index.js";
import { predictForCheck } from "../../src/magnitude/predict.js";
import type { Prediction, TensorPrediction } from "../../src/magnitude/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec, TrainingSpec } from "../../src/spec/types.js";
import {
  act,
  attention,
  crossEntropy,
  dense,
  dropout,
  embedding,
  features,
  gated,
  he,
  lecun,
  makeSpec,
  mse,
  norm,
  normalInit,
  repeat,
  residual,
  tokens,
} from "./build-spec.js";

function run(spec: NetworkSpec, lossScale?: number): Prediction {
  const result = buildGraph(spec);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return predict(result.graph, spec, lossScale === undefined ? {} : { lossScale });
}

function tensor(prediction: Prediction, id: string): TensorPrediction {
  const found = prediction.tensors.find((t) => t.id === id);
  if (found === undefined) throw new Error(`no tensor ${id}`);
  return found;
}

const ms = (t: TensorPrediction, phase: "start" | "end" = "start"): number => t[phase].meanSquare ?? NaN;

const training = (overrides: Partial<TrainingSpec>): { training: Partial<TrainingSpec> } => ({ training: overrides });

function smallTransformer(): NetworkSpec {
  return makeSpec(
    [
      embedding("embed", 5000, 128, normalInit(0.02)),
      repeat("blocks", 3, [
        residual("attn", [norm("norm", "rms-norm"), attention("self", 4, 32, { causal: true })]),
        residual("mlp", [norm("norm", "rms-norm"), gated("ff", 512), dropout("drop", 0.1)]),
      ]),
      norm("final", "rms-norm"),
      dense("head", 5000, normalInit(0.02)),
    ],
    { input: tokens(64), loss: crossEntropy(5000), ...training({ batch: 4, horizon: { steps: 100, weightGrowth: 1.3, finalLoss: 1.5 } }) },
  );
}

describe("the prediction lists every tensor once", () => {
  test("ids are unique; forward tensors come before backward ones; every weight has a gradient", () => {
    const p = run(smallTransformer());
    const ids = p.tensors.map((t) => t.id);
    expect(new Set(ids).size).toBe(ids.length);
    const firstGradient = p.tensors.findIndex((t) => t.role === "activation-gradient");
    expect(p.tensors.slice(0, firstGradient).every((t) => !t.role.includes("gradient"))).toBe(true);
    const weights = p.tensors.filter((t) => t.role === "weight").map((t) => t.id.replace("/weight", "/weight-gradient"));
    for (const id of weights) expect(ids).toContain(id);
    expect(p.specName).toBe("test-network");
  });

  test("every ledger's factors add up to log2 of the reported rms (the chain rule made visible)", () => {
    const p = run(smallTransformer());
    for (const t of p.tensors) {
      if (!(t.start.rms > 0)) continue;
      const sum = t.ledger.reduce((a, e) => a + e.log2Factor, 0);
      expect(sum, t.id).toBeCloseTo(Math.log2(t.start.rms), 9);
      for (const entry of t.ledger) expect(entry.source.length, `${t.id}: ${entry.rule}`).toBeGreaterThan(0);
    }
  });

  test("ledgers are worked out when first read, from the pass predicted: under a loss scale, last tensor first, they still add up to log2 of the rms", () => {
    // the ledger pass runs again on demand; it must see the loss scale and emit the tensors in the same order
    const p = run(smallTransformer(), 1024);
    const gradient = p.tensors.filter((t) => t.role === "weight-gradient" && t.start.rms > 0);
    expect(gradient.length).toBeGreaterThan(5);
    for (const t of [...p.tensors].reverse()) {
      if (!(t.start.rms > 0)) continue;
      expect(t.ledger.reduce((a, e) => a + e.log2Factor, 0), t.id).toBeCloseTo(Math.log2(t.start.rms), 9);
    }
    // the loss scale's factor 2^10 sits in the loss seed's entry of every gradient's ledger (chain rule)
    const unscaled = run(smallTransformer());
    const first = gradient[0] as TensorPrediction;
    const seed = (q: Prediction) => tensor(q, first.id).ledger.find((e) => e.layer === "loss")?.log2Factor ?? NaN;
    expect(seed(p) - seed(unscaled)).toBeCloseTo(10, 9);
  });

  test("the prediction check keeps: the same tensors, sites and ledgers as predict's, the ledger read through the tensor only", () => {
    const spec = smallTransformer();
    const built = buildGraph(spec);
    if (!built.ok) throw new Error("does not build");
    const returned = predict(built.graph, spec);
    const kept = predictForCheck(built.graph, spec);
    expect(JSON.stringify(kept.hazards)).toBe(JSON.stringify(returned.hazards));
    expect(kept.tensors.length).toBe(returned.tensors.length);
    for (let i = 0; i < kept.tensors.length; i++) {
      const a = kept.tensors[i]!;
      const b = returned.tensors[i]!;
      // every key predict's tensor has but the ledger, in its order
      expect(Object.keys(a)).toEqual(Object.keys(b).filter((k) => k !== "ledger"));
      expect(JSON.stringify(a)).toBe(JSON.stringify(b, (key, value: unknown) => (key === "ledger" ? undefined : value)));
      expect(a.ledger.length, a.id).toBeGreaterThan(0);
      expect(JSON.stringify(a.ledger)).toBe(JSON.stringify(b.ledger));
    }
  });

  test("the prediction check keeps, with weight growth 1 (its end pass takes the start's forward): the same numbers as predict's two passes", () => {
    // the reference is predict, whose end pass walks the forward again: with no weight growth the two must agree to
    // the bit, and the forward tensors' end profiles are then the start's very objects in check's prediction alone
    const parsed = parseSpec(readFileSync("specs/cnn-batchnorm.yaml", "utf8"), "specs/cnn-batchnorm.yaml");
    if (!parsed.ok) throw new Error("cnn-batchnorm does not parse");
    const cnn = parsed.spec;
    const stack = makeSpec([dense("d0", 48, he, true), act("a0"), dropout("drop", 0.1), dense("d1", 32, he, true), act("a1", "tanh"), dense("head", 8)], {
      input: features(24),
      loss: mse(1, "sum"),
      ...training({ workers: 2, accumulationSteps: 3, horizon: { steps: 1000, weightGrowth: 1, finalLoss: 0.3 } }),
    });
    for (const spec of [cnn, stack]) {
      expect(spec.training.horizon.weightGrowth).toBe(1);
      const built = buildGraph(spec);
      if (!built.ok) throw new Error("does not build");
      const returned = predict(built.graph, spec);
      const kept = predictForCheck(built.graph, spec);
      expect(JSON.stringify(kept.hazards)).toBe(JSON.stringify(returned.hazards));
      expect(JSON.stringify(kept.tensors)).toBe(JSON.stringify(returned.tensors, (key, value: unknown) => (key === "ledger" ? undefined : value)));
      const forward = kept.tensors.filter((t) => t.role === "activation" || t.role === "pre-activation");
      expect(forward.length).toBeGreaterThan(3);
      for (const t of forward) expect(t.end, t.id).toBe(t.start);
      for (const t of returned.tensors) if (t.role !== "weight") expect(t.end, t.id).not.toBe(t.start);
    }
  });

  test("ledgers survive a spread copy and JSON", () => {
    const t = tensor(run(smallTransformer()), "blocks.2.mlp.ff/activation:product");
    const copy = { ...t, source: "measured" as const };
    expect(copy.ledger.length).toBeGreaterThan(3);
    const json = JSON.parse(JSON.stringify(t)) as TensorPrediction;
    expect(json.ledger).toEqual(t.ledger);
  });
});

describe("loss seeds (SCIENCE.md §2.1 output seed; DESIGN.md §3)", () => {
  test("softmax cross-entropy with mean reduction: right class √E[(1 − p)²]/N, wrong classes √E[p²]/N at the median draw's logit variance, log-normal elements", () => {
    const C = 1000;
    const spec = makeSpec([dense("head", C, normalInit(0.5 / Math.sqrt(64)))], { input: features(64, 8), loss: crossEntropy(C), ...training({ batch: 16 }) });
    const p = run(spec);
    const N = 16 * 8;
    expect(ms(tensor(p, "head/pre-activation"))).toBeCloseTo(0.25, 12);
    const s2 = tensor(p, "head/pre-activation").start.rms ** 2; // the median draw's logit variance (no bias: mean 0)
    const m = gaussianSoftmaxMoments(s2, C);
    const right = tensor(p, "head/activation-gradient:target-class");
    // E[(1 − p_y)²] = 1 − 2E[p] + E[p²] with E[p] = 1/C (labels independent of the logits)
    expect(right.start.rms).toBeCloseTo(Math.sqrt(1 - 2 / C + m.second) / N, 15);
    expect(right.start.elements).toBe(N);
    const wrong = tensor(p, "head/activation-gradient");
    expect(wrong.start.shape).toBe("log-normal");
    expect(wrong.start.rms).toBeCloseTo(Math.sqrt(m.second) / N, 15);
    // with 1000 classes the denominator concentrates, so the log-normal form e^(s²/2)/C is within 1%
    expect(Math.abs((wrong.start.rms * N * C) / Math.exp(s2 / 2) - 1)).toBeLessThan(0.01);
    expect(wrong.start.elementLog2Spread).toBeCloseTo(Math.sqrt(s2) / Math.LN2, 12);
    expect(wrong.start.elements).toBe(N * (C - 1));
    const loss = tensor(p, "loss/loss").start;
    expect(loss.rms).toBeCloseTo(m.logSumExp, 12);
    expect(Math.abs(loss.rms - (Math.log(C) + s2 / 2))).toBeLessThan(1e-3);
  });

  test("sum reduction drops the 1/N and reports the loss-value hazard", () => {
    const spec = (reduction: "mean" | "sum"): NetworkSpec => makeSpec([dense("head", 10, lecun)], { input: features(32, 4), loss: crossEntropy(10, reduction), ...training({ batch: 8 }) });
    const mean = run(spec("mean"));
    const sum = run(spec("sum"));
    expect(tensor(sum, "head/activation-gradient:target-class").start.rms / tensor(mean, "head/activation-gradient:target-class").start.rms).toBeCloseTo(32, 12);
    const hazard = sum.hazards.find((h) => h.kind === "loss-value");
    expect(hazard?.terms).toBe(32);
    expect(mean.hazards.some((h) => h.kind === "loss-value")).toBe(false);
  });

  test("at the end of the horizon the right-class gradient is (1 − e^(−final loss))/N", () => {
    const spec = makeSpec([dense("head", 100, lecun)], { input: features(32), loss: crossEntropy(100), ...training({ batch: 10, horizon: { steps: 10, weightGrowth: 1, finalLoss: 0.1 } }) });
    const right = tensor(run(spec), "head/activation-gradient:target-class");
    expect(right.end.rms).toBeCloseTo((1 - Math.exp(-0.1)) / 10, 14);
    const s2 = tensor(run(spec), "head/pre-activation").start.rms ** 2;
    expect(right.start.rms).toBeCloseTo(Math.sqrt(1 - 2 / 100 + gaussianSoftmaxMoments(s2, 100).second) / 10, 14);
  });

  test("a final loss below 2^-53 keeps its right-class gradient: 1 − e^(−L) = L(1 − L/2 + …) (Taylor), not 1 − 1 = 0", () => {
    const spec = makeSpec([dense("head", 100, lecun)], { input: features(32), loss: crossEntropy(100), ...training({ batch: 10, horizon: { steps: 10, weightGrowth: 1, finalLoss: 1e-20 } }) });
    const right = tensor(run(spec), "head/activation-gradient:target-class");
    expect(right.end.rms / (1e-20 / 10)).toBeCloseTo(1, 12);
  });

  test("mean squared error: 2·√(median E[y²] + target²)/M, the loss at the median draw with the output's spread; the end shrinks to √(final loss)", () => {
    const spec = makeSpec([dense("out", 4, lecun)], { input: features(16), loss: mse(3), ...training({ batch: 8, horizon: { steps: 10, weightGrowth: 1, finalLoss: 0.25 } }) });
    const p = run(spec);
    const g = tensor(p, "out/activation-gradient");
    const M = 8 * 4;
    const out = tensor(p, "out/pre-activation").start;
    const median = out.rms ** 2; // the output's second moment at the median draw
    expect(median).toBeLessThan(ms(tensor(p, "out/pre-activation"))); // below the mean over draws, q = 1
    expect(g.start.rms).toBeCloseTo((2 * Math.sqrt(median + 9)) / M, 14);
    expect(g.end.rms).toBeCloseTo((2 * Math.sqrt(0.25)) / M, 14);
    // ln(loss) = ln(X + t²) moves with ln X by the elasticity X/(X + t²) (delta method)
    const loss = tensor(p, "loss/loss").start;
    expect(loss.rms).toBeCloseTo(median + 9, 12);
    expect(loss.log2Spread).toBeCloseTo((out.log2Spread * 2 * median) / (median + 9), 4);
    expect(g.start.log2Spread).toBeCloseTo(loss.log2Spread / 2, 12);
    // seeded Monte Carlo of the statistic: draws of the output's second moment from the log-normal of SCIENCE.md §2.6
    // (ln X ~ N(ln q − V/2, V), q the mean over draws) give a median loss X + t² equal to the prediction
    const random = createRandom(11);
    const V = (out.log2Spread * 2 * Math.LN2) ** 2;
    const q = ms(tensor(p, "out/pre-activation"));
    const draws = Array.from({ length: 20001 }, () => q * Math.exp(-V / 2 + Math.sqrt(V) * random.normal()) + 9).sort((a, b) => a - b);
    expect(Math.abs((draws[10000] as number) / loss.rms - 1)).toBeLessThan(0.01);
    const meanLoss = draws.reduce((a, b) => a + b, 0) / draws.length;
    expect(meanLoss).toBeGreaterThan(loss.rms); // the mean over draws is not what is predicted
  });

  test("a loss scale S multiplies every gradient by S and leaves the forward pass alone (Micikevicius et al. 2018 §3.2)", () => {
    const base = run(smallTransformer());
    const scaled = run(smallTransformer(), 1024);
    for (const id of ["embed/activation-gradient", "blocks.0.attn.self/weight-gradient:query", "head/activation-gradient:target-class"]) {
      expect(tensor(scaled, id).start.rms / tensor(base, id).start.rms).toBeCloseTo(1024, 9);
    }
    expect(tensor(scaled, "head/pre-activation").start.rms).toBe(tensor(base, "head/pre-activation").start.rms);
  });
});

describe("weight gradients, workers and accumulation", () => {
  test("a dense weight gradient on independent samples is the incoherent sum N·E[x²]·E[δ²]; the coherent bracket is √N larger (SCIENCE.md §2.1)", () => {
    // targets far larger than the outputs: the loss gradient does not hold the network's own output, so no part of
    // the sum is aligned by the loss's curvature (test/magnitude/loss-curvature.test.ts)
    const spec = makeSpec([dense("a", 32, he), act("r"), dense("out", 2, lecun)], { input: features(16, 5), loss: mse(1e8), ...training({ batch: 12 }) });
    const p = run(spec);
    const N = 12 * 5;
    const x = ms(tensor(p, "input/activation"));
    const delta = ms(tensor(p, "a/activation-gradient"));
    const g = tensor(p, "a/weight-gradient");
    expect(ms(g) / (N * x * delta)).toBeCloseTo(1, 12);
    expect(g.start.coherentRms! / g.start.rms).toBeCloseTo(Math.sqrt(N), 9);
  });

  test("samples that share part of their inputs and gradients make the sum partly coherent (between the brackets)", () => {
    const layers = [];
    for (let i = 0; i < 30; i++) layers.push(dense(`d${i}`, 128, he), act(`a${i}`));
    const p = run(makeSpec([...layers, dense("out", 10, lecun)], { input: features(128), loss: crossEntropy(10), ...training({ batch: 64 }) }));
    const g = tensor(p, "out/weight-gradient");
    const incoherent = Math.sqrt(64 * ms(tensor(p, "a29/activation")) * ms(tensor(p, "out/activation-gradient")));
    expect(g.start.rms).toBeGreaterThan(incoherent * Math.exp(-0.01));
    expect(Math.sqrt(ms(g))).toBeGreaterThan(1.5 * incoherent);
    expect(g.start.rms).toBeLessThan(g.start.coherentRms!);
  });

  test("accumulation divides every gradient by the steps; the combined weight gradient is A·W·q summed, ÷W² averaged", () => {
    // (targets far larger than the outputs, as above: the part the loss's curvature aligns adds coherently instead, A²·W²)
    const layers = [dense("a", 32, he), act("r"), dense("out", 2, lecun)];
    const plain = run(makeSpec(layers, { input: features(16), loss: mse(1e8) }));
    const spread = run(makeSpec(layers, { input: features(16), loss: mse(1e8), ...training({ accumulationSteps: 4, workers: 8, workerGradients: "average" }) }));
    expect(tensor(spread, "a/activation-gradient").start.rms / tensor(plain, "a/activation-gradient").start.rms).toBeCloseTo(1 / 4, 12);
    const ratio = ms(tensor(spread, "a/weight-gradient")) / ms(tensor(plain, "a/weight-gradient"));
    expect(ratio).toBeCloseTo((4 * 8) / 16 / 64, 12);
    const sum = spread.hazards.find((h) => h.kind === "gradient-sum" && h.layer === "a");
    expect(sum?.terms).toBe(32);
    const summed = run(makeSpec(layers, { input: features(16), loss: mse(1e8), ...training({ workers: 8, workerGradients: "sum" }) }));
    expect(ms(tensor(summed, "a/weight-gradient")) / ms(tensor(plain, "a/weight-gradient"))).toBeCloseTo(8, 12);
  });

  test("embedding table gradients: a share e^(−N/V) of rows is exactly zero (uniform token use)", () => {
    const spec = makeSpec([embedding("e", 4096, 16), dense("out", 8, lecun)], { input: tokens(32), loss: crossEntropy(8), ...training({ batch: 16 }) });
    const g = tensor(run(spec), "e/weight-gradient:table");
    expect(g.start.zeroFraction).toBeCloseTo(Math.exp(-(16 * 32) / 4096), 12);
    expect(g.start.elements).toBe(4096 * 16);
  });
});

describe("layer rules inside the engine", () => {
  test("dropout: zero mass = rate, second moment ÷ (1 − rate) forward and backward (Srivastava et al. 2014)", () => {
    const p = run(makeSpec([dense("a", 64, lecun), dropout("d", 0.25), dense("out", 1, lecun)], { input: features(64) }));
    const d = tensor(p, "d/activation");
    expect(d.start.zeroFraction).toBe(0.25);
    expect(ms(d) / ms(tensor(p, "a/pre-activation"))).toBeCloseTo(1 / 0.75, 12);
    expect(ms(tensor(p, "a/activation-gradient")) / ms(tensor(p, "d/activation-gradient"))).toBeCloseTo(1 / 0.75, 12);
    expect(tensor(p, "a/activation-gradient").start.zeroFraction).toBe(0.25);
  });

  test("norms reset the second moment to gain² and report a sum-of-squares hazard over the features", () => {
    const p = run(makeSpec([dense("a", 300, normalInit(10)), norm("ln", "layer-norm", 3), dense("out", 1, lecun)], { input: features(64) }));
    expect(ms(tensor(p, "ln/activation"))).toBeCloseTo(9, 6);
    const hazard = p.hazards.find((h) => h.kind === "norm-sum-of-squares");
    expect(hazard?.terms).toBe(300);
    expect(hazard?.input.rms).toBeGreaterThan(50);
  });

  test("gated product: E[h²] = E[φ(g)²]·E[u²] with product tails", () => {
    const p = run(makeSpec([gated("ff", 256, "relu", lecun), dense("out", 1, lecun)], { input: features(64, 4) }));
    const product = tensor(p, "ff/activation:product");
    expect(ms(product)).toBeCloseTo(0.5 * 1, 12);
    expect(product.start.zeroFraction).toBe(0.5);
    const gaussianMax = tensor(p, "ff/pre-activation:up").start.maxElement! / tensor(p, "ff/pre-activation:up").start.rms;
    expect(product.start.maxElement! / product.start.rms).toBeGreaterThan(gaussianMax);
  });

  test("attention hazards: exp guarded only when the row maximum is subtracted; q·k accumulates over the head width", () => {
    const p = run(makeSpec([attention("att", 2, 64, { scaling: "logits" }), dense("out", 1, lecun)], { input: features(128, 16) }));
    const exp = p.hazards.find((h) => h.kind === "softmax-exp" && h.layer === "att");
    expect(exp?.guarded).toBe(true);
    expect(exp?.terms).toBe(16);
    const qk = p.hazards.find((h) => h.kind === "accumulation" && h.layer === "att");
    expect(qk?.terms).toBe(64);
    // before the 1/√d scaling the accumulated dot product has variance d (Vaswani et al. 2017, footnote 4)
    expect(qk?.output?.meanSquare).toBeCloseTo(64, 9);
    expect(qk?.end).toBeDefined();
  });

  test("end of horizon: weights grown by g make a homogeneous ReLU chain grow by g per layer", () => {
    const layers = [];
    for (let i = 0; i < 6; i++) layers.push(dense(`d${i}`, 64, he), act(`a${i}`));
    const p = run(makeSpec([...layers, dense("out", 1, lecun)], { input: features(64), ...training({ horizon: { steps: 1, weightGrowth: 1.5 } }) }));
    expect(tensor(p, "d0/weight").end.rms / tensor(p, "d0/weight").start.rms).toBeCloseTo(1.5, 12);
    expect(ms(tensor(p, "a5/activation"), "end") / ms(tensor(p, "a5/activation"))).toBeCloseTo(1.5 ** 12, 9);
  });
});

describe("the example specs", () => {
  const files = readdirSync("specs").filter((f) => f.endsWith(".yaml"));
  test.each(files)("%s predicts finite magnitudes with stated assumptions", (file) => {
    const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
    if (!parsed.ok) throw new Error(`${file} does not parse`);
    const p = run(parsed.spec);
    expect(p.tensors.length).toBeGreaterThan(4);
    for (const t of p.tensors) {
      for (const phase of ["start", "end"] as const) {
        const profile = t[phase];
        expect(Number.isFinite(profile.rms), `${t.id} ${phase}`).toBe(true);
        expect(profile.zeroFraction).toBeGreaterThanOrEqual(0);
        expect(profile.zeroFraction).toBeLessThanOrEqual(1);
        expect(Number.isFinite(profile.log2Spread)).toBe(true);
      }
    }
    expect(p.assumptions.length).toBeGreaterThan(3);
  });
});

describe("ledger wording of large numbers", () => {
  test("an embedding multiplier of 128 reads 1.638e4 in its rule, not toExponential's 1.638e+4", () => {
    // 128² = 16384 (the rule shows var_table·multiplier²)
    const p = run(makeSpec([embedding("e", 64, 16, normalInit(1), 128), dense("out", 8, lecun)], { input: tokens(4), loss: crossEntropy(8) }));
    const rule = p.tensors.find((t) => t.id === "e/activation")!.ledger.map((entry) => entry.rule).join(" | ");
    expect(rule).toContain("1.638e4");
    expect(rule).not.toContain("e+");
  });

  test("a summed squared error's loss value reads without e+, and cites the loss's definition, not its gradient", () => {
    // 32 samples × 64 outputs = 2048 terms, each about 1 (output) + 4 (target scale 2) = 5: about 1e4 in all
    const p = run(makeSpec([dense("out", 64, lecun)], { loss: mse(2, "sum") }));
    const [entry] = p.tensors.find((t) => t.id === "loss/loss")!.ledger;
    expect(entry?.rule).toMatch(/^loss value \d\.\d{3}e4 at the median draw$/);
    expect(entry?.source).toContain("(definition)");
    expect(entry?.source).not.toContain("gradient");
  });

  test("no rule of a summed loss or a small variance reads toExponential's e+0 or toPrecision's 0.00000168", () => {
    // the summed squared error's output gradient 2·rms(y − t) is about 2·√5 ≈ 4.5 (toExponential wrote 4.472e+0);
    // a wide layer's finite-width variance is about 1e-6 (toPrecision wrote 0.00000168)
    const p = run(makeSpec([dense("wide", 4096, he), act("r"), dense("out", 64, lecun)], { loss: mse(2, "sum") }));
    const rules = p.tensors.flatMap((t) => t.ledger.map((entry) => entry.rule));
    expect(rules.some((rule) => rule.startsWith("mean squared error, sum over"))).toBe(true);
    for (const rule of rules) {
      expect(rule).not.toContain("e+");
      expect(rule).not.toMatch(/\b0\.0000\d/);
    }
  });
});

describe("the gradient-sum site's words", () => {
  test("count steps and workers in the singular or plural they need, not step(s) and worker(s)", () => {
    const p = run(makeSpec([dense("out", 4, lecun)], { loss: crossEntropy(4), training: { workers: 2, accumulationSteps: 1, workerGradients: "average" } }));
    const site = p.hazards.find((h) => h.kind === "gradient-sum" && h.detail.startsWith("out/weight-gradient:"));
    expect(site?.detail).toBe("out/weight-gradient: 1 accumulation step × 2 workers summed, then divided by 2");
  });
});

describe("the assumptions listed", () => {
  test("name the token-use assumption only for a network that looks up tokens", () => {
    const token = /^Token ids are taken as used uniformly/;
    const mlp = run(makeSpec([dense("hidden", 32, he), act("relu", "relu"), dense("out", 8, lecun)], { loss: crossEntropy(8) }));
    expect(mlp.assumptions.some((a) => token.test(a))).toBe(false);
    const lookup = run(makeSpec([embedding("e", 4096, 16), dense("out", 8, lecun)], { input: tokens(32), loss: crossEntropy(8) }));
    expect(lookup.assumptions.some((a) => token.test(a))).toBe(true);
  });

  test("say a squared error's output gradient is scaled by √(final / initial loss), which is a growth for a larger final loss", () => {
    // target scale 1: the initial mean square of y − t is about 1 + E[y²] ≈ 2; a final loss of 8 is larger, so the
    // gradient 2(y − t) grows by about √(8/2) = 2 (the residual's rms is √(final loss))
    const p = run(makeSpec([dense("out", 4, lecun)], { loss: mse(1), training: { horizon: { steps: 100, weightGrowth: 1, finalLoss: 8 } } }));
    const gradient = p.tensors.find((t) => t.id === "out/activation-gradient")!;
    expect(gradient.end.rms).toBeGreaterThan(gradient.start.rms);
    expect(p.assumptions).toContain(
      "At the end of the horizon the output residual's rms is √(final loss), which scales the output gradient by √(final loss / initial loss), a shrink when the final loss is the smaller.",
    );
  });

  test("say the output gradient shrinks only when the final loss is below ln(classes)", () => {
    // e^(−0.5) = 0.607 > 1/10 shrinks 1 − p; e^(−3) = 0.0498 < 1/10 (3 > ln 10 = 2.303) is no surer than an untrained
    // classifier's 1/10 (uniform predictions), so 1 − p does not shrink
    const at = (finalLoss: number) =>
      run(makeSpec([dense("out", 10, lecun)], { loss: crossEntropy(10), training: { horizon: { steps: 100, weightGrowth: 1, finalLoss } } })).assumptions.find((a) =>
        a.startsWith("At the end of the horizon the right-class probability"),
      );
    expect(at(0.5)).toBe("At the end of the horizon the right-class probability is taken as e^(−final loss) = 0.607, which shrinks the output gradient (own algebra: the mean loss −ln p of the right class, read back as p).");
    expect(at(3)).toBe(
      "At the end of the horizon the right-class probability is taken as e^(−final loss) = 0.0498, no more than the untrained 1/10, so the output gradient does not shrink (own algebra: the mean loss −ln p of the right class, read back as p).",
    );
  });
});
