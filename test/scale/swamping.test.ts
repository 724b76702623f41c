import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { FORMAT_NAMES, getFormat } from "../../src/formats/index.js";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { energyBelow, fractionBelow } from "../../src/risk/index.js";
import { lawOf, SwampingSums, type SwampingFormat } from "../../src/scale/swamping.js";

/**
 * The swamping sum written plainly: Σ over the weight's binades of P(|w| in [2^e, 2^(e+1))) · E[Δ²; |Δ| < 2^(e−p)]/E[Δ²],
 * the share of the update's squared norm lost, every share a fresh fractionBelow (weights) or energyBelow (update)
 * call (SCIENCE.md §1.1 [X]; Micikevicius et al. 2018 §3.1: the update is lost when |Δ| < ½·ulp(w), ulp(w) = 2^(e−p+1);
 * Δ independent of w, so the energy lost is this mixture).
 */
function referenceSwampedShare(weight: MagnitudeProfile, update: MagnitudeProfile, format: SwampingFormat): number {
  const updateBelow = (t: number) => energyBelow(update, t);
  const p = format.precision;
  const subnormalHalfSpacing = 2 ** (format.emin - p);
  const zeros = weight.zeroFraction;
  let lost = zeros * updateBelow(subnormalHalfSpacing);
  if (!(weight.rms > 0) || zeros >= 1) return zeros > 0 ? lost : updateBelow(subnormalHalfSpacing);
  const centre = Math.floor(Math.log2(weight.rms));
  const low = centre - 40;
  const high = centre + 12;
  const F: number[] = [];
  for (let e = low; e <= high; e++) F.push(fractionBelow(weight, 2 ** e * (1 - 2 ** -40)));
  let previous = F[0] as number;
  let nonzeroLost = previous * updateBelow(2 ** (Math.max(low, format.emin) - p));
  for (let e = low; e <= high; e++) {
    const next = e === high ? 1 : (F[e + 1 - low] as number);
    const mass = Math.max(0, next - previous);
    previous = next;
    if (mass === 0) continue;
    const halfUlp = e < format.emin ? subnormalHalfSpacing : 2 ** (e - p);
    nonzeroLost += mass * updateBelow(halfUlp);
  }
  lost += (1 - zeros) * nonzeroLost;
  return Math.min(1, Math.max(0, lost));
}

const shapes = ["gaussian", "half-gaussian", "uniform", "constant", "bounded", "log-normal"] as const;

/** Profiles of every element shape, with and without zeros, a draw spread, a bound, an element spread. */
function profileAt(log2Rms: fc.Arbitrary<number>): fc.Arbitrary<MagnitudeProfile> {
  return fc
    .record({
      shape: fc.constantFrom(...shapes),
      log2Rms,
      zeroFraction: fc.oneof(fc.constant(0), fc.constant(1), fc.double({ min: 0, max: 0.99, noNaN: true })),
      log2Spread: fc.oneof(fc.constant(0), fc.double({ min: 0.01, max: 1.5, noNaN: true })),
      elements: fc.oneof({ arbitrary: fc.constant(0), weight: 1 }, { arbitrary: fc.integer({ min: 1, max: 1e7 }), weight: 6 }),
      boundLog2: fc.option(fc.double({ min: -3, max: 3, noNaN: true }), { nil: undefined }),
      elementLog2Spread: fc.option(fc.oneof(fc.constant(0), fc.double({ min: 0.05, max: 3, noNaN: true })), { nil: undefined }),
    })
    .map(({ shape, log2Rms, zeroFraction, log2Spread, elements, boundLog2, elementLog2Spread }): MagnitudeProfile => {
      const rms = 2 ** log2Rms;
      return {
        elements,
        zeroFraction,
        shape,
        rms,
        log2Spread,
        ...(boundLog2 === undefined ? {} : { bound: rms * 2 ** boundLog2 }),
        ...(elementLog2Spread === undefined ? {} : { elementLog2Spread }),
      };
    });
}

/**
 * A weight profile and an update profile, the update mostly within reach of the weight's half ulps (2^-30 to 2
 * times the weight's rms), sometimes anywhere.
 */
const pair = fc.double({ min: -40, max: 12, noNaN: true }).chain((log2Weight) =>
  fc.tuple(
    profileAt(fc.constant(log2Weight)),
    profileAt(
      fc.oneof(
        { arbitrary: fc.double({ min: log2Weight - 30, max: log2Weight + 1, noNaN: true }), weight: 4 },
        { arbitrary: fc.double({ min: -60, max: 12, noNaN: true }), weight: 1 },
      ),
    ),
  ),
);

/** Every format headroom knows, and each with twice its precision (compensated summation). */
const format = fc
  .record({ name: fc.constantFrom(...FORMAT_NAMES), compensated: fc.boolean() })
  .map(({ name, compensated }): SwampingFormat => {
    const f = getFormat(name);
    return { precision: compensated ? 2 * f.precision : f.precision, emin: f.emin };
  });

function expectSame(actual: number, expected: number): void {
  expect(Math.abs(actual - expected)).toBeLessThanOrEqual(1e-12 * Math.abs(expected));
}

