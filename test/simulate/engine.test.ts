import { describe, expect, it } from "vitest";
import fc from "fast-check";
import { f16round } from "@petamoriken/float16";
import { FORMATS, roundTo, type FormatName } from "../../src/formats/index.js";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec, type NetworkSpec } from "../../src/spec/index.js";
import { runSimulation, learningRate, missingScale } from "../../src/simulate/engine.js";
import { shrinkSpec } from "../../src/simulate/shrink.js";
import { measureTensor } from "../../src/simulate/stats.js";
import { SimulationTooLarge } from "../../src/simulate/types.js";
import { createRandom } from "../../src/numeric/random.js";

function spec(text: string): NetworkSpec {
  const parsed = parseSpec(text, "engine.yaml");
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => `${i.line}:${i.column} ${i.message}`).join("; "));
  return parsed.spec;
}

const MLP = `name: small-mlp
input: { features: 32, scale: 1.0 }
training:
  batch: 16
  loss: { kind: cross-entropy, classes: 10 }
  optimizer: { kind: sgd, learning-rate: { peak: 0.1, end: 0.1 }, warmup-steps: 2 }
precision:
  name: half
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
layers:
  - { type: dense, width: 64, init: he-normal }
  - relu
  - { type: dense, width: 64, init: he-normal }
  - relu
  - { type: dense, name: classes, width: 10, init: glorot-normal }
`;

