import { describe, expect, it } from "vitest";
import fc from "fast-check";
import { profileStatistics } from "../../src/risk/profile.js";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";

// A spread of scales far below any level's resolution (a difference of two log-variances that cancel, 1e-30 or a
// subnormal) made the level search walk ever more lattice steps: profileStatistics did not return (a property test
// drove a worker to 23 GB). Under 1e-16 binade such a spread is none: the levels are those of spread 0; above it the
// search runs, and a spread of 1e-6 binade moves the levels by less than 1e-5 relative (the draws' quantiles lie within
// a few spreads; common practice).
const profile = (shape: MagnitudeProfile["shape"], log2Spread: number, elements = 2048): MagnitudeProfile =>
  ({ elements, zeroFraction: 0, shape, rms: 1, log2Spread, meanSquare: 1 }) as MagnitudeProfile;

describe("profileStatistics with a vanishing spread", () => {
  it("returns the spread-0 levels for spreads down to the smallest subnormal", () => {
    for (const shape of ["gaussian", "half-gaussian"] as const) {
      const none = profileStatistics(profile(shape, 0));
      for (const spread of [1e-17, 1e-30, 3.5e-96, Number.MIN_VALUE]) {
        expect(profileStatistics(profile(shape, spread)), `${shape} ${spread}`).toEqual(none);
      }
    }
  });

  it("from 1e-15 to 1e-6 binade the search runs, within 1e-5 relative of spread 0", () => {
    fc.assert(
      fc.property(fc.double({ min: 1e-15, max: 1e-6, noNaN: true }), fc.integer({ min: 2, max: 1e7 }), fc.constantFrom("gaussian", "half-gaussian"), (spread, n, shape) => {
        const none = profileStatistics(profile(shape as MagnitudeProfile["shape"], 0, n));
        const some = profileStatistics(profile(shape as MagnitudeProfile["shape"], spread, n));
        expect(Math.abs(some.max / none.max - 1)).toBeLessThan(1e-5);
        expect(Math.abs(some.low / none.low - 1)).toBeLessThan(1e-5);
      }),
      { numRuns: 60 },
    );
  });
});
