import { describe, expect, it } from "vitest";
import { FORMATS, describeRounding } from "../../src/formats/index.js";

describe("describeRounding(format, x)", () => {
  it("gives the rounded value, its bit pattern, class and errors (SCIENCE.md §1.1: 65519 → 65504 in binary16)", () => {
    expect(describeRounding(FORMATS.binary16, 65519)).toEqual({
      format: "binary16", value: 65519, rounded: 65504, bits: "0x7bff", class: "normal", flushed: false,
      absoluteError: 15, relativeError: 15 / 65519,
    });
  });

  it("reports overflow, flushing and NaN (OCP 8-bit specification: e4m3 465 → NaN non-saturating)", () => {
    expect(describeRounding(FORMATS.binary16, 65520)).toMatchObject({ rounded: Infinity, bits: "0x7c00", class: "infinite", absoluteError: Infinity, relativeError: Infinity });
    expect(describeRounding(FORMATS.binary16, 1e-8)).toMatchObject({ rounded: 0, bits: "0x0000", flushed: true, relativeError: 1 });
    const nan = describeRounding(FORMATS.e4m3, 465, { overflow: "infinity-or-nan" });
    expect(nan).toMatchObject({ bits: "0x7f", class: "nan" });
    expect(nan.absoluteError).toBeNaN();
    expect(describeRounding(FORMATS.binary64, 1).bits).toBe("0x3ff0000000000000");
    expect(describeRounding(FORMATS.tf32, -0).bits).toBe("0x40000");
  });

  it("draws once in stochastic mode: the pattern belongs to the value shown", () => {
    let draws = 0;
    const random = () => {
      draws++;
      return 0.1; // below the 0.25 distance to the value under x, so x rounds up
    };
    const d = describeRounding(FORMATS.bfloat16, 1 + 2 ** -9, { mode: "stochastic", random });
    expect(draws).toBe(1);
    expect(d.rounded).toBe(1 + 2 ** -7);
    expect(d.bits).toBe("0x3f81");
  });
});
