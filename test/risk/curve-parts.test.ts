// The edge guesses of src/risk/curve-parts.ts curvePartsOf: what they take of a tensor's profiles is worked out once per
// set of profiles and read by every format an answer searches (binary16's window, then bfloat16's remedy). Each
// format's guesses must be the ones worked out from the profiles for that format alone, written out below as the
// guesses are defined (floor(log2 of the overflow level − log2 of the larger rms − 2 − 3·spread), ceil(log2 of the
// flush bound − log2 of the smaller positive rms + 4 + 3·spread)), whichever format asks first.
import * as fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { curvePartsOf, gradientProfiles } from "../../src/risk/curve-parts.js";
import { limitsFor } from "../../src/risk/index.js";
import type { FormatName } from "../../src/formats/names.js";
import type { PrecisionPlan } from "../../src/spec/types.js";

function directGuesses(start: MagnitudeProfile, end: MagnitudeProfile, overflowLevel: number, flushBound: number) {
  const high = Math.max(start.rms, end.rms) > 0 ? Math.max(start.rms, end.rms) : 1;
  const low = Math.min(start.rms || end.rms, end.rms || start.rms) || 1;
  const spread = Math.max(start.log2Spread, end.log2Spread, 0);
  return {
    overflow: Math.floor(Math.log2(overflowLevel) - Math.log2(high) - 2 - 3 * spread),
    flush: Math.ceil(Math.log2(flushBound) - Math.log2(low) + 4 + 3 * spread),
  };
}

const profile = (rms: number, log2Spread: number): MagnitudeProfile => ({ elements: 4096, zeroFraction: 0, shape: "gaussian", rms, log2Spread });
const tensorOf = (i: number, start: MagnitudeProfile, end: MagnitudeProfile) =>
  ({ id: `g${i}`, layer: `d${i}`, layerIndex: i, family: "dense", role: "weight-gradient", slot: "gradients", shape: [64, 64], start, end, source: "predicted" }) as unknown as TensorPrediction;

describe("curvePartsOf's edge guesses", () => {
  it("are each format's own, whichever format of one set of profiles asks first", () => {
    const rms = fc.oneof(fc.constant(0), fc.double({ min: 1e-30, max: 1e30, noNaN: true }));
    const spread = fc.oneof(fc.constant(0), fc.double({ min: 0, max: 6, noNaN: true }));
    const formats: FormatName[] = ["binary16", "bfloat16", "e4m3", "e5m2"];
    fc.assert(
      fc.property(
        fc.array(fc.tuple(rms, spread, rms, spread), { minLength: 1, maxLength: 12 }),
        fc.shuffledSubarray(formats, { minLength: 2, maxLength: 4 }),
        (drawn, order) => {
          // a tensor needs a positive rms at one end to have curves (gradientProfiles)
          const tensors = drawn.map(([a, s, b, t], i) => tensorOf(i, profile(a, s), profile(b === 0 && a === 0 ? 1e-3 : b, t)));
          const profiles = gradientProfiles(tensors);
          expect(profiles).toHaveLength(tensors.length);
          for (const format of order) {
            const limits = limitsFor({ gradients: format } as unknown as PrecisionPlan, format);
            const guesses = curvePartsOf(profiles, limits, (_, g) => g);
            profiles.forEach((p, i) => expect(guesses[i]).toEqual(directGuesses(p.start, p.end, limits.overflowLevel, limits.flushBound)));
          }
        },
      ),
      { numRuns: 200 },
    );
  });
});
