import { f16round } from "@petamoriken/float16";
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import {
  FORMATS,
  FORMAT_NAMES,
  absoluteError,
  bracket,
  classify,
  decode,
  encode,
  isFlushed,
  nextDown,
  nextUp,
  relativeError,
  roundDetailed,
  roundTo,
  ulp,
  type Format,
  type FormatName,
  type OverflowMode,
} from "../../src/formats/index.js";
import { REFERENCE_FORMATS, referenceRound, seeded, stepBinary64 } from "./reference.js";

/** ±0 compare with Object.is; NaN equals NaN */
function same(a: number, b: number): boolean {
  return Object.is(a, b) || (Number.isNaN(a) && Number.isNaN(b));
}

// ---------------------------------------------------------------------------------------------------------------
// generators weighted toward the hard places of one format: halfway points, subnormal boundaries, the overflow
// threshold; each is nudged by a few binary64 steps so both sides of every boundary are hit

function nudged(base: fc.Arbitrary<number>): fc.Arbitrary<number> {
  return fc
    .tuple(base, fc.integer({ min: -3, max: 3 }), fc.boolean())
    .map(([x, steps, negative]) => {
      const v = stepBinary64(x, steps);
      return negative ? -v : v;
    });
}

function hardInputs(f: Format): fc.Arbitrary<number> {
  const p = f.precision;
  // midpoints (n + 1/2)·2^(e − p + 1) between grid neighbours, anywhere from the subnormals to past the top
  const midpoint = fc
    .tuple(fc.integer({ min: f.emin - 1, max: f.emax + 1 }), fc.integer({ min: 0, max: 2 ** p }))
    .map(([e, n]) => (n + 0.5) * 2 ** (Math.max(e, f.emin) - p + 1));
  // grid points themselves
  const gridPoint = fc
    .tuple(fc.integer({ min: f.emin, max: f.emax }), fc.integer({ min: 2 ** (p - 1), max: 2 ** p - 1 }))
    .map(([e, n]) => n * 2 ** (e - p + 1));
  // subnormal boundaries: multiples of half the smallest subnormal near zero, and the normal/subnormal border
  const subnormalEdge = fc.oneof(
    fc.integer({ min: 0, max: 8 }).map((k) => (k * f.minSubnormal) / 2),
    fc.integer({ min: -4, max: 4 }).map((k) => f.minNormal + (k * f.minSubnormal) / 2),
  );
  // around the largest finite value and the overflow threshold
  const top = 2 ** (f.emax - p + 1);
  const overflowEdge = fc.constantFrom(
    f.maxFinite,
    f.overflowThreshold,
    f.maxFinite + top,
    f.overflowThreshold - top / 4,
    f.overflowThreshold + top / 4,
    2 ** (f.emax + 1),
    Infinity,
  );
  return fc.oneof(
    { arbitrary: nudged(midpoint), weight: 4 },
    { arbitrary: nudged(gridPoint), weight: 1 },
    { arbitrary: nudged(subnormalEdge), weight: 2 },
    { arbitrary: nudged(overflowEdge), weight: 2 },
    { arbitrary: fc.double(), weight: 2 },
    { arbitrary: fc.double({ min: -4 * f.maxFinite, max: 4 * f.maxFinite }), weight: 2 },
  );
}

const RUNS = { numRuns: 3000 };