describe("SwampingSums (the optimizer check's swamping sums over shared tables)", () => {
  it("equals the plain binade sum on random weight and update profiles and formats", () => {
    fc.assert(
      fc.property(pair, fc.array(format, { minLength: 1, maxLength: 4 }), ([weight, update], formats) => {
        const lost = new SwampingSums(formats).lost(weight, update);
        formats.forEach((f, i) => expectSame(lost[i] as number, referenceSwampedShare(weight, update, f)));
      }),
      { numRuns: 400 },
    );
  });

  it("gives each pair its own sums when one assessment meets many weights and updates, equal ones among them", () => {
    fc.assert(
      fc.property(
        fc.array(pair, { minLength: 1, maxLength: 6 }),
        fc.array(format, { minLength: 1, maxLength: 3 }),
        (pairs, formats) => {
          const sums = new SwampingSums(formats);
          // each pair twice, the second time as copies: equal profiles must read the same tables
          for (const [weight, update] of [...pairs, ...pairs.map(([w, u]) => [{ ...w }, { ...u }] as const)]) {
            const lost = sums.lost(weight, update);
            formats.forEach((f, i) => expectSame(lost[i] as number, referenceSwampedShare(weight, update, f)));
          }
        },
      ),
      { numRuns: 60 },
    );
  });

  // the tables are shared by law (lawOf): this holds only while fractionBelow and energyBelow read nothing else of a profile
  it("shares tables only between profiles whose shares below every threshold are equal", () => {
    fc.assert(
      fc.property(
        pair,
        fc.double({ min: -80, max: 20, noNaN: true }),
        fc.record({ meanSquare: fc.double({ min: 0, max: 10, noNaN: true }), maxElement: fc.double({ min: 0, max: 10, noNaN: true }) }),
        ([profile], log2T, extra) => {
          const t = 2 ** log2T;
          const share = fractionBelow(profile, t);
          expect(fractionBelow(lawOf(profile), t)).toBe(share);
          expect(fractionBelow({ ...profile, ...extra, coherentRms: 2 * profile.rms }, t)).toBe(share);
          const energy = energyBelow(profile, t);
          expect(energyBelow(lawOf(profile), t)).toBe(energy);
          expect(energyBelow({ ...profile, ...extra, coherentRms: 2 * profile.rms }, t)).toBe(energy);
        },
      ),
      { numRuns: 400 },
    );
  });

  it("tells apart profiles that differ in one field only", () => {
    const weight: MagnitudeProfile = { elements: 1e4, zeroFraction: 0, shape: "gaussian", rms: 1, log2Spread: 0 };
    const update: MagnitudeProfile = { elements: 1e4, zeroFraction: 0, shape: "gaussian", rms: 2 ** -11, log2Spread: 0 };
    const binary16 = getFormat("binary16");
    const sums = new SwampingSums([binary16]);
    const plain = sums.lost(weight, update)[0] as number;
    const variants: MagnitudeProfile[] = [
      { ...update, shape: "uniform" },
      { ...update, log2Spread: 0.5 },
      { ...update, bound: 2 ** -12 },
      { ...update, zeroFraction: 1 },
    ];
    for (const other of variants) {
      const lost = sums.lost(weight, other)[0] as number;
      expectSame(lost, referenceSwampedShare(weight, other, binary16));
      expect(lost).not.toBe(plain);
    }
    expectSame(sums.lost({ ...weight, zeroFraction: 0.5 }, update)[0] as number, referenceSwampedShare({ ...weight, zeroFraction: 0.5 }, update, binary16));
  });
});

describe("SwampingSums far from 1", () => {
  it("a first weight of rms 2^240 (beyond the random pairs' range) starts its table without a copy out of bounds", () => {
    // the first exponent asked for lay above 160: the empty table's copy went to a negative offset and threw RangeError
    const weight: MagnitudeProfile = { elements: 1e4, zeroFraction: 0, shape: "gaussian", rms: 2 ** 240, log2Spread: 0 };
    const update: MagnitudeProfile = { elements: 1e4, zeroFraction: 0, shape: "gaussian", rms: 2 ** 220, log2Spread: 0 };
    const binary32 = getFormat("binary32");
    expectSame(new SwampingSums([binary32]).lost(weight, update)[0] as number, referenceSwampedShare(weight, update, binary32));
  });
});

describe("SwampingSums tables shared across assessments", () => {
  it("an assessment with other formats meeting laws an earlier one met sums its own formats", () => {
    const weight: MagnitudeProfile = { elements: 4096, zeroFraction: 0.25, shape: "gaussian", rms: 0.03, log2Spread: 0 };
    const update: MagnitudeProfile = { elements: 4096, zeroFraction: 0.5, shape: "gaussian", rms: 3e-6, log2Spread: 1.2 };
    const binary16 = getFormat("binary16");
    const bfloat16 = getFormat("bfloat16");
    const binary32 = getFormat("binary32");
    const first = new SwampingSums([binary16, binary32]).lost(weight, update);
    const second = new SwampingSums([bfloat16, binary16, { precision: 22, emin: binary16.emin }]).lost({ ...weight }, { ...update });
    expectSame(first[0] as number, referenceSwampedShare(weight, update, binary16));
    expectSame(first[1] as number, referenceSwampedShare(weight, update, binary32));
    expectSame(second[0] as number, referenceSwampedShare(weight, update, bfloat16));
    expect(second[1]).toBe(first[0]);
    expectSame(second[2] as number, referenceSwampedShare(weight, update, { precision: 22, emin: binary16.emin }));
  });
});
