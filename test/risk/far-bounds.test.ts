import { describe, expect, it } from "vitest";
import * as fc from "fast-check";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { energyBelow, nonzeroElements, probabilityAnyAbove } from "../../src/risk/profile.js";
import { settledAnyAbove, settledEnergyBelow } from "../../src/risk/settle.js";
import { farAbove, farQuiet } from "../../src/risk/hazards.js";
import { profilesWithThreshold } from "./random-profiles.js";

// The hazards' exp-free first tests (src/risk/hazards.ts farQuiet, farAbove) stand for a result of src/risk/settle.ts:
// wherever they answer true, settle.ts must give exactly 0 (and the draw integrals of src/risk/profile.ts stay within
// their 1e-12 absolute, README), over thresholds from a few binades to hundreds of binades from the rms.
const profiles = profilesWithThreshold({ log2Rms: 120, log2Count: 40, log2Ratio: 250, bounds: false });

describe("the hazards' exp-free first tests", () => {
  it("answer true only where settle.ts gives exactly 0, and do answer true far from the rms", () => {
    let quiet = 0;
    let above = 0;
    fc.assert(
      fc.property(profiles, ({ profile, t }) => {
        if (farQuiet(profile, t)) {
          quiet++;
          expect(settledAnyAbove(profile, t, nonzeroElements(profile))).toBe(0);
          expect(probabilityAnyAbove(profile, t)).toBeLessThanOrEqual(1e-12);
        }
        if (farAbove(profile, t)) {
          above++;
          expect(settledEnergyBelow(profile, t)).toBe(0);
          expect(energyBelow(profile, t)).toBeLessThanOrEqual(1e-12);
        }
      }),
      { numRuns: 5000 },
    );
    // not vacuous: each test decides some of the far thresholds (~3–4% of these draws; 167 and 207 of 5,000 when written)
    expect(quiet).toBeGreaterThan(100);
    expect(above).toBeGreaterThan(100);
  });

  it("cannot tell near the rms", () => {
    const profile: MagnitudeProfile = { elements: 1 << 20, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0.5 };
    // a threshold 4 rms above or below: the overflow and the flushed share are far from 0 (common practice: a normal
    // variable passes 4σ with probability ~6e-5, so one of 2^20 elements surely does)
    expect(farQuiet(profile, 4)).toBe(false);
    expect(farAbove(profile, 0.25)).toBe(false);
  });
});
