/**
 * The magnitude engine against published theory. Each check names its source; values are from SCIENCE.md,
 * "Check values".
 */
import { describe, expect, test } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import type { Prediction, TensorPrediction } from "../../src/magnitude/index.js";
import type { LayerSpec, NetworkSpec } from "../../src/spec/types.js";
import { simulate } from "../../src/simulate/index.js";
import { act, attention, conv, crossEntropy, dense, features, flatten, glorot, he, image, lecun, makeSpec, mse, normalInit, pool, residual } from "./build-spec.js";

function run(spec: NetworkSpec): Prediction {
  const result = buildGraph(spec);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return predict(result.graph, spec);
}

function tensor(prediction: Prediction, id: string): TensorPrediction {
  const found = prediction.tensors.find((t) => t.id === id);
  if (found === undefined) throw new Error(`no tensor ${id}; have ${prediction.tensors.slice(0, 20).map((t) => t.id).join(", ")}…`);
  return found;
}

const meanSquare = (t: TensorPrediction): number => t.start.meanSquare ?? NaN;

function mlp(depth: number, width: number, init = he, activation: "relu" | "identity" = "relu"): LayerSpec[] {
  const layers: LayerSpec[] = [];
  for (let i = 0; i < depth; i++) layers.push(dense(`d${i}`, width, init), act(`a${i}`, activation));
  layers.push(dense("out", 1, lecun));
  return layers;
}

describe("forward second moments", () => {
  test("He init keeps the second moment constant through 50 ReLU layers (He et al. 2015; SCIENCE.md check 19)", () => {
    const p = run(makeSpec(mlp(50, 256), { input: features(256) }));
    const first = meanSquare(tensor(p, "d0/pre-activation"));
    expect(first).toBeCloseTo(2, 12); // input q = 1, He: 2/n·n·1
    for (let i = 1; i < 50; i++) expect(meanSquare(tensor(p, `d${i}/pre-activation`)) / first).toBeCloseTo(1, 12);
  });

  test("Glorot + ReLU halves the second moment per square layer: 2^-30 after 30 layers (He et al. 2015 analysis; check 18)", () => {
    const p = run(makeSpec(mlp(31, 128, glorot), { input: features(128) }));
    const ratio = meanSquare(tensor(p, "d30/pre-activation")) / meanSquare(tensor(p, "d0/pre-activation"));
    expect(Math.abs(ratio / 2 ** -30 - 1)).toBeLessThan(1e-12);
    expect(2 ** -30).toBeCloseTo(9.313225746154785e-10, 22);
  });

  test("a residual stream with variance-preserving He branches doubles per block without normalisation (Zhang et al. 2019, Fixup §2; check 28)", () => {
    const blocks: LayerSpec[] = [];
    for (let i = 0; i < 12; i++) blocks.push(residual(`block${i}`, [act("relu"), dense("proj", 64, he)]));
    const p = run(makeSpec([...blocks, dense("out", 1, lecun)], { input: features(64) }));
    for (let i = 0; i < 12; i++) expect(meanSquare(tensor(p, `block${i}/activation`))).toBeCloseTo(2 ** (i + 1), 9);
  });

  test("a branch multiplier α gives (1 + α²) per block; α = 1/√L keeps the growth under e (Fixup §2, SCIENCE.md §2.7)", () => {
    const L = 64;
    const alpha = 1 / Math.sqrt(L);
    const blocks: LayerSpec[] = [];
    for (let i = 0; i < L; i++) blocks.push(residual(`block${i}`, [act("relu"), dense("proj", 64, he)], alpha));
    const p = run(makeSpec([...blocks, dense("out", 1, lecun)], { input: features(64) }));
    const growth = meanSquare(tensor(p, `block${L - 1}/activation`));
    expect(growth / (1 + alpha * alpha) ** L).toBeCloseTo(1, 12);
    expect(growth).toBeLessThan(Math.E);
  });

  test("attention logit variance is d_k unscaled and 1 after 1/√d_k with unit q and k (Vaswani et al. 2017, footnote 4; check 30)", () => {
    for (const [scaling, expected] of [["logits", 1], ["query", 1], ["none", 64]] as const) {
      const p = run(makeSpec([attention("att", 4, 64, { scaling, init: lecun }), dense("out", 1, lecun)], { input: features(256, 32) }));
      expect(meanSquare(tensor(p, "att/pre-activation:query"))).toBeCloseTo(1, 12);
      expect(meanSquare(tensor(p, "att/pre-activation:key"))).toBeCloseTo(1, 12);
      expect(meanSquare(tensor(p, "att/pre-activation:logits"))).toBeCloseTo(expected, 10);
    }
  });

  test("uniform attention at init averages P values: head output second moment ≈ E[v²]/P, causal ≈ E[v²]·H_P/P (mean field)", () => {
    const P = 32;
    // tiny query weights make the logits ~0, so attention is uniform
    const tiny = normalInit(1e-6);
    const full = run(makeSpec([attention("att", 2, 16, { init: tiny }), dense("out", 1, lecun)], { input: features(64, P) }));
    const v = meanSquare(tensor(full, "att/pre-activation:value"));
    expect(meanSquare(tensor(full, "att/activation:heads")) / v).toBeCloseTo(1 / P, 6);
    const causal = run(makeSpec([attention("att", 2, 16, { init: tiny, causal: true }), dense("out", 1, lecun)], { input: features(64, P) }));
    let harmonic = 0;
    for (let i = 1; i <= P; i++) harmonic += 1 / i;
    expect(meanSquare(tensor(causal, "att/activation:heads")) / meanSquare(tensor(causal, "att/pre-activation:value"))).toBeCloseTo(harmonic / P, 6);
  });

  test("a ReLU output has exact-zero mass 1/2 and half-Gaussian nonzero elements (ReLU definition; SCIENCE.md §2.10)", () => {
    const p = run(makeSpec(mlp(2, 64), { input: features(64) }));
    const relu = tensor(p, "a0/activation");
    expect(relu.start.zeroFraction).toBe(0.5);
    expect(relu.start.shape).toBe("half-gaussian");
    const gradient = tensor(p, "d0/activation-gradient");
    expect(gradient.start.zeroFraction).toBe(0.5);
  });
});

