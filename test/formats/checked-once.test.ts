// The bulk entry points check their format argument once, where they look its kernel tables up (formatTables checks an
// argument when it builds them, and only records have them), not again in each kernel or each block of an encoding.
// The check's mark is reading the record's `precision` (src/formats/round.ts checkFormatRecord): on a warm call, with
// the tables built, no entry point reads it at all for round to nearest; the results stay those of the scalar
// roundTo, element by element.
import { describe, expect, test } from "vitest";
import * as api from "../../src/index.js";

/** A binary16 record that counts how often its `precision` is read (every other field passes through unchanged). */
function countingRecord(): { format: api.Format; reads: () => number } {
  let reads = 0;
  const format = new Proxy(api.FORMATS.binary16, {
    get(target, key, receiver) {
      if (key === "precision") reads += 1;
      return Reflect.get(target, key, receiver) as unknown;
    },
  });
  return { format, reads: () => reads };
}

// three blocks of encodeArray's 4,096-value buffer, values spread over binary16's range and past it
const DATA = Float64Array.from({ length: 3 * 4096 }, (_, i) => (i % 2 === 0 ? 1 : -1) * 2 ** ((i % 48) - 30) * (1 + i / 8192));

describe("a warm bulk call reads no format field the check reads (checked once, when the tables are built)", () => {
  test.each([
    ["roundArray", (f: api.Format) => api.roundArray(f, DATA)],
    ["roundArrayInPlace", (f: api.Format) => api.roundArrayInPlace(f, DATA.slice())],
    ["roundArray of Float32Array data", (f: api.Format) => api.roundArray(f, Float32Array.from(DATA))],
    ["countClasses", (f: api.Format) => api.countClasses(f, DATA)],
    ["encodeArray over three blocks", (f: api.Format) => api.encodeArray(f, DATA)],
  ])("%s", (_, call) => {
    const { format, reads } = countingRecord();
    call(format);
    const before = reads();
    call(format);
    expect(reads() - before).toBe(0);
  });

  test("the results are still the scalar rounding's (binary16, IEEE 754-2019 §4.3.1 ties to even)", () => {
    const { format } = countingRecord();
    const rounded = api.roundArray(format, DATA);
    for (let i = 0; i < DATA.length; i += 97) expect(Object.is(rounded[i], api.roundTo(api.FORMATS.binary16, DATA[i]!))).toBe(true);
    const codes = api.encodeArray(format, DATA) as Uint16Array;
    for (let i = 0; i < DATA.length; i += 97) expect(codes[i]).toBe(api.encode(api.FORMATS.binary16, DATA[i]!));
  });
});
