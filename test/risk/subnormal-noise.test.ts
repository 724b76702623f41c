import { f16round } from "@petamoriken/float16";
import { describe, expect, it } from "vitest";
import { FORMATS, roundArray } from "../../src/formats/index.js";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { createRandom } from "../../src/numeric/random.js";
import { normalQuantile } from "../../src/numeric/normal.js";
import { DEFAULT_THRESHOLDS, type RangeLimits } from "../../src/risk/index.js";
import { integral, noiseBound, NOISE_FLOOR, normalRoundingNoise, precisionOf, smallestStep, subnormalNoise, subnormalNoiseLimit } from "../../src/risk/subnormal-noise.js";
import { BFLOAT16_FTZ, BINARY16, E4M3_SATURATING, E5M2 } from "./limits.js";

// bfloat16 is the top 16 bits of binary32 (Kalamkar et al. 2019 §2): Math.fround to binary32 (IEEE 754-2019), then
// round its low 16 bits to nearest, ties to even; the double rounding is exact but for values within 2^-24 of a tie
function bfloat16ByBits(x: number): number {
  const f = new Float32Array([x]);
  const u = new Uint32Array(f.buffer);
  u[0] = ((u[0] as number) + 0x7fff + (((u[0] as number) >>> 16) & 1)) & 0xffff0000;
  return f[0] as number;
}

// a value in the subnormal band rounded to the nearest multiple of the smallest subnormal Δ, ties to even: the
// subnormals are the multiples of Δ below the smallest normal (IEEE 754-2019 §3.3; OCP 8-bit spec, the same rule)
function roundInBand(x: number, delta: number): number {
  const q = x / delta;
  const f = Math.floor(q);
  const rest = q - f;
  const n = rest > 0.5 ? f + 1 : rest < 0.5 ? f : f % 2 === 0 ? f : f + 1;
  return n * delta;
}

// Σ over the values that round to a subnormal of (rounded − x)², over Σx²: the quantity the rule predicts, measured
function measuredNoise(x: Float64Array, limits: RangeLimits, round: (v: number) => number): number {
  let noise = 0;
  let energy = 0;
  for (const v of x) {
    energy += v * v;
    const r = round(v);
    if (r !== 0 && Math.abs(r) < limits.minNormal) noise += (r - v) ** 2;
  }
  return noise / energy;
}

describe("normalRoundingNoise: a format's ordinary rounding noise as a share of the squared norm", () => {
  // a standard Gaussian sample (2^21 values): its rounding noise Σ(round(x) − x)²/Σx², measured by rounding each value
  const sample = createRandom(19).fillNormal(new Float64Array(1 << 21));

  it("is 2^(-2(p-1))·(3/4)/(24·ln 2): 4.3e-8 for binary16, 2.75e-6 for bfloat16, measured to 1%", () => {
    let b16 = 0;
    let bf16 = 0;
    let energy = 0;
    for (const v of sample) {
      energy += v * v;
      // binary16: @petamoriken/float16's f16round
      b16 += (f16round(v) - v) ** 2;
      bf16 += (bfloat16ByBits(v) - v) ** 2;
    }
    expect(normalRoundingNoise(11)).toBeCloseTo(4.2996e-8, 11);
    expect(normalRoundingNoise(8)).toBeCloseTo(2.7517e-6, 9);
    expect(Math.abs(b16 / energy / normalRoundingNoise(11) - 1)).toBeLessThan(0.01);
    expect(Math.abs(bf16 / energy / normalRoundingNoise(8) - 1)).toBeLessThan(0.01);
  });

  it("takes the precision the project's bfloat16 rounding has, which agrees with the bit-level reference", () => {
    const rounded = roundArray(FORMATS.bfloat16, sample.subarray(0, 1 << 16));
    let differ = 0;
    for (let i = 0; i < rounded.length; i++) if (rounded[i] !== bfloat16ByBits(sample[i] as number)) differ++;
    expect(differ).toBe(0);
    // p from the unit roundoff 2^-p: bfloat16 8 bits, binary16 11 (IEEE 754-2019 Table 3.5), e4m3 4, e5m2 3 (OCP 8-bit spec)
    expect([BFLOAT16_FTZ, BINARY16, E4M3_SATURATING, E5M2].map(precisionOf)).toEqual([8, 11, 4, 3]);
  });

  it("sets the limit: bfloat16's noise by default, or the format's own when that is larger", () => {
    expect(DEFAULT_THRESHOLDS.subnormalNoiseAtRisk).toBe(normalRoundingNoise(8));
    expect(subnormalNoiseLimit(BINARY16, DEFAULT_THRESHOLDS.subnormalNoiseAtRisk)).toBe(normalRoundingNoise(8));
    // e4m3 (p = 4) and e5m2 (p = 3) round every normal element coarser than a bfloat16 subnormal band could
    expect(subnormalNoiseLimit(E4M3_SATURATING, DEFAULT_THRESHOLDS.subnormalNoiseAtRisk)).toBeCloseTo(7.04e-4, 6);
    expect(subnormalNoiseLimit(E5M2, DEFAULT_THRESHOLDS.subnormalNoiseAtRisk)).toBeCloseTo(2.82e-3, 5);
  });
});

