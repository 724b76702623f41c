// A format's name where its record belongs is the mistake a JavaScript caller of the library makes most (the command
// line takes names): every entry point says so by a TypeError naming the value (README: library functions throw
// TypeError/RangeError for bad arguments), instead of "Invalid value used as weak map key" from deep inside.
import { describe, expect, test } from "vitest";
import * as api from "../../src/index.js";

const RECORD = /^expected a format record such as FORMATS\.binary16, got "bfloat16" \(the record of a name is FORMATS\["bfloat16"\], or getFormat\(name\)\)$/;
const asFormat = "bfloat16" as unknown as api.Format;

describe("a format's name given for its record", () => {
  test.each([
    ["roundTo", () => api.roundTo(asFormat, 1.5)],
    ["classify", () => api.classify(asFormat, 1.5)],
    ["roundArray", () => api.roundArray(asFormat, Float64Array.of(1.5))],
    ["roundArrayInPlace", () => api.roundArrayInPlace(asFormat, Float64Array.of(1.5))],
    ["countClasses", () => api.countClasses(asFormat, Float64Array.of(1.5))],
    ["decodeArray", () => api.decodeArray(asFormat, Uint16Array.of(0x3f80))],
    ["encodeArray", () => api.encodeArray(asFormat, Float64Array.of(1.5))],
  ])("%s throws a TypeError naming it", (_, call) => {
    expect(call).toThrow(TypeError);
    expect(call).toThrow(RECORD);
  });

  test("the record itself still works (bfloat16 holds 1.5 exactly: 8 significant bits)", () => {
    expect(api.roundTo(api.FORMATS.bfloat16, 1.5)).toBe(1.5);
    expect(api.roundTo(api.getFormat("bfloat16"), 1.5)).toBe(1.5);
  });
});
