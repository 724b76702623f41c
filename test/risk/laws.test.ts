import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { anyOf } from "../../src/risk/_math.js";
import {
  elementLaw,
  lawMixtureCrossing,
  lawOverDraws,
  lawOverDrawsBounds,
  mixtureCrossing,
  nonzeroElements,
  overDraws,
  overDrawsBounds,
  overDrawsInnerBounds,
} from "../../src/risk/laws.js";

// The closure-free draw sums must be the element laws' draw sums exactly: the same nodes, the same arithmetic.
const shapes: MagnitudeProfile["shape"][] = ["gaussian", "half-gaussian", "uniform", "constant", "bounded", "log-normal"];
function sweep(): { profile: MagnitudeProfile; t: number }[] {
  const cases: { profile: MagnitudeProfile; t: number }[] = [];
  let k = 0;
  for (const shape of shapes) {
    for (const log2Spread of [0, 0.3, 1.7, 2.6]) {
      for (const bound of [undefined, 3]) {
        for (const ratio of [2 ** -30, 2 ** -3, 0.9, 2, 5, 2 ** 5]) {
          k++;
          const profile: MagnitudeProfile = { elements: 10 ** (k % 7), zeroFraction: k % 3 === 0 ? 0.5 : 0, shape, rms: 0.25, log2Spread };
          if (bound !== undefined) profile.bound = bound * profile.rms;
          if (shape === "log-normal") profile.elementLog2Spread = k % 4 === 0 ? 0 : 1.3;
          cases.push({ profile, t: ratio * profile.rms });
        }
      }
    }
  }
  return cases;
}

describe("draw sums of the element laws without closures", () => {
  it("equal overDraws with the element law's closures bit for bit", () => {
    for (const { profile, t } of sweep()) {
      const law = elementLaw(profile);
      const n = nonzeroElements(profile);
      const { rms, log2Spread } = profile;
      for (const positiveOnly of [false, true]) {
        const share = positiveOnly ? law.positiveShare : 1;
        expect(lawOverDraws(profile, "any-above", t, positiveOnly)).toBe(overDraws(rms, log2Spread, (r) => anyOf(share * law.above(r, t), n)));
      }
      expect(lawOverDraws(profile, "below", t)).toBe(overDraws(rms, log2Spread, (r) => law.below(r, t)));
      expect(lawOverDraws(profile, "energy-below", t)).toBe(overDraws(rms, log2Spread, (r) => law.energyBelow(r, t)));
      expect(lawOverDrawsBounds(profile, "any-above", t, false)).toEqual(overDrawsBounds(rms, log2Spread, (r) => anyOf(law.above(r, t), n)));
      expect(lawOverDrawsBounds(profile, "energy-below", t, true)).toEqual(overDrawsInnerBounds(rms, log2Spread, (r) => law.energyBelow(r, t)));
    }
  });

  it("lattice crossings equal mixtureCrossing with the law's closures", () => {
    for (const { profile } of sweep()) {
      if (profile.shape === "constant" || (profile.shape === "log-normal" && !(profile.elementLog2Spread! > 0))) continue;
      const { bound: _bound, ...unbounded } = profile;
      const law = elementLaw(profile.shape === "bounded" ? { ...unbounded, shape: "gaussian" } : unbounded);
      const n = nonzeroElements(profile);
      expect(lawMixtureCrossing(profile, "any-above", 1e-3)).toBe(mixtureCrossing((v) => anyOf(law.above(1, 2 ** v), n), profile.log2Spread, 1e-3, true));
      expect(lawMixtureCrossing(profile, "below", 1e-2)).toBe(mixtureCrossing((v) => law.below(1, 2 ** v), profile.log2Spread, 1e-2, false));
    }
  });
});