describe("subnormalNoise: the predicted noise of the subnormal band against rounding a sample", () => {
  function gaussian(rms: number, log2Spread = 0): MagnitudeProfile {
    return { elements: 1e6, zeroFraction: 0, shape: "gaussian", rms, log2Spread };
  }

  // the draws of the scale taken at K evenly spaced quantiles of z (stratified), each with its own Gaussian sample;
  // the mean of the per-draw shares is the prediction's average over draws
  function sampled(profile: MagnitudeProfile, limits: RangeLimits, round: (v: number) => number, seed: number): number {
    const draws = profile.log2Spread > 0 ? 64 : 1;
    const random = createRandom(seed);
    let sum = 0;
    for (let k = 0; k < draws; k++) {
      const z = draws === 1 ? 0 : normalQuantile((k + 0.5) / draws);
      const r = profile.rms * 2 ** (profile.log2Spread * z);
      sum += measuredNoise(random.fillNormal(new Float64Array(draws === 1 ? 1 << 20 : 1 << 15), 0, r), limits, round);
    }
    return sum / draws;
  }

  it.each([
    // a tensor mostly subnormal (rms 1.2e-5, under binary16's smallest normal 2^-14 ≈ 6.1e-5), one mostly normal
    // (rms 2e-4), one on the flush bound (rms 1e-7): each against f16round (@petamoriken/float16)
    [1.2e-5, 0],
    [2e-4, 0],
    [1e-7, 0],
    [1.2e-5, 0.5],
  ])("binary16, rms %s, log2 spread %s: within 3% of f16round", (rms, spread) => {
    const profile = gaussian(rms, spread);
    const predicted = subnormalNoise(profile, BINARY16);
    const measured = sampled(profile, BINARY16, f16round, 7);
    expect(Math.abs(predicted / measured - 1)).toBeLessThan(0.03);
  });

  it.each([
    ["e5m2", 4e-5, E5M2],
    ["e4m3", 6e-3, E4M3_SATURATING],
  ] as const)("%s (OCP 8-bit spec's Δ), rms %s: within 3% of rounding to multiples of Δ", (_name, rms, limits) => {
    const profile = gaussian(rms);
    const round = (v: number): number => (Math.abs(v) < limits.minNormal ? roundInBand(v, limits.smallest) : v);
    expect(Math.abs(subnormalNoise(profile, limits) / sampled(profile, limits, round, 11) - 1)).toBeLessThan(0.03);
  });

  it("is 0 where subnormals flush, and for constant magnitudes follows the drawn scale in closed form", () => {
    expect(subnormalNoise(gaussian(1e-40), BFLOAT16_FTZ)).toBe(0);
    // every element at 2^-20 in binary16: one rounding error uniform on ±Δ/2 (Δ = 2^-24) would be Δ²/12 over 2^-40;
    // 2^-20 is a multiple of Δ, so the model's noise is its average over the values near it
    const constant: MagnitudeProfile = { elements: 100, zeroFraction: 0, shape: "constant", rms: 2 ** -20, log2Spread: 0 };
    expect(subnormalNoise(constant, BINARY16)).toBeCloseTo(2 ** -48 / 12 / 2 ** -40, 12);
    // with a spread, the closed form against the draw average at 20,001 evenly weighted quantiles
    const spread = { ...constant, log2Spread: 2 };
    let sum = 0;
    const n = 20001;
    for (let k = 0; k < n; k++) {
      const r = constant.rms * 2 ** (2 * normalQuantile((k + 0.5) / n));
      if (r > BINARY16.flushBound && r < BINARY16.minNormal) sum += 2 ** -48 / 12 / (r * r);
    }
    expect(Math.abs(subnormalNoise(spread, BINARY16) / (sum / n) - 1)).toBeLessThan(1e-2);
  });
});

describe("smallestStep", () => {
  it("finds the first step of a tail, and none when the last fails", () => {
    expect(smallestStep(20, (j) => j >= 7)).toBe(7);
    expect(smallestStep(20, (j) => j >= 1)).toBe(1);
    expect(smallestStep(6, (j) => j >= 7)).toBeNull();
    expect(smallestStep(0, () => true)).toBeNull();
  });
});

