import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { SMOOTH } from "../helpers/smooth-activations.js";

// Gradients behind an activation whose derivative crosses zero, or fades in a saturated tail, hold more values near zero
// than a Gaussian of the same rms. At an activation layer's input the prediction models them as a scale mixture and says so; so it does for a
// gated feed-forward layer's up and gate gradients (any gate but softmax; test/risk/gated-mixture.test.ts holds the laws),
// and no warning of Gaussian gradients behind a gate is left.

function load(path: string): NetworkSpec {
  const parsed = parseSpec(readFileSync(path, "utf8"), path);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  return parsed.spec;
}

function note(spec: NetworkSpec, start = "Gradients behind"): string | undefined {
  const built = buildGraph(spec);
  if (!built.ok) throw new Error("does not build");
  return predict(built.graph, spec).assumptions.find((a) => a.startsWith(start));
}

describe("the note on activations whose derivative crosses zero", () => {
  it("the derivatives do cross zero: GELU' near −0.75, SiLU' near −1.28", () => {
    // GELU(x) = x·Φ(x) (Hendrycks & Gimpel 2016), so GELU'(x) = Φ(x) + x·φ(x) (test/helpers/smooth-activations.ts)
    const gelu = SMOOTH.gelu.df;
    expect(gelu(-0.76)).toBeLessThan(0);
    expect(gelu(-0.74)).toBeGreaterThan(0);
    // SiLU(x) = x·σ(x) (Elfwing et al. 2018), so SiLU'(x) = σ(x)·(1 + x·(1 − σ(x)))
    const silu = SMOOTH.silu.df;
    expect(silu(-1.28)).toBeLessThan(0);
    expect(silu(-1.27)).toBeGreaterThan(0);
  });

  it("says a gated feed-forward inside a block used by a repeat has mixture gradients, with no warning left, and nothing for a ReLU stack", () => {
    const gated = "Gradients at the up and gate projections";
    expect(note(load("specs/transformer-encoder.yaml"), gated)).toMatch(/^Gradients at the up and gate projections of gated feed-forward layers are taken as Gaussian elements scaled by \|φ\(g\)\| and \|u·φ'\(g\)\|/);
    expect(note(load("specs/transformer-encoder.yaml"))).toBeUndefined();
    expect(note(load("specs/deep-relu-he.yaml"), gated)).toBeUndefined();
    expect(note(load("specs/deep-relu-he.yaml"))).toBeUndefined();
    expect(note(load("specs/deep-sigmoid.yaml"))).toBeUndefined();
  });

  it("names GELU and SiLU activation layers in blocks and residual branches, in that order, as modelled by a scale mixture, not in the warning", () => {
    const base = load("specs/deep-relu-he.yaml");
    const hidden = base.blocks["hidden"]!;
    const activation = hidden.find((layer) => layer.family === "activation")!;
    if (activation.family !== "activation") throw new Error("no activation in the block");
    const blocks = { hidden: hidden.map((layer) => (layer === activation ? { ...activation, activation: "silu" as const } : layer)) };
    const classifier = base.layers[base.layers.length - 1]!;
    const residual = { family: "residual" as const, name: "gelu-skip", path: ["layers", 1], multiplier: 1, branch: [{ ...activation, name: "gelu-1", activation: "gelu" as const }] };
    const spec = { ...base, blocks, layers: [...base.layers.slice(0, -1), residual, classifier] };
    expect(note(spec)).toBeUndefined();
    expect(note(spec, "Gradients at the input of")).toMatch(/^Gradients at the input of GELU and SiLU layers are taken as Gaussian elements scaled by \|φ'\(x\)\|/);
    expect(note({ ...base, blocks }, "Gradients at the input of")).toMatch(/^Gradients at the input of SiLU layers/);
    expect(note(load("specs/deep-relu-he.yaml"), "Gradients at the input of")).toBeUndefined();
  });

  it("names tanh, sigmoid and softplus layers too, whose derivative fades in a saturated tail without crossing zero", () => {
    // tanh' = 1 − tanh², sigmoid' = σ(1 − σ), softplus' = σ (their definitions): positive, but under 1e-4 ten units out (e^−10 = 4.5e-5)
    const sigma = (x: number) => 1 / (1 + Math.exp(-x));
    for (const df of [(x: number) => 1 - Math.tanh(x) ** 2, (x: number) => sigma(x) * (1 - sigma(x)), sigma]) {
      for (const x of [-10, -1, 0, 1]) expect(df(x)).toBeGreaterThan(0);
      expect(df(-10)).toBeLessThan(1e-4);
    }
    expect(note(load("specs/deep-sigmoid.yaml"), "Gradients at the input of")).toBe(
      "Gradients at the input of sigmoid layers are taken as Gaussian elements scaled by |φ'(x)| of a Gaussian pre-activation x (a scale mixture): " +
        "the derivative fades in a saturated tail, so they hold more values near zero than a Gaussian of the same rms.",
    );
    const base = load("specs/deep-relu-he.yaml");
    const hidden = base.blocks["hidden"]!;
    const activation = hidden.find((layer) => layer.family === "activation")!;
    if (activation.family !== "activation") throw new Error("no activation in the block");
    const blocks = { hidden: hidden.map((layer) => (layer === activation ? { ...activation, activation: "tanh" as const } : layer)) };
    const classifier = base.layers[base.layers.length - 1]!;
    const extra = [
      { ...activation, name: "gelu-1", activation: "gelu" as const },
      { ...activation, name: "softplus-1", activation: "softplus" as const },
    ];
    const spec = { ...base, blocks, layers: [...base.layers.slice(0, -1), ...extra, classifier] };
    expect(note(spec, "Gradients at the input of")).toBe(
      "Gradients at the input of GELU, tanh and softplus layers are taken as Gaussian elements scaled by |φ'(x)| of a Gaussian pre-activation x (a scale mixture): " +
        "the derivative crosses zero (GELU) or fades in a saturated tail (tanh, softplus), so they hold more values near zero than a Gaussian of the same rms.",
    );
  });
});
