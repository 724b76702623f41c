import { describe, expect, test } from "vitest";
import fc from "fast-check";
import { csvField, csvRecord, renderCsv } from "../../src/report/csv.js";
import { parseRfc4180 } from "./rfc4180.js";

describe("csvField (RFC 4180 §2 rules 5-7)", () => {
  test("leaves plain text alone", () => {
    expect(csvField("fc1.out")).toBe("fc1.out");
    expect(csvField(3.2e-5)).toBe("0.000032");
    expect(csvField(true)).toBe("true");
    expect(csvField(null)).toBe("");
    expect(csvField(undefined)).toBe("");
  });
  test("quotes a field with a comma, a quote, CR or LF and doubles inner quotes", () => {
    expect(csvField("a,b")).toBe('"a,b"');
    expect(csvField('say "hi"')).toBe('"say ""hi"""');
    expect(csvField("line\nbreak")).toBe('"line\nbreak"');
    expect(csvField("cr\rhere")).toBe('"cr\rhere"');
  });
});

describe("renderCsv", () => {
  test("ends every record with CRLF (RFC 4180 §2 rule 1)", () => {
    expect(renderCsv(["spec", "verdict"], [["a", "fits"], ["b,c", "fails"]])).toBe(
      'spec,verdict\r\na,fits\r\n"b,c",fails\r\n',
    );
  });
  test("refuses a row whose length differs from the header (RFC 4180 §2 rule 4)", () => {
    expect(() => renderCsv(["a", "b"], [["x"]])).toThrow(RangeError);
  });
  test("any text survives a round trip through a strict RFC 4180 reader", () => {
    fc.assert(
      fc.property(
        fc.array(fc.tuple(fc.string(), fc.string(), fc.string({ unit: fc.constantFrom(",", '"', "\r", "\n", "a", " ") })), {
          maxLength: 20,
        }),
        (rows) => {
          const text = renderCsv(["one", "two", "three"], rows);
          expect(parseRfc4180(text)).toEqual([["one", "two", "three"], ...rows.map((row) => [...row])]);
        },
      ),
    );
  });
  test("csvRecord of an empty record is a single CRLF", () => {
    expect(csvRecord([])).toBe("\r\n");
  });
});

describe("parseRfc4180 (the test reader itself)", () => {
  test("rejects malformed input", () => {
    expect(() => parseRfc4180('a"b\r\n')).toThrow(SyntaxError);
    expect(() => parseRfc4180('"open\r\n')).toThrow(SyntaxError);
    expect(() => parseRfc4180('"a"b\r\n')).toThrow(SyntaxError);
    expect(() => parseRfc4180("a\nb\n")).toThrow(SyntaxError);
    expect(() => parseRfc4180("a,b\r\nc\r\n")).toThrow(SyntaxError);
  });
});