describe("backward second moments", () => {
  function linearChain(factor: number): Prediction {
    const width = 100;
    // gradient rms factor per layer: √(var_w·fan_out) = factor
    const init = normalInit(factor / Math.sqrt(width));
    const layers: LayerSpec[] = [];
    for (let i = 0; i <= 100; i++) layers.push(dense(`d${i}`, width, init));
    // targets far larger than the outputs (about 1.5^101 here): the loss gradient does not hold the network's own
    // output, the independence the product-of-Jacobians rule assumes (no curvature part: loss-curvature.test.ts)
    return run(makeSpec(layers, { input: features(width), loss: mse(1e30) }));
  }

  test("a 100-layer linear chain with gradient factor 1.5 grows the gradient by 1.5^100 ≈ 4.0656e17 (common practice; check 36)", () => {
    const p = linearChain(1.5);
    const ratio = Math.sqrt(meanSquare(tensor(p, "d0/activation-gradient")) / meanSquare(tensor(p, "d100/activation-gradient")));
    expect(Math.abs(ratio / 4.0656117753521524e17 - 1)).toBeLessThan(1e-12);
  });

  test("factor 0.8 shrinks it by 0.8^100 ≈ 2.037e-10 (common practice; check 36)", () => {
    const p = linearChain(0.8);
    const ratio = Math.sqrt(meanSquare(tensor(p, "d0/activation-gradient")) / meanSquare(tensor(p, "d100/activation-gradient")));
    expect(Math.abs(ratio / 2.0370359763344861e-10 - 1)).toBeLessThan(1e-12);
  });

  test("He init keeps the gradient second moment constant through ReLU layers: χ = var_w·fan_out·E[φ'²] = 1 (Schoenholz et al. 2017; check 26)", () => {
    // gradients independent of the forward pass (Schoenholz et al. 2017): targets far larger than the outputs
    const p = run(makeSpec(mlp(30, 128), { input: features(128), loss: mse(1e8) }));
    const last = meanSquare(tensor(p, "a29/activation-gradient"));
    for (let i = 0; i < 29; i++) expect(meanSquare(tensor(p, `a${i}/activation-gradient`)) / last).toBeCloseTo(1, 12);
  });
});

