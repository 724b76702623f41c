import { describe, expect, it } from "vitest";
import { FORMATS, roundTo } from "../../src/formats/index.js";
import { createRandom } from "../../src/numeric/index.js";
import { blockScaledRisk } from "../../src/risk/blocks.js";

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
});