describe("roundTo against outside references", () => {
  it("binary16 equals f16round from @petamoriken/float16 (weighted and uniform binary64 inputs)", () => {
    fc.assert(
      fc.property(hardInputs(FORMATS.binary16), (x) => same(roundTo(FORMATS.binary16, x), f16round(x))),
      { numRuns: 10000 },
    );
  });

  it("binary32 equals Math.fround (ECMAScript binary32 rounding, round-to-nearest-even)", () => {
    fc.assert(
      fc.property(hardInputs(FORMATS.binary32), (x) => same(roundTo(FORMATS.binary32, x), Math.fround(x))),
      { numRuns: 10000 },
    );
  });

  it("binary64 is the identity (nothing to round)", () => {
    fc.assert(fc.property(fc.double(), (x) => same(roundTo(FORMATS.binary64, x), x)));
  });

  const referenced: (keyof typeof REFERENCE_FORMATS)[] = ["bfloat16", "tf32", "e5m2", "e4m3", "binary16"];
  for (const name of referenced) {
    for (const overflow of ["saturate", "infinity-or-nan"] as OverflowMode[]) {
      it(`${name} (${overflow}) equals the exact BigInt reference built from the published definition`, () => {
        const f = FORMATS[name];
        const ref = REFERENCE_FORMATS[name];
        fc.assert(
          fc.property(hardInputs(f), (x) => same(roundTo(f, x, { overflow }), referenceRound(ref, x, overflow))),
          RUNS,
        );
      });
    }
    it(`${name} toward zero equals the exact BigInt reference`, () => {
      const f = FORMATS[name];
      const ref = REFERENCE_FORMATS[name];
      fc.assert(
        fc.property(hardInputs(f), (x) =>
          same(roundTo(f, x, { mode: "toward-zero" }), referenceRound(ref, x, f.defaultOverflow, "toward-zero")),
        ),
        RUNS,
      );
    });
  }
});

describe("properties of rounding (every format; IEEE 754-2019 §4.3 round-to-nearest-even)", () => {
  for (const name of FORMAT_NAMES) {
    const f = FORMATS[name];
    it(`${name}: monotonic, odd and idempotent`, () => {
      const options = { overflow: "saturate" as const };
      fc.assert(
        fc.property(hardInputs(f), hardInputs(f), (a, b) => {
          if (Number.isNaN(a) || Number.isNaN(b)) return true;
          const [x, y] = a <= b ? [a, b] : [b, a];
          const rx = roundTo(f, x, options);
          const ry = roundTo(f, y, options);
          if (!(rx <= ry)) return false;
          if (!same(roundTo(f, -x, options), -rx)) return false;
          if (!same(roundTo(f, rx, options), rx)) return false;
          return same(roundTo(f, x), roundTo(f, roundTo(f, x)));
        }),
        RUNS,
      );
    });

    if (name === "binary64") continue;
    it(`${name}: an exact midpoint goes to the neighbour with the even code (ties to even)`, () => {
      fc.assert(
        fc.property(
          fc.integer({ min: f.emin, max: f.emax }),
          fc.integer({ min: 0, max: 2 ** f.precision - 2 }),
          (e, n) => {
            const q = 2 ** (e - f.precision + 1);
            const low = n * q;
            const high = (n + 1) * q;
            if (high > f.maxFinite) return true;
            if (e > f.emin && n < 2 ** (f.precision - 1)) return true; // not in this binade's grid
            const r = roundTo(f, (low + high) / 2);
            if (r !== low && r !== high) return false;
            return encode(f, r) % 2 === 0;
          },
        ),
        RUNS,
      );
    });

    it(`${name}: error within half an ulp in range; the result is one of the two neighbours`, () => {
      fc.assert(
        fc.property(hardInputs(f), (x) => {
          if (!Number.isFinite(x) || Math.abs(x) > f.maxFinite) return true;
          const r = roundTo(f, x);
          const [low, high] = bracket(f, x);
          if (r !== low && r !== high) return false;
          return Math.abs(r - x) <= ulp(f, x) / 2;
        }),
        RUNS,
      );
    });
  }
});