describe("batch norm in a plain ReLU network", () => {
  test("the gradient's squared norm grows by π/(π−1) ≈ 1.4669422 per dense → batch-norm → ReLU layer (Yang et al. 2019; check 29)", () => {
    const layers: LayerSpec[] = [];
    for (let i = 0; i < 20; i++) layers.push(dense(`d${i}`, 256, he), { family: "batch-norm", name: `bn${i}`, path: ["bn", i], gain: 1, epsilon: 0 }, act(`a${i}`));
    // gradients independent of the forward pass (Yang et al. 2019): targets far larger than the outputs
    const p = run(makeSpec([...layers, dense("out", 1, lecun)], { input: features(256), loss: mse(1e8) }));
    for (let i = 1; i < 19; i++) {
      const ratio = meanSquare(tensor(p, `a${i}/activation-gradient`)) / meanSquare(tensor(p, `a${i + 1}/activation-gradient`));
      expect(ratio).toBeCloseTo(Math.PI / (Math.PI - 1), 12);
    }
    expect(Math.PI / (Math.PI - 1)).toBeCloseTo(1.4669422, 6);
    // the forward pass stays normalised: batch norm divides by the batch variance 1 − 1/π of a ReLU-fed dense output
    expect(meanSquare(tensor(p, "bn10/activation"))).toBeCloseTo(1, 12);
    expect(meanSquare(tensor(p, "d10/pre-activation"))).toBeCloseTo(1, 12);
  });

  test("the same growth through conv → batch-norm (training mode, statistics over batch × pixels) → ReLU stages (Yang et al. 2019; check 29)", () => {
    const layers: LayerSpec[] = [];
    // 1 × 1 kernels: a wider kernel's zero padding gives border pixels fewer taps, a loss outside the published growth
    for (let i = 0; i < 8; i++) layers.push(conv(`c${i}`, 16, 1), { family: "batch-norm", name: `bn${i}`, path: ["bn", i], gain: 1, epsilon: 0 }, act(`a${i}`));
    const p = run(makeSpec([...layers, flatten("f"), dense("out", 10, lecun)], { input: image(16, 8, 8), loss: crossEntropy(10) }));
    // (the stage right under the head, a7, also holds its own output through the loss's curvature: loss-curvature.test.ts)
    for (let i = 1; i < 6; i++) {
      const ratio = meanSquare(tensor(p, `a${i}/activation-gradient`)) / meanSquare(tensor(p, `a${i + 1}/activation-gradient`));
      expect(ratio).toBeCloseTo(Math.PI / (Math.PI - 1), 9);
    }
  });

  test("layer norm does not remove the per-feature batch mean, so the same network keeps its gradient but for its statistic's finite-width spread (contrast)", () => {
    const layers: LayerSpec[] = [];
    for (let i = 0; i < 10; i++) layers.push(dense(`d${i}`, 256, he), { family: "layer-norm", name: `ln${i}`, path: ["ln", i], gain: 1, epsilon: 0 }, act(`a${i}`));
    // gradients independent of the forward pass, as above: the loss's curvature, which layer norms now pass down,
    // would otherwise add each unit's own output (a part in 10^6 here)
    const p = run(makeSpec([...layers, dense("out", 1, lecun)], { input: features(256), loss: mse(1e8) }));
    const ratio = meanSquare(tensor(p, "a3/activation-gradient")) / meanSquare(tensor(p, "a4/activation-gradient"));
    // no π/(π − 1) growth: 1 at infinite width (Yang et al. 2019), times E[1/s²]·E[s²] = e^V for the sample's own
    // statistic, ln s² ~ N(−V/2, V) with V = κ/n = 2/256 after the dense layer (SCIENCE.md §2.6, κ = 2 for a linear map)
    expect(ratio).toBeCloseTo(Math.exp(2 / 256), 12);
  });
});

describe("a rectifier before a max-pool", () => {
  // max(φ(x)) = φ(max x) for a nondecreasing φ, so the pool's gradient reaches the window's maximum, which is off only
  // when all k independent symmetric inputs are ≤ 0: probability 2^−k (derived), not 1/2 as for a random element
  const chain = (k: number, activation: "relu" | "leaky-relu"): NetworkSpec =>
    makeSpec([conv("c", 16), act("r", activation, 0.2), pool("p", "max-pool", k), flatten("f"), dense("out", 10, lecun)], {
      input: image(4, 12, 12),
      loss: crossEntropy(10),
      training: { batch: 32 },
    });

  test("ReLU keeps 1 − 2^−k of the gradient's second moment and zeroes 2^−k of the windows' maxima (k = 4 for 2×2, 9 for 3×3)", () => {
    for (const [size, k] of [[2, 4], [3, 9]] as const) {
      const p = run(chain(size, "relu"));
      const before = tensor(p, "r/activation-gradient");
      const after = tensor(p, "c/activation-gradient");
      expect(meanSquare(after) / meanSquare(before)).toBeCloseTo(1 - 2 ** -k, 12);
      expect(after.start.zeroFraction).toBeCloseTo(1 - (1 - before.start.zeroFraction) * (1 - 2 ** -k), 12);
    }
    // leaky ReLU (slope a): 1 − 2^−k + a²·2^−k
    const leaky = run(chain(2, "leaky-relu"));
    expect(meanSquare(tensor(leaky, "c/activation-gradient")) / meanSquare(tensor(leaky, "r/activation-gradient"))).toBeCloseTo(1 - 1 / 16 + 0.04 / 16, 12);
  });

  test("the float64 simulation (seeded Monte Carlo) measures the same share: within 0.02 of 15/16 and 511/512", () => {
    for (const [size, k] of [[2, 4], [3, 9]] as const) {
      const { comparison } = simulate(chain(size, "relu"), { draws: 2, seed: 7, round: false, predict });
      const row = (id: string) => comparison?.rows.find((r) => r.id === id);
      const second = (id: string): number => {
        const stats = row(id)?.measured.median;
        return stats === undefined ? NaN : stats.rms ** 2 * (1 - stats.zeroFraction);
      };
      expect(Math.abs(second("c/activation-gradient") / second("r/activation-gradient") - (1 - 2 ** -k))).toBeLessThan(0.02);
    }
  });
});