describe("noiseBound", () => {
  it("bounds the noise from above wherever it is used to skip the integral", () => {
    const shapes: MagnitudeProfile["shape"][] = ["gaussian", "half-gaussian", "uniform", "bounded", "log-normal", "constant"];
    for (const shape of shapes) {
      for (const rms of [1e-8, 1e-6, 1e-5, 1e-4, 1e-2, 1]) {
        for (const log2Spread of [0, 0.5, 2]) {
          const p: MagnitudeProfile = { elements: 1e6, zeroFraction: 0, shape, rms, log2Spread, bound: shape === "bounded" ? rms * 3 : undefined, elementLog2Spread: shape === "log-normal" ? 2 : undefined };
          const exact = integral(p, BINARY16);
          expect(noiseBound(p, BINARY16)).toBeGreaterThanOrEqual(exact * (1 - 1e-9));
          if (noiseBound(p, BINARY16) < NOISE_FLOOR) expect(subnormalNoise(p, BINARY16)).toBe(0);
        }
      }
    }
  });
});

describe("subnormalNoise against the draw integral written out", () => {
  // erf by its Maclaurin series (|x| < 3) and its continued fraction beyond (Abramowitz & Stegun 1964, 7.1.5 and 7.1.14)
  function erf(x: number): number {
    const t = Math.abs(x);
    if (t < 3) {
      let sum = 0;
      let term = t;
      for (let n = 0; n < 200; n++) {
        sum += term / (2 * n + 1);
        term *= (-t * t) / (n + 1);
        if (Math.abs(term) < 1e-18) break;
      }
      return Math.sign(x) * (2 / Math.sqrt(Math.PI)) * sum;
    }
    let f = 0;
    for (let k = 60; k >= 1; k--) f = k / 2 / (t + f);
    return Math.sign(x) * (1 - Math.exp(-t * t) / Math.sqrt(Math.PI) / (t + f));
  }
  const normalCdf = (z: number) => 0.5 * (1 + erf(z / Math.SQRT2));
  // P(|x| ≤ t) given the scale r: |Gaussian| (erf), uniform on ±√3·r, log2|x| ~ N(log2 r − s²·ln 2, s²) (E[x²] = r²)
  const below: Record<string, (r: number, t: number) => number> = {
    gaussian: (r, t) => erf(t / (r * Math.SQRT2)),
    uniform: (r, t) => Math.min(1, t / (Math.sqrt(3) * r)),
    "log-normal": (r, t) => normalCdf((Math.log2(t) - (Math.log2(r) - Math.LN2)) / 1),
  };
  // E_z[P(band | r)·Δ²/12 / r²], r = rms·2^(S·z), z ~ N(0, 1): a trapezoid over z in ±14 at steps of 1e-3 (the definition)
  function written(shape: string, rms: number, spread: number, limits: RangeLimits): number {
    const high = limits.minNormal - limits.smallest / 2;
    const law = below[shape]!;
    let sum = 0;
    const dz = 1e-3;
    for (let z = -14; z <= 14; z += dz) {
      const r = rms * 2 ** (spread * z);
      sum += (Math.exp((-z * z) / 2) / Math.sqrt(2 * Math.PI)) * Math.max(0, law(r, high) - law(r, limits.flushBound)) * ((limits.smallest ** 2 / 12) / (r * r)) * dz;
    }
    return sum;
  }

  it("agrees within 1e-2 relative (the shares' own accuracy, magnified by e^(c²/2) at wide spreads) for Gaussian, uniform and log-normal magnitudes, spreads 0.05 to 4 binades", () => {
    let compared = 0;
    for (const shape of ["gaussian", "uniform", "log-normal"] as const) {
      for (const spread of [0.05, 0.5, 2, 4]) {
        for (const k of [-12, -6, -1, 3, 9]) {
          const rms = BINARY16.minNormal * 2 ** k;
          const p: MagnitudeProfile = { elements: 1e6, zeroFraction: 0, shape, rms, log2Spread: spread, elementLog2Spread: shape === "log-normal" ? 1 : undefined };
          const expected = written(shape, rms, spread, BINARY16);
          const got = subnormalNoise(p, BINARY16);
          if (expected < NOISE_FLOOR) {
            expect(got).toBeLessThan(NOISE_FLOOR * 10);
            continue;
          }
          compared++;
          expect(Math.abs(got - expected) / expected, `${shape} spread ${spread} rms 2^${k}·min normal`).toBeLessThan(1e-2);
        }
      }
    }
    expect(compared).toBeGreaterThan(30);
  });
});
