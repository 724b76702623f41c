import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { binades, distinctNumbers, limitNumber, numberInDigits, percent, plainNumber, probabilityWords, scaleWords, sharePercent, tinyShare, Words } from "../../src/risk/words.js";

// The wording as first written, straight from ECMA-262's Number.prototype.toPrecision and toExponential
// (§21.1.3.5, §21.1.3.2): the fast digit arithmetic of plainNumber must give the same strings.
function direct(x: number): string {
  if (!Number.isFinite(x)) return x > 0 ? "infinity" : x < 0 ? "-infinity" : "not a number";
  if (x === 0) return "0";
  const magnitude = Math.abs(x);
  if (magnitude >= 1e-3 && magnitude < 1e6) return String(Number(x.toPrecision(3)));
  const [mantissa, exponent] = x.toExponential(2).split("e");
  return `${String(Number(mantissa))}e${Number(exponent)}`;
}

describe("plainNumber", () => {
  it("reads as three significant digits (examples, ECMA-262 rounding)", () => {
    expect(plainNumber(0.000123)).toBe("1.23e-4");
    expect(plainNumber(0.0123)).toBe("0.0123");
    expect(plainNumber(1)).toBe("1");
    expect(plainNumber(65504)).toBe("65500");
    expect(plainNumber(999999)).toBe("1000000");
    expect(plainNumber(1e6)).toBe("1e6");
    expect(plainNumber(-2.5e-8)).toBe("-2.5e-8");
    expect(plainNumber(2 ** -24)).toBe("5.96e-8");
    expect(plainNumber(Infinity)).toBe("infinity");
    expect(plainNumber(-Infinity)).toBe("-infinity");
    expect(plainNumber(Number.NaN)).toBe("not a number");
    expect(plainNumber(0)).toBe("0");
    expect(plainNumber(0.01)).toBe("0.01");
    expect(plainNumber(0.009999999)).toBe("0.01");
    expect(plainNumber(0.0999999)).toBe("0.1");
    expect(plainNumber(-0)).toBe("0");
  });

  it("agrees with toPrecision/toExponential on any double", () => {
    fc.assert(
      fc.property(fc.double({ noNaN: true }), (x) => plainNumber(x) === direct(x)),
      { numRuns: 20_000 },
    );
  });

  it("agrees on decades, ties and their neighbours", () => {
    const cases: number[] = [Number.MIN_VALUE, Number.MAX_VALUE, 2 ** -1074 * 3, 2 ** -1022, 1e-300, 1e300, 1e-301, 9.995e299];
    for (let e = -320; e <= 308; e++) {
      for (const n of [1, 9.99, 9.995, 9.9949999, 9.9950001, 1.005, 1.115, 1.235, 2.675, 5, 9.9999999, 1.0000001]) {
        const x = Number(`${n}e${e}`);
        for (const y of [x, nextUp(x), nextDown(x)]) cases.push(y, -y);
      }
    }
    for (let n = 1000; n < 10000; n++) cases.push(n / 10, n / 1e6, (n + 0.5) / 1e4, n * 1e5 + 50);
    const differing = cases.filter((x) => plainNumber(x) !== direct(x));
    expect(differing).toEqual([]);
  });

  it("agrees on three-digit ties in every decade", () => {
    fc.assert(
      fc.property(fc.integer({ min: 1000, max: 9999 }), fc.integer({ min: -310, max: 305 }), (n, e) => {
        const x = Number(`${n}5e${e}`);
        return plainNumber(x) === direct(x) && plainNumber(-x) === direct(-x);
      }),
      { numRuns: 20_000 },
    );
  });
});

describe("modelled shares in sentences", () => {
  // a display floor of 1e-8 (1e-6 percent; common practice): the far tail of a law is not read to three digits
  it("below the floor read 'less than 1e-6%'; at and above it, and 0, as percent writes them", () => {
    expect(sharePercent(4e-21)).toBe("less than 1e-6%");
    expect(sharePercent(9.99e-9)).toBe("less than 1e-6%");
    expect(sharePercent(Number.MIN_VALUE)).toBe("less than 1e-6%");
    expect(sharePercent(1e-8)).toBe("1e-6%");
    expect(sharePercent(2.5e-7)).toBe(percent(2.5e-7));
    expect(sharePercent(0.0278)).toBe("2.78%");
    expect(sharePercent(0)).toBe("0%");
    expect(tinyShare(1e-8)).toBeUndefined();
    expect(tinyShare(0)).toBeUndefined();
    expect(tinyShare(7e-10)).toBe("less than 1e-6%");
  });
});

describe("other wording", () => {
  it("a per-step probability below 1e-12, the integration's absolute resolution (README, Estimates), is given only as that bound", () => {
    expect(probabilityWords(6.75e-130)).toBe("less than 1e-12");
    expect(probabilityWords(9.96e-14)).toBe("less than 1e-12");
    expect(probabilityWords(1e-12)).toBe("1e-12");
    expect(probabilityWords(4.72e-5)).toBe("4.72e-5");
    expect(probabilityWords(0)).toBe("0");
  });

  it("percent, binades and scales", () => {
    expect(percent(0.0123)).toBe("1.23%");
    // a share short of all is never written as 100% (it would read as certainty; common practice)
    expect(percent(0.9999950632426285)).toBe("more than 99.9%");
    expect(percent(0.9994)).toBe("99.9%");
    expect(percent(1)).toBe("100%");
    expect(binades(3.24)).toBe("3.2 binades");
    expect(binades(1)).toBe("1.0 binade");
    expect(scaleWords(131072)).toBe("2^17");
    expect(scaleWords(3)).toBe("3");
  });
});