describe("the pools' ledger rules", () => {
  // the max of k iid N(0, 1) has density k·φ(x)·Φ(x)^(k−1) (order statistics, derived): E[M²] by a fine trapezoid
  const maxSecondMoment = (k: number): number => {
    const phi = (x: number) => Math.exp(-x * x / 2) / Math.sqrt(2 * Math.PI);
    const steps = 40000;
    const h = 16 / steps;
    let cdf = 0;
    let sum = 0;
    for (let i = 0; i <= steps; i++) {
      const x = -8 + i * h;
      if (i > 0) cdf += ((phi(x - h) + phi(x)) / 2) * h;
      sum += (i === 0 || i === steps ? 0.5 : 1) * x * x * k * phi(x) * cdf ** (k - 1) * h;
    }
    return sum;
  };
  const ruleOf = (p: Prediction, id: string) => (tensor(p, id).ledger.find((entry) => entry.layer === "p")?.rule ?? "");

  test("a max-pool states the ratio it applies, E[M²]/E[x²], with its value; an average-pool what passes whole", () => {
    const chain = (family: "max-pool" | "average-pool", activation: "tanh" | "relu") =>
      run(
        makeSpec([conv("c", 16), act("r", activation), pool("p", family, 2), flatten("f"), dense("out", 10, lecun)], {
          input: image(4, 12, 12),
          loss: crossEntropy(10),
          training: { batch: 32 },
        }),
      );
    const expected = maxSecondMoment(4);
    // E[M²] = mean² + variance of the largest of 4 standard normals, 1.0294² + 0.4917 = 1.5513 (tables of normal
    // order statistics, Teichroew 1956; from memory)
    expect(expected).toBeCloseTo(1.5513, 3);
    expect(ruleOf(chain("max-pool", "tanh"), "p/activation")).toBe(`max of 4 Gaussians: E[M²]/E[x²] = ${Number(expected.toPrecision(4))}`);
    expect(ruleOf(chain("max-pool", "relu"), "p/activation")).toMatch(/^max of 4 ReLU outputs: E\[M²\]\/E\[x²\] = \d/);
    expect(ruleOf(chain("average-pool", "tanh"), "p/activation")).toMatch(/^average of 4: shared part kept, rest ÷ 4 = 0\.\d+$/);
  });
});

describe("finite-width spread", () => {
  test("ReLU log-variance of the squared norm is 5·Σ1/n, so log2Spread = √(5L/n)/(2 ln 2) (Hanin & Nica 2019 form; SCIENCE.md §2.6, check 27)", () => {
    const width = 200;
    const p = run(makeSpec(mlp(20, width), { input: features(width) }));
    for (const l of [0, 4, 19]) {
      const spread = tensor(p, `a${l}/activation`).start.log2Spread;
      expect(spread).toBeCloseTo(Math.sqrt((5 * (l + 1)) / width) / (2 * Math.LN2), 12);
    }
  });

  test("the median-draw rms sits e^(−κβ/4) below the mean-field rms (ln‖h‖² ~ N(−κβ/2, κβ), SCIENCE.md §2.6)", () => {
    const width = 100;
    // the law is for one input vector: a batch's rms also averages what its samples do not share (dense batchSpread)
    const p = run(makeSpec(mlp(10, width), { input: features(width), training: { batch: 1 } }));
    const t = tensor(p, "d9/pre-activation");
    // the pre-activation of layer 10 has seen 9 ReLU layers (κ = 5) and one linear map (κ = 2)
    const kb = (9 * 5 + 2) / width;
    expect(t.start.rms).toBeCloseTo(Math.sqrt(meanSquare(t)) * Math.exp(-kb / 4), 12);
  });

  test("a norm resets the spread (Hanin & Rolnick 2018)", () => {
    const p = run(makeSpec([...mlp(10, 64).slice(0, -1), { family: "layer-norm", name: "ln", path: ["x"], gain: 1, epsilon: 1e-5 }, dense("out", 1, lecun)], { input: features(64) }));
    expect(tensor(p, "a9/activation").start.log2Spread).toBeGreaterThan(0.3);
    expect(tensor(p, "ln/activation").start.log2Spread).toBe(0);
  });
});
