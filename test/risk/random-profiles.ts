import * as fc from "fast-check";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";

export const gaussianShapes = ["gaussian", "half-gaussian", "bounded"] as const;

/**
 * Random Gaussian-family profiles with a threshold `t`, for the tests of shortcuts that settle a share or probability
 * without its draw integral: rms within ±2^log2Rms, up to 2^log2Count elements, the threshold within ±log2Ratio binades
 * of the rms, and with `bounds` a bound above the rms in about half of them.
 */
export function profilesWithThreshold(range: { log2Rms: number; log2Count: number; log2Ratio: number; bounds: boolean }) {
  return fc
    .record({
      shape: fc.constantFrom(...gaussianShapes),
      log2Rms: fc.double({ min: -range.log2Rms, max: range.log2Rms, noNaN: true }),
      // no spread, or one of at least 1e-3 binade (the draw rule of src/risk/laws.ts is not made for subnormal spreads)
      spread: fc.oneof(fc.constant(0), fc.double({ min: 1e-3, max: 4.5, noNaN: true })),
      log2Count: fc.double({ min: 0, max: range.log2Count, noNaN: true }),
      zeroFraction: fc.oneof(fc.constant(0), fc.double({ min: 0, max: 0.9, noNaN: true })),
      // the bound in binades above the rms (none: −1)
      boundAbove: range.bounds ? fc.oneof(fc.constant(-1), fc.double({ min: 0, max: 30, noNaN: true })) : fc.constant(-1),
      log2Ratio: fc.double({ min: -range.log2Ratio, max: range.log2Ratio, noNaN: true }),
    })
    .map((x) => {
      const rms = 2 ** x.log2Rms;
      const profile: MagnitudeProfile = {
        elements: Math.floor(2 ** x.log2Count),
        zeroFraction: x.zeroFraction,
        shape: x.shape,
        rms,
        log2Spread: x.spread,
        bound: x.boundAbove >= 0 ? rms * 2 ** x.boundAbove : undefined,
      };
      return { profile, t: rms * 2 ** x.log2Ratio };
    });
}