describe("simulation engine", () => {
  it("is deterministic for a seed and changes with it", () => {
    const s = spec(MLP);
    const a = runSimulation(s, { seed: 7, draws: 2 });
    const b = runSimulation(s, { seed: 7, draws: 2 });
    const c = runSimulation(s, { seed: 8, draws: 2 });
    expect(JSON.stringify(a.tensors)).toBe(JSON.stringify(b.tensors));
    expect(JSON.stringify(a.tensors)).not.toBe(JSON.stringify(c.tensors));
    expect(a.seeds).toEqual([7, 8]);
  });

  it("measures every tensor the magnitude engine predicts, under the same ids", () => {
    const s = spec(MLP);
    const result = runSimulation(s);
    const prediction = predict((buildGraph(s) as { ok: true; graph: never }).graph, s);
    const measured = new Set(result.tensors.map((t) => t.id));
    for (const t of prediction.tensors) expect(measured.has(t.id), t.id).toBe(true);
  });

  it("ReLU outputs are half exact zeros and He-initialised pre-activations keep the input's second moment (He et al. 2015)", () => {
    const result = runSimulation(spec(MLP), { draws: 3 });
    const relu = result.tensors.find((t) => t.id === "relu-1/activation")!;
    // binomial: 3 draws × 16 × 64 elements, 5 standard deviations of a 0.5 share is about 0.05
    expect(Math.abs(relu.median.zeroFraction - 0.5)).toBeLessThan(0.05);
    const pre = result.tensors.find((t) => t.id === "dense-0/pre-activation")!;
    // He: q_out = 2/fan_in · fan_in · q_in / 2 ... for the first layer, q = fan_in·(2/fan_in)·1 = 2, rms √2
    expect(Math.abs(Math.log2(pre.median.rms / Math.SQRT2))).toBeLessThan(0.25);
  });

  it("with a binary16 accumulate format, every product and partial sum is rounded: a dense layer's raw outputs lie on the binary16 grid", () => {
    // the measured values are taken before storage rounding, so only the accumulation can put them on the grid;
    // the grid is checked with f16round of @petamoriken/float16 (IEEE 754-2019 binary16)
    const onGrid = (accumulate: string): boolean => {
      const pre = runSimulation(spec(MLP.replace("accumulate: binary32", `accumulate: ${accumulate}`))).tensors.find((t) => t.id === "dense-0/pre-activation")!;
      return [pre.median.max, ...pre.median.quantiles].every((v) => f16round(v) === v);
    };
    expect(onGrid("binary16")).toBe(true);
    expect(onGrid("binary32")).toBe(false);
  });

  it("rounds what it stores: an input below binary16's flush bound becomes zero, and so does everything after it", () => {
    // binary16 flushes |x| ≤ 2^-25 ≈ 2.98e-8 (IEEE 754-2019 binary16; SCIENCE.md check value 4); 1e-9 is far below
    const tiny = spec(MLP.replace("scale: 1.0", "scale: 1.0e-9"));
    const rounded = runSimulation(tiny);
    const input = rounded.tensors.find((t) => t.id === "input/activation")!;
    expect(input.median.counts.format).toBe("binary16");
    expect(input.median.counts.flushed).toBe(1);
    expect(rounded.tensors.find((t) => t.id === "dense-0/pre-activation")!.median.zeroFraction).toBe(1);
    const exact = runSimulation(tiny, { round: false });
    // the counts still say what storing would do, but the values flow on unrounded
    expect(exact.tensors.find((t) => t.id === "input/activation")!.median.counts.flushed).toBe(1);
    expect(exact.tensors.find((t) => t.id === "dense-0/pre-activation")!.median.zeroFraction).toBe(0);
  });

  it("multiplies every gradient by the loss scale and leaves the forward pass alone", () => {
    const s = spec(MLP);
    const one = runSimulation(s, { round: false, lossScale: 1 });
    const scaled = runSimulation(s, { round: false, lossScale: 1024 });
    for (const t of one.tensors) {
      if (t.median.rms === 0) continue;
      const u = scaled.tensors.find((x) => x.id === t.id)!;
      const gradient = t.role === "activation-gradient" || t.role === "weight-gradient";
      expect(u.median.rms / t.median.rms, t.id).toBeCloseTo(gradient ? 1024 : 1, 9);
    }
  });

  it("asks defaultLossScale for the scale only when neither the options nor the plan give one, about the network as run", () => {
    const s = spec(MLP);
    const asked: { batch: number; plan: string; shrunk: boolean }[] = [];
    const defaultLossScale = (simulated: NetworkSpec, context: { plan: { name: string }; shrunk: boolean }) => {
      asked.push({ batch: simulated.training.batch, plan: context.plan.name, shrunk: context.shrunk });
      return { value: 64, origin: "recommended" as const, reason: "a test's pick" };
    };
    const chosen = runSimulation(s, { round: false, shrink: { batch: 4 }, defaultLossScale });
    expect(asked).toEqual([{ batch: 4, plan: "half", shrunk: true }]);
    expect([chosen.lossScale, chosen.lossScaleOrigin, chosen.lossScaleReason]).toEqual([64, "recommended", "a test's pick"]);
    // the loss gradient is (p − onehot)/batch times the scale: a power of two scales it exactly (IEEE 754-2019 §4.3)
    const unscaled = runSimulation(s, { round: false, shrink: { batch: 4 } });
    expect([unscaled.lossScale, unscaled.lossScaleOrigin, unscaled.lossScaleReason]).toEqual([1, "none", undefined]);
    const id = "classes/activation-gradient:target-class";
    expect(chosen.tensors.find((t) => t.id === id)!.median.rms / unscaled.tensors.find((t) => t.id === id)!.median.rms).toBe(64);
    const given = runSimulation(s, { round: false, lossScale: 8, defaultLossScale });
    expect([given.lossScale, given.lossScaleOrigin]).toEqual([8, "option"]);
    const planned = runSimulation(spec(MLP.replace("accumulate: binary32", "accumulate: binary32\n  loss-scale: 512")), { round: false, defaultLossScale });
    expect([planned.lossScale, planned.lossScaleOrigin]).toEqual([512, "plan"]);
    expect(asked).toHaveLength(1);
  });

  it("counts overflow in binary16 when a large loss scale pushes gradients past 65504", () => {
    const s = spec(MLP);
    const r = runSimulation(s, { lossScale: 2 ** 30 });
    const g = r.tensors.find((t) => t.id === "classes/activation-gradient:target-class")!;
    // the right-class gradient is (p − 1)/16 ≈ −0.06 per row: times 2^30 it is far above 65520 (binary16's overflow threshold)
    expect(g.median.counts.overflowed).toBe(1);
  });

  it("runs optimizer steps: warm-up learning rates, a falling loss, updates recorded", () => {
    const s = spec(MLP);
    expect(learningRate(s, 1)).toBeCloseTo(0.05, 15);
    expect(learningRate(s, 2)).toBeCloseTo(0.1, 15);
    const r = runSimulation(s, { steps: 3 });
    const history = r.history[0]!;
    expect(history.map((h) => h.step)).toEqual([1, 2, 3]);
    expect(history.every((h) => !h.skipped)).toBe(true);
    expect(Object.keys(history[0]!.updateRatio)).toContain("dense-0/weight");
    expect(r.tensors.find((t) => t.id === "dense-0/weight")!.after).toBeDefined();
  });

  it("leaves weights that start at zero (biases) out of the update/weight ratio: their second update is ~1 of a first one at any learning rate", () => {
    const s = spec(MLP.replace("{ type: dense, width: 64, init: he-normal }", "{ type: dense, width: 64, init: he-normal, bias: true }"));
    const r = runSimulation(s, { steps: 3 });
    const history = r.history[0]!;
    expect(r.tensors.some((t) => t.id === "dense-0/weight:bias")).toBe(true);
    for (const h of history) {
      expect(Object.keys(h.updateRatio)).toContain("dense-0/weight");
      expect(Object.keys(h.updateRatio).filter((key) => key.endsWith("/bias"))).toEqual([]);
    }
    // the ratio of a weight that did not start at zero is lr·|g|/|w|: well below 1 at this learning rate (0.05, 0.1)
    expect(Math.max(...history.map((h) => h.updateRatio["dense-0/weight"]!))).toBeLessThan(1);
  });

  it("sees update swamping: without a master copy, bfloat16 weights ignore updates below 2^-9 of their size (SCIENCE.md §1.1)", () => {
    const s = spec(
      MLP.replace("master-weights: binary32", "master-weights: none")
        .replace("weights: binary16", "weights: bfloat16")
        .replace("peak: 0.1, end: 0.1", "peak: 1.0e-6, end: 1.0e-6")
        .replace("warmup-steps: 2", "warmup-steps: 0"),
    );
    const r = runSimulation(s, { steps: 1 });
    const swamped = r.history[0]![0]!.swamped;
    // lr·g is about 1e-6 × 1e-2 against weights near 0.1-0.2: far below half an ulp, so nearly every update is lost
    expect(swamped["dense-2/weight"]!).toBeGreaterThan(0.95);
    const kept = runSimulation(spec(MLP), { steps: 1 }).history[0]![0]!.swamped;
    expect(kept["dense-2/weight"]!).toBeLessThan(swamped["dense-2/weight"]!);
  });

  it("runs the micro-batches of accumulation steps and workers, and says so", () => {
    const s = spec(MLP.replace("batch: 16", "batch: 16\n  workers: 2\n  accumulation-steps: 2"));
    const r = runSimulation(s, { microBatches: 2 });
    expect(r.microBatches).toEqual({ run: 2, wanted: 4 });
    expect(r.assumptions.join(" ")).toContain("scaled to the size of the sum of all 4");
    expect(r.assumptions.join(" ")).toContain("(2 accumulation steps × 2 workers)");
    const one = runSimulation(spec(MLP.replace("batch: 16", "batch: 16\n  workers: 2\n  accumulation-steps: 1")), { microBatches: 1 });
    expect(one.assumptions.join(" ")).toContain("(1 accumulation step × 2 workers)");
    expect(one.assumptions.join(" ")).toContain("√(2/1)");
    // and the sums follow it: the one micro-batch run is the single worker's own (same seed, same draws), and with the
    // workers' gradients summed its weight gradients come out times √2, as a sum of independent terms grows (Bienaymé:
    // their variances add); averaged, the sum is then halved
    const summed = runSimulation(spec(MLP.replace("batch: 16", "batch: 16\n  workers: 2\n  worker-gradients: sum")), { microBatches: 1 });
    const single = runSimulation(spec(MLP));
    const rms = (r: typeof one, id: string): number => r.tensors.find((t) => t.id === id)!.median.rms;
    for (const id of ["dense-0/weight-gradient", "classes/weight-gradient"]) {
      expect(rms(summed, id) / rms(single, id)).toBeCloseTo(Math.SQRT2, 12);
      expect(rms(one, id) / rms(single, id)).toBeCloseTo(Math.SQRT2 / 2, 12);
    }
  });

  it("sizes the sum of the micro-batches not run by the mean and the spread of those run (E‖S_N‖² = N²‖μ‖² + N·tr σ²)", () => {
    // gradients g_i = μ + e_i with ‖μ‖² = 4 and noise of trace 1 per micro-batch, drawn; the sum of N = 64 has expected
    // squared norm 64²·4 + 64·1 (the mean and variance of a sum; common practice)
    const random = createRandom(7);
    const n = 4096;
    const mu = Float64Array.from({ length: n }, () => 2 / Math.sqrt(n));
    const run = 8;
    const sum = new Float64Array(n);
    let squares = 0;
    for (let m = 0; m < run; m++) {
      const g = mu.map((x) => x + random.normal() / Math.sqrt(n));
      for (let i = 0; i < n; i++) sum[i] = sum[i]! + g[i]!;
      squares += g.reduce((a, x) => a + x * x, 0);
    }
    const norm = sum.reduce((a, x) => a + x * x, 0);
    const k = missingScale(sum, squares, run, 64);
    const expected = 64 * 64 * 4 + 64 * 1;
    expect(Math.abs(Math.log2((k * k * norm) / expected))).toBeLessThan(0.05);
    // and not the √ rule's: independent micro-batches (Bienaymé: the variance of a sum of independent terms is the
    // sum of their variances) would scale the sum by √(N/m) and leave it ~8× short in squared norm here, 3 binades; a
    // missingScale that fell back to that rule whatever the spread would fail this
    expect(Math.log2((k * k) / (64 / run))).toBeGreaterThan(2.5);
    // pure noise: the sum grows as √N
    const noiseOnly = new Float64Array(n);
    let noiseSquares = 0;
    for (let m = 0; m < run; m++) {
      const g = Float64Array.from({ length: n }, () => random.normal() / Math.sqrt(n));
      for (let i = 0; i < n; i++) noiseOnly[i] = noiseOnly[i]! + g[i]!;
      noiseSquares += g.reduce((a, x) => a + x * x, 0);
    }
    const kn = missingScale(noiseOnly, noiseSquares, run, 64);
    const noiseNorm = noiseOnly.reduce((a, x) => a + x * x, 0);
    expect(Math.abs(Math.log2((kn * kn * noiseNorm) / 64))).toBeLessThan(0.1);
    expect(missingScale(sum, squares, 1, 64)).toBe(8);
    expect(missingScale(sum, squares, 64, 64)).toBe(1);
  });

  it("names the accumulate format once, and the plan's tf32 beside the binary32 it is simulated in", () => {
    const plain = runSimulation(spec(MLP)).assumptions.find((a) => a.startsWith("Products accumulate"));
    expect(plain).toBe("Products accumulate in binary32: every product and partial sum is rounded, over blocks of 256 terms.");
    const tf32 = runSimulation(spec(MLP.replace("accumulate: binary32", "accumulate: tf32"))).assumptions.find((a) => a.startsWith("Products accumulate"));
    expect(tf32).toContain("Products accumulate in binary32 (for the plan's tf32):");
  });

  it("refuses a spec too large for the memory limit, naming the memory and a shrink that fits", () => {
    const big = spec(MLP.replace("width: 64, init: he-normal }\n  - relu\n  - { type: dense, width: 64", "width: 8192, init: he-normal }\n  - relu\n  - { type: dense, width: 8192"));
    let error: unknown;
    try {
      runSimulation(big, { memoryLimit: 64 * 2 ** 20 });
    } catch (e) {
      error = e;
    }
    expect(error).toBeInstanceOf(SimulationTooLarge);
    const e = error as SimulationTooLarge;
    expect(e.message).toMatch(/would need about [\d.]+ GiB of memory, more than the limit of 0\.06 GiB/);
    expect(e.message).toContain(`--shrink ${e.suggestedShrink}`);
    expect(e.neededBytes).toBeGreaterThan(64 * 2 ** 20);
    // the suggestion really fits
    expect(() => runSimulation(big, { memoryLimit: 64 * 2 ** 20, shrink: { width: e.suggestedShrink!, batch: e.suggestedShrink!, positions: e.suggestedShrink! } })).not.toThrow();
  });

  it("rejects bad options with RangeError echoing the value", () => {
    const s = spec(MLP);
    expect(() => runSimulation(s, { draws: 0 })).toThrow(/draws must be .* got 0/);
    expect(() => runSimulation(s, { plan: "nope" })).toThrow(/no plan named "nope" \(plans: half\)/);
    expect(() => runSimulation(s, { plan: "hlaf" })).toThrow(/no plan named "hlaf" \(did you mean "half"\?\) \(plans: half\)/);
    expect(() => runSimulation(s, { shrink: { width: 1.5 } })).toThrow(/shrink width must be a whole number ≥ 1, got 1.5/);
  });
});

