/**
 * The expected largest element of a profile (src/magnitude/profile.ts) is read through a small table by element count:
 * whatever counts come and in whatever order, it must be the function's own value, bit for bit.
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { expectedMaxAbsGaussian, plainProfile } from "../../src/magnitude/profile.js";

describe("largest element by element count", () => {
  it("is E|Z| times the rms for one element (the half-normal mean √(2/π); common practice)", () => {
    expect(plainProfile(4, 0, "gaussian", 0, 1).maxElement).toBe(2 * Math.sqrt(2 / Math.PI));
  });

  it("is the uncached value for any sequence of counts, powers of two and their multiples among them", () => {
    const count = fc.oneof(
      fc.integer({ min: 1, max: 2 ** 31 - 1 }),
      fc.integer({ min: 0, max: 30 }).map((k) => 2 ** k),
      fc.tuple(fc.integer({ min: 0, max: 20 }), fc.integer({ min: 1, max: 1024 })).map(([k, w]) => 2 ** k * w),
    );
    fc.assert(
      fc.property(fc.array(count, { minLength: 1, maxLength: 40 }), (counts) => {
        // twice through: the second look-up of each count reads the table where the first filled it
        for (const n of [...counts, ...counts]) expect(plainProfile(1, 0, "gaussian", 0, n).maxElement).toBe(expectedMaxAbsGaussian(n));
      }),
      { numRuns: 200 },
    );
  });
});
