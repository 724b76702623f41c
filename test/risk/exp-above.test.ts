/**
 * The bound on the exponential that capWithin and gaussianNoiseWithin ask before Math.exp (src/risk/_math.ts expAbove):
 * held to Math.exp itself (the exponential the bounds took before, within one unit in the last place of e^x, ECMA-262
 * leaves the accuracy to the implementation), from above and within 0.21%, and the two tests that take it to their
 * answers with Math.exp alone (the general path, written out here as they were).
 */
import { describe, expect, it } from "vitest";
import * as fc from "fast-check";
import { expAbove } from "../../src/risk/_math.js";
import { capMean, capWithin } from "../../src/risk/settle.js";
import { gaussianNoiseWithin } from "../../src/risk/subnormal-noise.js";
import { normalLogSf } from "../../src/numeric/normal.js";
import { BFLOAT16_FTZ, BINARY16, E4M3_SATURATING, E5M2 } from "./limits.js";

// capWithin with Math.exp alone
function capWithinByExp(c: number, m: number, target: number): boolean {
  if (!(c > 0)) return true;
  if (!(m > 0)) return Math.min(1, c) <= target;
  if (c * Math.exp((m * m) / 2) <= target) return true;
  return capMean(Math.log(c), m) <= target;
}

// gaussianNoiseWithin with Math.exp alone (a Gaussian magnitude's density bound √(2/π), as the source takes it)
function noiseWithinByExp(rms: number, m: number, bound: number, limits: typeof BINARY16, target: number): boolean {
  if (!(limits.flushBound < limits.minNormal && limits.smallest < limits.minNormal)) return true;
  const h = limits.minNormal;
  if (bound > 0 && bound < h) return false;
  const delta = limits.smallest;
  const scale = (delta * delta) / (12 * rms * rms);
  const k = (Math.sqrt(2 / Math.PI) * h) / rms;
  if (!(m > 0)) return scale * Math.min(1, k) <= target;
  if (scale * k * Math.exp(4.5 * m * m) <= target) return true;
  const logK = Math.log(k);
  const crossing = logK / m;
  const capped = Math.exp(2 * m * m + normalLogSf(-(crossing + 2 * m)));
  const tail = Math.exp(logK + 4.5 * m * m + normalLogSf(crossing + 3 * m));
  return scale * (capped + tail) <= target;
}

// a double spread evenly over [low, high] (fast-check's doubles crowd the ends)
function uniform(low: number, high: number): fc.Arbitrary<number> {
  return fc.integer({ min: 0, max: 2 ** 30 }).map((i) => low + ((high - low) * i) / 2 ** 30);
}

const exponent = fc.oneof(
  fc.double({ min: 0, max: 64, noNaN: true }),
  fc.double({ min: 0, max: 1e-6, noNaN: true }),
  fc.integer({ min: 0, max: 1023 }).map((j) => j / 16),
  fc.double({ min: -5, max: 80, noNaN: true }),
);

describe("expAbove: an upper bound on Math.exp without the exponential", () => {
  it("is at least Math.exp(x), and within 0.21% of it where it is not Math.exp itself", () => {
    fc.assert(
      fc.property(exponent, (x) => {
        const bound = expAbove(x);
        expect(bound).toBeGreaterThanOrEqual(Math.exp(x));
        expect(bound).toBeLessThanOrEqual(Math.exp(x) * 1.0021);
      }),
      { numRuns: 20000 },
    );
  });

  it("holds at the table's nodes and just under the next one, where e^r's bound is widest", () => {
    for (let j = 0; j < 1024; j++) {
      for (const x of [j / 16, (j + 1) / 16 - 2 ** -40, j / 16 + 2 ** -50]) {
        if (x >= 64) continue;
        expect(expAbove(x)).toBeGreaterThanOrEqual(Math.exp(x));
      }
    }
  });
});

describe("capWithin and gaussianNoiseWithin with expAbove first", () => {
  it("capWithin answers as with Math.exp alone, and its first test decides most means under the target", () => {
    let under = 0;
    let decided = 0;
    fc.assert(
      fc.property(
        uniform(-60, 5),
        fc.oneof(fc.constant(0), uniform(1e-4, 8)),
        // the target from far under the mean without the cap to far over it
        uniform(-3, 12),
        (log10C, m, above) => {
          const c = 10 ** log10C;
          const target = 10 ** (log10C + above);
          expect(capWithin(c, m, target)).toBe(capWithinByExp(c, m, target));
          if (m > 0 && c * Math.exp((m * m) / 2) <= target) {
            under++;
            if (c * expAbove((m * m) / 2) <= target) decided++;
          }
        },
      ),
      { numRuns: 20000 },
    );
    expect(under).toBeGreaterThan(1000);
    expect(decided / under).toBeGreaterThan(0.99);
  });

  it("gaussianNoiseWithin answers as with Math.exp alone", () => {
    fc.assert(
      fc.property(
        fc.double({ min: -40, max: 10, noNaN: true }),
        fc.oneof(fc.constant(0), fc.double({ min: 1e-4, max: 6, noNaN: true })),
        fc.oneof(fc.constant(0), fc.double({ min: 1e-9, max: 1e3, noNaN: true })),
        fc.constantFrom(BINARY16, BFLOAT16_FTZ, E4M3_SATURATING, E5M2),
        fc.double({ min: -14, max: -1, noNaN: true }),
        (log2Rms, m, bound, limits, log10Target) => {
          const rms = 2 ** log2Rms;
          const target = 10 ** log10Target;
          expect(gaussianNoiseWithin(rms, m, bound, limits, target)).toBe(noiseWithinByExp(rms, m, bound, limits, target));
        },
      ),
      { numRuns: 20000 },
    );
  });
});