describe("known cases, each with its source", () => {
  const b16 = FORMATS.binary16;
  const bf16 = FORMATS.bfloat16;
  const e4 = FORMATS.e4m3;

  it("binary16: 65519 → 65504 and 65520 → Infinity (SCIENCE.md §1.1: numpy float16 and a quantizer, T_ovf = 65520)", () => {
    expect(roundTo(b16, 65519)).toBe(65504);
    expect(roundTo(b16, 65520)).toBe(Infinity);
    expect(roundTo(b16, -65520)).toBe(-Infinity);
    expect(classify(b16, 65520)).toBe("infinite");
    expect(roundTo(b16, 65520, { overflow: "saturate" })).toBe(65504);
    expect(classify(b16, 65520, { overflow: "saturate" })).toBe("saturated");
  });

  it("1e-8 → 0 in binary16 and ≈1.00117e-8 in bfloat16 (common practice: an optimizer epsilon of 1e-8 vanishes in half precision)", () => {
    expect(roundTo(b16, 1e-8)).toBe(0);
    expect(isFlushed(b16, 1e-8)).toBe(true);
    expect(roundDetailed(b16, 1e-8)).toEqual({ value: 0, class: "zero", flushed: true });
    expect(roundTo(bf16, 1e-8)).toBeCloseTo(1.00117e-8, 13);
    expect(roundTo(bf16, 1e-8)).toBe(1.0011717677116394e-8);
    expect(classify(bf16, 1e-8)).toBe("normal");
  });

  it("2^-25 → 0 and the next binary64 above it → 2^-24 in binary16 (SCIENCE.md §1.1: the tie at half the smallest subnormal goes to the even zero)", () => {
    expect(roundTo(b16, 2 ** -25)).toBe(0);
    expect(roundTo(b16, stepBinary64(2 ** -25, 1))).toBe(2 ** -24);
    expect(Object.is(roundTo(b16, -(2 ** -25)), -0)).toBe(true);
    expect(classify(b16, stepBinary64(2 ** -25, 1))).toBe("subnormal");
  });

  it("e4m3: 464 → 448; 465 → NaN non-saturating, 448 saturating (SCIENCE.md §1.3: OCP conversion modes, reported reference boundary)", () => {
    expect(roundTo(e4, 464, { overflow: "infinity-or-nan" })).toBe(448);
    expect(roundTo(e4, 464, { overflow: "saturate" })).toBe(448);
    expect(roundTo(e4, 465, { overflow: "infinity-or-nan" })).toBeNaN();
    expect(roundTo(e4, 465, { overflow: "saturate" })).toBe(448);
    expect(roundTo(e4, 465)).toBe(448); // default: saturating
    expect(classify(e4, 465)).toBe("saturated");
    expect(classify(e4, 465, { overflow: "infinity-or-nan" })).toBe("nan");
    expect(classify(e4, 464)).toBe("normal");
    // an infinite input: ±max when saturating, NaN otherwise (OCP 8-bit spec, as quoted in SCIENCE.md §1.3)
    expect(roundTo(e4, -Infinity)).toBe(-448);
    expect(roundTo(e4, Infinity, { overflow: "infinity-or-nan" })).toBeNaN();
  });

  it("e5m2: 61439 → 57344 and 61440 → Infinity non-saturating, 57344 saturating (SCIENCE.md §1.3)", () => {
    expect(roundTo(FORMATS.e5m2, 61439)).toBe(57344);
    expect(roundTo(FORMATS.e5m2, 61440)).toBe(Infinity);
    expect(roundTo(FORMATS.e5m2, 61440, { overflow: "saturate" })).toBe(57344);
  });

  it("a binary64 value where direct rounding to bfloat16 differs from rounding through binary32 (double rounding; exact value from the BigInt reference)", () => {
    const x = 1 + 2 ** -8 + 2 ** -30; // just above the midpoint of 1 and 1 + 2^-7
    const direct = roundTo(bf16, x);
    const throughBinary32 = roundTo(bf16, Math.fround(x)); // Math.fround drops 2^-30, leaving an exact tie
    expect(direct).toBe(1 + 2 ** -7);
    expect(direct).toBe(referenceRound(REFERENCE_FORMATS.bfloat16, x, "infinity-or-nan"));
    expect(throughBinary32).toBe(1);
  });

  it("binary16 rounds 1.337 to 1.3369140625 and 0.1 to 0.0999755859375 (@petamoriken/float16 f16round)", () => {
    expect(roundTo(b16, 1.337)).toBe(f16round(1.337));
    expect(roundTo(b16, 1.337)).toBe(1.3369140625);
    expect(roundTo(b16, 0.1)).toBe(0.0999755859375);
  });

  it("keeps the sign of zero and NaN (IEEE 754-2019 §6.3)", () => {
    for (const name of FORMAT_NAMES) {
      expect(Object.is(roundTo(FORMATS[name], -0), -0)).toBe(true);
      expect(Object.is(roundTo(FORMATS[name], 0), 0)).toBe(true);
      expect(roundTo(FORMATS[name], NaN)).toBeNaN();
      expect(classify(FORMATS[name], NaN)).toBe("nan");
      expect(classify(FORMATS[name], 0)).toBe("zero");
      expect(isFlushed(FORMATS[name], 0)).toBe(false);
    }
  });
});