describe("shrinking", () => {
  it("keeps every layer's gain fan_in·var_w, so predicted forward magnitudes do not move", () => {
    const s = spec(`name: fixed-std
input: { tokens: 64 }
training: { batch: 8, loss: { kind: cross-entropy, classes: 16 } }
layers:
  - { type: embedding, vocabulary: 100, width: 256, init: { kind: normal, std: 0.02 } }
  - type: residual
    branch:
      - rms-norm
      - { type: attention, heads: 8, head-width: 16, init: { kind: normal, std: 0.02 }, output-init: { kind: normal, std: 0.01 } }
  - type: residual
    branch:
      - rms-norm
      - { type: gated-feed-forward, hidden: 512, init: { kind: normal, std: 0.02 }, output-init: { kind: normal, std: 0.01 } }
  - { type: dense, width: 16, init: { kind: normal, std: 0.05 } }
`);
    // positions stay: attention averages over them, so they are not a size the forward magnitudes ignore
    const { spec: small, report } = shrinkSpec(s, { width: 4, batch: 2 });
    expect(report.changes.join(" ")).toMatch(/widths ÷4/);
    expect(report.changes.join(" ")).toMatch(/batch 8 → 4/);
    const full = predict((buildGraph(s) as { ok: true; graph: never }).graph, s);
    const shrunk = predict((buildGraph(small) as { ok: true; graph: never }).graph, small);
    for (const id of ["residual-1.attention-1/pre-activation:query", "residual-2.gated-feed-forward-1/pre-activation:gate", "dense-3/pre-activation"]) {
      const a = full.tensors.find((t) => t.id === id)!;
      const b = shrunk.tensors.find((t) => t.id === id)!;
      // the mean-field second moment is unchanged; only the finite-width median shift differs
      expect(Math.abs(Math.log2(b.start.meanSquare! / a.start.meanSquare!)), id).toBeLessThan(0.01);
    }
  });

  it("an image shrink shrinks the window of a pool that covers the whole image, and keeps a local pool's", () => {
    // invented: a small classifier of 32×32 images ending in a global average pool over its 8×8 map
    const s = spec(`name: global-pool
input: { channels: 3, height: 32, width: 32 }
training: { batch: 8, loss: { kind: cross-entropy, classes: 4 } }
layers:
  - { type: conv2d, channels: 8, kernel: 3, bias: false }
  - relu
  - { type: max-pool, size: 2 }
  - { type: conv2d, channels: 8, kernel: 3, bias: false }
  - relu
  - { type: max-pool, size: 2 }
  - { type: average-pool, size: 8 }
  - flatten
  - { type: dense, width: 4 }
`);
    const { spec: small, report } = shrinkSpec(s, { image: 2 });
    const built = buildGraph(small);
    expect(built.ok).toBe(true);
    const pools = small.layers.filter((l) => l.family === "max-pool" || l.family === "average-pool").map((l) => [l.family, (l as { size: number }).size]);
    expect(pools).toEqual([["max-pool", 2], ["max-pool", 2], ["average-pool", 4]]);
    expect(report.changes.join(" ")).toContain("image 32×32 → 16×16; windows of the pools that cover the whole image 8 → 4");
    // the pool still reduces the map to one pixel
    expect(built.ok && built.graph.layers.find((l) => l.spec.family === "average-pool")?.output).toMatchObject({ layout: "image", height: 1, width: 1 });
    // a factor that does not divide the sizes: the window is the shrunk map's own side (32 → 11 → 5 → 2)
    const odd = shrinkSpec(s, { image: 3 });
    const oddBuilt = buildGraph(odd.spec);
    expect(oddBuilt.ok && oddBuilt.graph.layers.find((l) => l.spec.family === "average-pool")?.output).toMatchObject({ layout: "image", height: 1, width: 1 });
    expect(odd.report.changes.join(" ")).toContain("image 32×32 → 11×11; windows of the pools that cover the whole image 8 → 2");
    // widths and image together: the pool's window is told once, on the image's line, not among the widths
    const both = shrinkSpec(s, { width: 2, image: 2 }).report.changes;
    expect(both[0]).toMatch(/^widths ÷2, rounded to the nearest whole number: conv channels 8 → 4; the output layer "/);
    expect(both.join(" ")).not.toContain("global pool windows");
  });

  // a YAML key __proto__ is an own property (YAML 1.2 maps; the spec loader keeps it as one); an assignment
  // blocks["__proto__"] = … would set the copy's prototype instead (ECMAScript Annex B, Object.prototype.__proto__; from memory)
  it("keeps a block named __proto__ as a block of the shrunk spec", () => {
    const s = spec(`name: proto-block
input: { features: 16 }
training: { batch: 8, loss: { kind: cross-entropy, classes: 4 } }
blocks:
  __proto__:
    - { type: dense, name: inner, width: 16 }
    - relu
layers:
  - { type: use, block: __proto__ }
  - { type: dense, name: head, width: 4 }
`);
    const { spec: small } = shrinkSpec(s, { width: 4, batch: 2 });
    expect(Object.keys(small.blocks)).toEqual(["__proto__"]);
    const built = buildGraph(small);
    expect(built.ok && built.graph.layers.map((l) => [l.name, l.spec.family === "dense" ? l.spec.width : null])).toEqual([
      ["use-0.inner", 4],
      ["use-0.relu-1", null],
      ["head", 4],
    ]);
  });
});

describe("counts of what storing does", () => {
  // Property: the simulator's counts equal an element-by-element rounding with the format model (roundTo).
  const formats: FormatName[] = ["binary16", "bfloat16", "e4m3", "e5m2", "binary32"];
  it.each(formats)("flushed, overflowed and subnormal counts in %s match element-by-element rounding", (name) => {
    const format = FORMATS[name];
    fc.assert(
      fc.property(
        fc.array(
          fc.oneof(
            fc.double({ noNaN: true }),
            fc.double({ min: -format.minNormal * 4, max: format.minNormal * 4, noNaN: true }),
            fc.double({ min: -format.maxFinite * 2, max: format.maxFinite * 2, noNaN: true }),
            fc.constantFrom(0, -0, format.flushBound, format.minSubnormal, format.overflowThreshold, Infinity, NaN),
          ),
          { minLength: 1, maxLength: 200 },
        ),
        fc.constantFrom("saturate" as const, "infinity-or-nan" as const),
        fc.boolean(),
        (values, overflow, flushSubnormals) => {
          const data = Float64Array.from(values);
          const options = { overflow, flushSubnormals };
          const stats = measureTensor(data, format, options);
          let flushed = 0;
          let overflowed = 0;
          let saturated = 0;
          let subnormal = 0;
          for (const x of values) {
            if (!Number.isFinite(x)) continue;
            const r = roundTo(format, x, options);
            // saturation: a value that the non-saturating conversion would send past the range, clamped instead
            const unclamped = roundTo(format, x, { ...options, overflow: "infinity-or-nan" });
            if (x !== 0 && r === 0) flushed++;
            else if (!Number.isFinite(r)) overflowed++;
            else if (!Number.isFinite(unclamped)) saturated++;
            else if (r !== 0 && Math.abs(r) < format.minNormal) subnormal++;
          }
          const n = values.length;
          return (
            stats.counts.flushed * n === flushed &&
            stats.counts.overflowed * n === overflowed &&
            stats.counts.saturated * n === saturated &&
            stats.counts.subnormal * n === subnormal
          );
        },
      ),
      { numRuns: 200 },
    );
  });
});

describe("the subnormal rounding noise simulate measures", () => {
  // Σ over the values stored as subnormals of (stored − x)², over Σx²: check's subnormal rule predicts this share
  // (src/risk/subnormal-noise.ts). Reference: @petamoriken/float16's f16round, binary16's smallest normal 2^-14
  // (IEEE 754-2019 Table 3.5)
  function reference(data: Float64Array, scale: number): number {
    let noise = 0;
    let energy = 0;
    for (const x of data) {
      energy += x * x;
      const r = f16round(x * scale);
      if (r !== 0 && Math.abs(r) < 2 ** -14) noise += ((r - x * scale) / scale) ** 2;
    }
    return noise / energy;
  }
  it.each([
    [1.2e-5, 1],
    [3e-7, 1],
    [1.2e-5, 2 ** 3],
  ])("matches rounding element by element (rms %s, storage scale %s)", (rms, scale) => {
    const data = createRandom(5).fillNormal(new Float64Array(1 << 14), 0, rms);
    const measured = measureTensor(data, FORMATS.binary16, {}, scale).counts.subnormalNoise;
    expect(measured).toBeGreaterThan(0);
    expect(Math.abs(measured / reference(data, scale) - 1)).toBeLessThan(1e-9);
  });
  it("is 0 when the conversion flushes subnormals", () => {
    const data = createRandom(5).fillNormal(new Float64Array(1024), 0, 1.2e-5);
    expect(measureTensor(data, FORMATS.binary16, { flushSubnormals: true }).counts.subnormalNoise).toBe(0);
  });
});