function nextUp(x: number): number {
  const view = new DataView(new ArrayBuffer(8));
  view.setFloat64(0, x);
  const bits = view.getBigUint64(0);
  view.setBigUint64(0, x >= 0 ? bits + 1n : bits - 1n);
  return view.getFloat64(0);
}

function nextDown(x: number): number {
  return -nextUp(-x);
}

describe("distinctNumbers", () => {
  it("adds significant digits until two different numbers read differently, up to six", () => {
    // √(65520/256) = 15.998046875 (binary16's overflow threshold 65520, IEEE 754-2019 Table 3.5 with RNE) against 16
    expect(distinctNumbers(Math.sqrt(65520 / 256), 16)).toEqual(["15.998", "16"]);
    expect(distinctNumbers(Math.sqrt(65520 / 256), 16.04)).toEqual(["16", "16.04"]);
    expect(distinctNumbers(1.2341e-7, 1.2344e-7)).toEqual(["1.2341e-7", "1.2344e-7"]);
    // numbers that already differ, or are equal, keep three digits; past six digits nothing more is added
    expect(distinctNumbers(0.707, 0.984)).toEqual(["0.707", "0.984"]);
    expect(distinctNumbers(4, 4)).toEqual(["4", "4"]);
    expect(distinctNumbers(1, 1 + 1e-9)).toEqual(["1", "1"]);
  });

  it("writes more digits as plainNumber writes three: toPrecision's digits, e-notation outside [1e-3, 1e6)", () => {
    // ECMA-262 §21.1.3.5 (toPrecision) and §21.1.3.2 (toExponential) give the digits
    expect(numberInDigits(15.998046875, 5)).toBe("15.998");
    expect(numberInDigits(2.4414e-4, 4)).toBe("2.441e-4");
    expect(numberInDigits(1234567, 4)).toBe("1.235e6");
    expect(numberInDigits(0.5, 3)).toBe(plainNumber(0.5));
  });
});

describe("limitNumber", () => {
  it("writes a whole-number limit in full: binary16's overflow threshold 65520 (IEEE 754-2019 Table 3.5 with RNE), not 65500", () => {
    expect(limitNumber(65520)).toBe("65520");
    expect(limitNumber(464)).toBe("464");
    expect(limitNumber(15.998046875)).toBe(plainNumber(15.998046875));
    expect(limitNumber(3.3961775292304601e38)).toBe("3.4e38");
  });
});

describe("Words", () => {
  // the words made for each key directly (ECMA-262 template literals): what the memo must give back for that key
  const made = (format: string, terms: number, extra: number): string => ` accumulates ${terms} terms in ${format} (${extra})`;

  it("gives back the words of the keys asked, whichever of the keys kept in any order (random sequences of three keys)", () => {
    fc.assert(
      fc.property(fc.array(fc.tuple(fc.constantFrom("binary16", "binary32"), fc.constantFrom(32, 256, 1024), fc.constantFrom(0.01, 0.05)), { maxLength: 40 }), (asks) => {
        const words = new Words();
        for (const [format, terms, extra] of asks) {
          if (!words.holds(format, "", "", terms, 0, 0) || words.extra !== extra) {
            words.keep(format, "", "", terms, 0, 0, made(format, terms, extra));
            words.extra = extra;
          }
          expect(words.text).toBe(made(format, terms, extra));
          expect(words.extra).toBe(extra);
        }
      }),
    );
  });

  it("keeps two kinds that alternate without making them anew, and never holds a NaN key", () => {
    const words = new Words();
    let kept = 0;
    for (let i = 0; i < 10; i++) {
      const terms = i % 2 === 0 ? 32 : 256;
      if (!words.holds("binary32", "", "", terms, 0, 0)) {
        words.keep("binary32", "", "", terms, 0, 0, made("binary32", terms, 0));
        kept++;
      }
      expect(words.text).toBe(made("binary32", terms, 0));
    }
    expect(kept).toBe(2);
    words.keep("binary32", "", "", Number.NaN, 0, 0, "nan");
    expect(words.holds("binary32", "", "", Number.NaN, 0, 0)).toBe(false);
  });

  it("gives back words kept as pieces as it does words kept whole (random sequences, either way of keeping)", () => {
    fc.assert(
      fc.property(fc.array(fc.tuple(fc.constantFrom("binary16", "binary32"), fc.constantFrom(32, 256), fc.boolean()), { maxLength: 40 }), (asks) => {
        const words = new Words();
        for (const [format, terms, pieces] of asks) {
          if (!words.holds(format, "", "", terms, 0, 0)) {
            if (pieces) words.keepPieces(format, "", "", terms, 0, 0, " accumulates " + String(terms) + " terms in " + format + " (0)");
            else words.keep(format, "", "", terms, 0, 0, made(format, terms, 0));
          }
          expect(words.text).toBe(made(format, terms, 0));
        }
      }),
    );
  });
});