describe("flushing subnormal results (some hardware, e.g. for bfloat16: SCIENCE.md §1.2)", () => {
  it("sends results below the smallest normal to a zero of the same sign, and marks them flushed", () => {
    const bf16 = FORMATS.bfloat16;
    const tiny = 2 ** -130;
    expect(roundTo(bf16, tiny)).toBe(tiny);
    expect(classify(bf16, tiny)).toBe("subnormal");
    expect(roundTo(bf16, tiny, { flushSubnormals: true })).toBe(0);
    expect(Object.is(roundTo(bf16, -tiny, { flushSubnormals: true }), -0)).toBe(true);
    expect(roundDetailed(bf16, tiny, { flushSubnormals: true })).toEqual({ value: 0, class: "zero", flushed: true });
    // a value that rounds up to the smallest normal is not a subnormal result
    const justBelow = 2 ** -126 - 2 ** -135;
    expect(roundTo(bf16, justBelow, { flushSubnormals: true })).toBe(2 ** -126);
  });

  it("matches the reference followed by a flush, for every 8- and 16-bit format", () => {
    for (const name of ["binary16", "bfloat16", "e5m2", "e4m3"] as const) {
      const f = FORMATS[name];
      fc.assert(
        fc.property(hardInputs(f), (x) => {
          const expected = referenceRound(REFERENCE_FORMATS[name], x, f.defaultOverflow);
          const flushed = Math.abs(expected) < f.minNormal ? (expected < 0 || Object.is(expected, -0) ? -0 : 0) : expected;
          return same(roundTo(f, x, { flushSubnormals: true }), flushed);
        }),
        { numRuns: 1000 },
      );
    }
  });
});

describe("toward-zero rounding", () => {
  it("never increases the magnitude and carries overflow to ±maxFinite (IEEE 754-2019 §7.4)", () => {
    const b16 = FORMATS.binary16;
    expect(roundTo(b16, 65535, { mode: "toward-zero" })).toBe(65504);
    expect(roundTo(b16, 1e6, { mode: "toward-zero" })).toBe(65504);
    expect(classify(b16, 1e6, { mode: "toward-zero" })).toBe("saturated");
    expect(roundTo(b16, Infinity, { mode: "toward-zero" })).toBe(Infinity);
    expect(roundTo(b16, 1 + 2 ** -11 + 2 ** -20, { mode: "toward-zero" })).toBe(1);
    expect(roundTo(b16, -(2 ** -25), { mode: "toward-zero" })).toBe(-0);
    expect(classify(FORMATS.e4m3, 470, { mode: "toward-zero" })).toBe("normal");
  });
});

describe("stochastic rounding (seeded)", () => {
  const f = FORMATS.bfloat16;

  it("needs a random source", () => {
    expect(() => roundTo(f, 1.001, { mode: "stochastic" })).toThrow(TypeError);
  });

  it("gives one of the two neighbours, keeps exact values, and repeats under the same seed", () => {
    fc.assert(
      fc.property(hardInputs(f), fc.integer(), (x, seed) => {
        if (!Number.isFinite(x) || Math.abs(x) > f.maxFinite) return true;
        const random = seeded(seed);
        const r = roundTo(f, x, { mode: "stochastic", random });
        const again = roundTo(f, x, { mode: "stochastic", random: seeded(seed) });
        const [low, high] = bracket(f, x);
        return (same(r, low) || same(r, high) || (r === 0 && x !== 0)) && same(r, again);
      }),
      { numRuns: 1000 },
    );
    expect(roundTo(f, 1.5, { mode: "stochastic", random: () => 0.999 })).toBe(1.5);
  });

  it("is unbiased: the mean of many roundings approaches x (Connolly, Higham & Mary 2021, mode 1 is unbiased)", () => {
    const x = 1 + 0.3 * 2 ** -7; // 30% of the way from 1 to the next bfloat16 value
    const random = seeded(12345);
    let sum = 0;
    let ups = 0;
    const trials = 20000;
    for (let i = 0; i < trials; i++) {
      const r = roundTo(f, x, { mode: "stochastic", random });
      sum += r;
      if (r > 1) ups++;
    }
    // binomial(20000, 0.3): standard deviation 65 ups; 5 standard deviations allowed, with a fixed seed
    expect(Math.abs(ups - 0.3 * trials)).toBeLessThan(5 * Math.sqrt(trials * 0.3 * 0.7));
    expect(Math.abs(sum / trials - x)).toBeLessThan(2 ** -7 * 0.02);
  });
});

