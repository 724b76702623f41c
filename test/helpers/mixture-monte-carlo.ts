import { expect } from "vitest";
import { f16round } from "@petamoriken/float16";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { createRandom, type RandomSource } from "../../src/numeric/random.js";
import { energyBelow, fractionBelow, probabilityAnyAbove } from "../../src/risk/profile.js";

// A seeded Monte Carlo of a gradient element's law, and the risk laws of a profile held to it (the scale mixtures'
// tests: test/risk/*-mixture.test.ts).

// e5m2 rounds |x| ≤ 2^−17 (half its smallest subnormal 2^−16) to zero (OCP 8-bit floating point spec, 2023, Table 1;
// ties to the even zero); binary16 by @petamoriken/float16's f16round (IEEE 754-2019 binary16, round to nearest even)
export const E5M2_FLUSH = 2 ** -17;
export const flushesE5m2 = (y: number): boolean => Math.abs(y) <= E5M2_FLUSH;
export const flushesBinary16 = (y: number): boolean => f16round(y) === 0;

/** Values drawn from a law, and their rms. */
export interface Sample {
  values: Float64Array;
  rms: number;
}

/** `count` values of `draw` with a random source seeded by `seed`. */
export function drawSample(count: number, seed: number, draw: (random: RandomSource) => number): Sample {
  const random = createRandom(seed);
  const values = new Float64Array(count);
  let square = 0;
  for (let i = 0; i < count; i++) {
    const y = draw(random);
    values[i] = y;
    square += y * y;
  }
  return { values, rms: Math.sqrt(square / count) };
}

/**
 * The sample scaled so that the e5m2 and binary16 flush bounds sit at `a` of its rms: the profile's flushed share
 * (`profileAt(rms)`) within `relative` of the share the formats' own rounding flushes, plus 4 standard errors of the
 * count; `overGaussian`: the measured share is at least that many times a Gaussian's of the same rms, erf(a/√2) ≈ 0.8·a.
 */
export function expectFlushedLikeSample(drawn: Sample, a: number, profileAt: (rms: number) => MagnitudeProfile, relative: number, overGaussian = 0): void {
  const count = drawn.values.length;
  for (const [bound, flushes] of [
    [E5M2_FLUSH, flushesE5m2],
    [2 ** -25, flushesBinary16],
  ] as const) {
    const factor = bound / a / drawn.rms;
    let flushed = 0;
    for (const y of drawn.values) if (flushes(y * factor)) flushed++;
    const measured = flushed / count;
    const predicted = fractionBelow(profileAt(drawn.rms * factor), bound);
    expect(Math.abs(predicted - measured), `${bound}: ${predicted} against ${measured}`).toBeLessThan(relative * measured + 4 * Math.sqrt(measured / count));
    if (overGaussian > 0) expect(measured).toBeGreaterThan(overGaussian * 0.8 * a);
  }
}

/**
 * The profile's energy below a twentieth of the rms within `energyRelative` of the sample's, and (with `tailRelative`)
 * its one-element probability above three times the rms within that of the sample's, plus 4 standard errors.
 */
export function expectEnergyAndTailLikeSample(drawn: Sample, profile: MagnitudeProfile, energyRelative: number, tailRelative?: number): void {
  const count = drawn.values.length;
  let square = 0;
  let below = 0;
  let above = 0;
  const low = 0.05 * drawn.rms;
  const high = 3 * drawn.rms;
  for (const y of drawn.values) {
    square += y * y;
    if (Math.abs(y) <= low) below += y * y;
    if (Math.abs(y) >= high) above++;
  }
  const energy = below / square;
  expect(Math.abs(energyBelow(profile, low) - energy) / energy).toBeLessThan(energyRelative);
  if (tailRelative !== undefined) {
    // one element: the any-above probability is the element's own tail
    const tail = above / count;
    expect(Math.abs(probabilityAnyAbove(profile, high) - tail)).toBeLessThan(tailRelative * tail + 4 * Math.sqrt(tail / count));
  }
}