describe("ulp, nextUp, nextDown, relativeError", () => {
  it("binary16 neighbours of 1 and the ends of the range (IEEE 754-2019 §5.3.1 nextUp/nextDown; @petamoriken/float16 constants)", () => {
    const b16 = FORMATS.binary16;
    expect(ulp(b16, 1)).toBe(2 ** -10);
    expect(ulp(b16, 0)).toBe(2 ** -24);
    expect(ulp(b16, 65504)).toBe(32);
    expect(ulp(b16, 1e-7)).toBe(2 ** -24);
    expect(nextUp(b16, 1)).toBe(1 + 2 ** -10);
    expect(nextDown(b16, 1)).toBe(1 - 2 ** -11);
    expect(nextUp(b16, 0)).toBe(2 ** -24);
    expect(nextDown(b16, 0)).toBe(-(2 ** -24));
    expect(Object.is(nextUp(b16, -(2 ** -24)), -0)).toBe(true);
    expect(nextUp(b16, 65504)).toBe(Infinity);
    expect(nextDown(b16, Infinity)).toBe(65504);
    expect(nextDown(b16, -65504)).toBe(-Infinity);
    expect(nextUp(FORMATS.e4m3, 448)).toBeNaN(); // e4m3 has nothing above 448
    expect(nextUp(b16, 1.0001)).toBe(1 + 2 ** -10);
    expect(nextDown(b16, 1.0001)).toBe(1);
  });

  it("nextUp steps one code up and ulp is the gap above each positive value, over every 8-bit and binary16 code", () => {
    for (const name of ["e4m3", "e5m2", "binary16"] as FormatName[]) {
      const f = FORMATS[name];
      const half = 2 ** (f.bits - 1);
      for (let code = 0; code < half; code++) {
        const v = decode(f, code);
        if (!Number.isFinite(v) || v >= f.maxFinite) continue;
        const up = decode(f, code + 1);
        if (nextUp(f, v) !== up) throw new Error(`${name} nextUp(${v}) = ${nextUp(f, v)}, expected ${up}`);
        if (nextDown(f, up) !== v && !(v === 0 && nextDown(f, up) === 0)) throw new Error(`${name} nextDown(${up})`);
        if (up - v !== ulp(f, v)) throw new Error(`${name} ulp(${v}) = ${ulp(f, v)}, gap ${up - v}`);
        if (nextUp(f, -up) !== -v && !(v === 0)) throw new Error(`${name} nextUp(${-up})`);
      }
    }
  });

  it("relative error is at most the unit roundoff in the normal range (SCIENCE.md §1.1) and names overflow", () => {
    for (const name of FORMAT_NAMES) {
      const f = FORMATS[name];
      fc.assert(
        fc.property(fc.double({ min: f.minNormal, max: f.maxFinite, noNaN: true }), (x) => relativeError(f, x) <= f.unitRoundoff),
        { numRuns: 500 },
      );
    }
    expect(relativeError(FORMATS.binary16, 1e6)).toBe(Infinity);
    expect(relativeError(FORMATS.binary16, 0)).toBe(0);
    expect(relativeError(FORMATS.binary16, 1e-8)).toBe(1);
    expect(absoluteError(FORMATS.binary16, 0.1)).toBeCloseTo(0.1 - 0.0999755859375, 18);
    expect(relativeError(FORMATS.bfloat16, NaN)).toBeNaN();
  });
});
