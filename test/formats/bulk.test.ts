import { f16round } from "@petamoriken/float16";
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import {
  BINADE_OFFSET,
  FORMATS,
  FORMAT_NAMES,
  binadeHistogram,
  classify,
  countClasses,
  emptyClassCounts,
  encode,
  encodeArray,
  isFlushed,
  roundArray,
  roundArrayInPlace,
  roundTo,
  type Format,
  type RoundOptions,
} from "../../src/formats/index.js";
import { decompose, seeded, stepBinary64 } from "./reference.js";

function same(a: number, b: number): boolean {
  return Object.is(a, b) || (Number.isNaN(a) && Number.isNaN(b));
}

/** floor(log2|x|) by exact integer arithmetic (independent of the kernels' exponent-field reads) */
function exactBinade(x: number): number {
  const { significand, exponent } = decompose(x);
  return significand.toString(2).length - 1 + exponent;
}

/** A mix of values around every boundary of every format, plus specials, both signs. */
function mixedSample(length: number, seed: number): Float64Array {
  const random = seeded(seed);
  const out = new Float64Array(length);
  const anchors: number[] = [0, Infinity, NaN, Number.MIN_VALUE, Number.MAX_VALUE];
  for (const name of FORMAT_NAMES) {
    const f = FORMATS[name];
    anchors.push(f.maxFinite, f.overflowThreshold, f.minNormal, f.minSubnormal, f.flushBound, f.maxSubnormal, 1 + f.epsilon / 2);
  }
  for (let i = 0; i < length; i++) {
    const kind = random();
    let v: number;
    if (kind < 0.4) {
      const anchor = anchors[Math.floor(random() * anchors.length)] as number;
      v = stepBinary64(anchor, Math.floor(random() * 7) - 3);
    } else {
      // log-uniform over the whole binary64 range
      v = 2 ** (random() * 2100 - 1075) * (1 + random());
    }
    out[i] = random() < 0.5 ? -v : v;
  }
  return out;
}

const OPTION_SETS: RoundOptions[] = [
  {},
  { overflow: "saturate" },
  { overflow: "infinity-or-nan" },
  { flushSubnormals: true },
  { mode: "toward-zero" },
];

describe("roundArrayInPlace(format, data)", () => {
  it("gives the same result as roundTo element by element, for Float64Array data, every format and option set", () => {
    const sample = mixedSample(20000, 7);
    for (const name of FORMAT_NAMES) {
      const f = FORMATS[name];
      for (const options of OPTION_SETS) {
        const data = sample.slice();
        roundArrayInPlace(f, data, options);
        for (let i = 0; i < sample.length; i++) {
          const expected = roundTo(f, sample[i] as number, options);
          if (!same(data[i] as number, expected)) {
            throw new Error(`${name} ${JSON.stringify(options)} x=${sample[i]}: ${data[i]} vs ${expected}`);
          }
        }
      }
    }
  });

  it("gives the same result as roundTo for Float32Array data (binary32 inputs rounded once, directly)", () => {
    const sample = Float32Array.from(mixedSample(20000, 11));
    for (const name of FORMAT_NAMES) {
      const f = FORMATS[name];
      for (const options of OPTION_SETS) {
        const data = sample.slice();
        roundArrayInPlace(f, data, options);
        for (let i = 0; i < sample.length; i++) {
          const expected = Math.fround(roundTo(f, sample[i] as number, options));
          if (!same(data[i] as number, expected)) {
            throw new Error(`${name} ${JSON.stringify(options)} x=${sample[i]}: ${data[i]} vs ${expected}`);
          }
        }
      }
    }
  });

  it("binary16 on Float64Array equals f16round from @petamoriken/float16 on every element", () => {
    const sample = mixedSample(50000, 3);
    const data = roundArray(FORMATS.binary16, sample);
    for (let i = 0; i < sample.length; i++) {
      if (!same(data[i] as number, f16round(sample[i] as number))) throw new Error(`x=${sample[i]}`);
    }
  });

  it("works on views at an offset into a larger buffer and leaves the rest alone", () => {
    const buffer = new Float64Array([1.0001, 1.0001, 1.0001, 1.0001]);
    const view = new Float64Array(buffer.buffer, 8, 2);
    roundArrayInPlace(FORMATS.bfloat16, view);
    expect(Array.from(buffer)).toEqual([1.0001, 1, 1, 1.0001]);
  });

  it("stochastic mode is reproducible under a seed and matches the scalar path draw for draw", () => {
    const sample = mixedSample(2000, 5);
    const a = roundArray(FORMATS.bfloat16, sample, { mode: "stochastic", random: seeded(9) });
    const random = seeded(9);
    for (let i = 0; i < sample.length; i++) {
      expect(same(a[i] as number, roundTo(FORMATS.bfloat16, sample[i] as number, { mode: "stochastic", random }))).toBe(true);
    }
  });
});

function countByScalar(f: Format, data: Float64Array | Float32Array, options: RoundOptions) {
  const c = { total: 0, zeros: 0, flushed: 0, subnormal: 0, normal: 0, overflowed: 0, saturated: 0, infinities: 0, nans: 0, exact: 0 };
  for (const x of data) {
    c.total++;
    if (Number.isNaN(x)) c.nans++;
    else if (!Number.isFinite(x)) c.infinities++;
    else if (x === 0) {
      c.zeros++;
      c.exact++;
    } else {
      const cls = classify(f, x, options);
      if (cls === "zero") {
        if (!isFlushed(f, x, options)) throw new Error(`${f.name}: ${x} is zero but not flushed`);
        c.flushed++;
      } else if (cls === "subnormal") c.subnormal++;
      else if (cls === "normal") c.normal++;
      else if (cls === "saturated") c.saturated++;
      else c.overflowed++;
      if (roundTo(f, x, options) === x) c.exact++;
    }
  }
  return c;
}

describe("countClasses(format, data)", () => {
  it("agrees with classify element by element (Float64Array and Float32Array, every format and option set)", () => {
    const sample64 = mixedSample(6000, 21);
    const sample32 = Float32Array.from(sample64);
    for (const name of FORMAT_NAMES) {
      const f = FORMATS[name];
      for (const options of OPTION_SETS) {
        for (const data of [sample64, sample32]) {
          const counts = countClasses(f, data, options);
          const expected = countByScalar(f, data, options);
          const { binades, maxAbs, minNonzeroAbs, ...plain } = counts;
          expect(plain, `${name} ${JSON.stringify(options)} ${data.constructor.name}`).toEqual(expected);
          const parts = plain.zeros + plain.flushed + plain.subnormal + plain.normal + plain.overflowed + plain.saturated + plain.infinities + plain.nans;
          expect(parts).toBe(plain.total);
          expect(binades.reduce((s, v) => s + v, 0)).toBe(plain.total - plain.zeros - plain.infinities - plain.nans);
          void maxAbs;
          void minNonzeroAbs;
        }
      }
    }
  });

  it("counts the known cases: 1e-8 flushes and 7e4 overflows in binary16; 465 saturates in e4m3 (SCIENCE.md §1.1, §1.3)", () => {
    const counts = countClasses(FORMATS.binary16, Float64Array.of(0, 1e-8, 1, 7e4, NaN, -Infinity, 1e-6));
    expect(counts).toMatchObject({ total: 7, zeros: 1, flushed: 1, subnormal: 1, normal: 1, overflowed: 1, infinities: 1, nans: 1, exact: 2 });
    expect(counts.maxAbs).toBe(7e4);
    expect(counts.minNonzeroAbs).toBe(1e-8);
    const e4 = countClasses(FORMATS.e4m3, Float64Array.of(464, 465));
    expect(e4).toMatchObject({ normal: 1, saturated: 1, overflowed: 0 });
    const e4nan = countClasses(FORMATS.e4m3, Float64Array.of(464, 465), { overflow: "infinity-or-nan" });
    expect(e4nan).toMatchObject({ normal: 1, saturated: 0, overflowed: 1 });
  });

  it("accumulates over chunks to the same totals as one pass", () => {
    const sample = mixedSample(10000, 4);
    const whole = countClasses(FORMATS.bfloat16, sample);
    const chunked = emptyClassCounts();
    for (let start = 0; start < sample.length; start += 777) {
      countClasses(FORMATS.bfloat16, sample.subarray(start, start + 777), {}, chunked);
    }
    expect(chunked).toEqual(whole);
  });
});

describe("binadeHistogram(data)", () => {
  it("bins floor(log2|x|) exactly, binary64 subnormals and powers of two included (exact integer reference)", () => {
    fc.assert(
      fc.property(fc.array(fc.double(), { maxLength: 50 }), (values) => {
        const data = Float64Array.from(values);
        const h = binadeHistogram(data);
        const expected = new Map<number, number>();
        let zeros = 0, infinities = 0, nans = 0;
        for (const x of values) {
          if (Number.isNaN(x)) nans++;
          else if (!Number.isFinite(x)) infinities++;
          else if (x === 0) zeros++;
          else expected.set(exactBinade(x), (expected.get(exactBinade(x)) ?? 0) + 1);
        }
        for (const [e, n] of expected) if (h.counts[e + BINADE_OFFSET] !== n) return false;
        const total = h.counts.reduce((s, v) => s + v, 0);
        return total === values.length - zeros - infinities - nans && h.zeros === zeros && h.infinities === infinities && h.nans === nans;
      }),
    );
    const h = binadeHistogram(Float64Array.of(Number.MIN_VALUE, Number.MAX_VALUE, 1, 3, 0.5));
    expect(h.counts[-1074 + BINADE_OFFSET]).toBe(1);
    expect(h.counts[1023 + BINADE_OFFSET]).toBe(1);
    expect(h.counts[0 + BINADE_OFFSET]).toBe(1);
    expect(h.counts[1 + BINADE_OFFSET]).toBe(1);
    expect(h.counts[-1 + BINADE_OFFSET]).toBe(1);
  });

  it("bins Float32Array data, binary32 subnormals included, the same as their binary64 values", () => {
    const data = Float32Array.of(2 ** -149, 2 ** -127, 1.5 * 2 ** -130, 2 ** -126, 3.4e38, -0, 1);
    const h32 = binadeHistogram(data);
    const h64 = binadeHistogram(Float64Array.from(data));
    expect(Array.from(h32.counts)).toEqual(Array.from(h64.counts));
    expect(h32.counts[-149 + BINADE_OFFSET]).toBe(1);
    expect(h32.counts[-130 + BINADE_OFFSET]).toBe(1);
    expect(h32.zeros).toBe(1);
  });
});

describe("encodeArray(format, data)", () => {
  it("writes the same codes as encode element by element", () => {
    const sample = mixedSample(5000, 8);
    for (const name of ["binary16", "bfloat16", "e4m3", "e5m2"] as const) {
      const f = FORMATS[name];
      for (const options of OPTION_SETS) {
        const codes = encodeArray(f, sample, options);
        for (let i = 0; i < sample.length; i++) {
          const expected = encode(f, sample[i] as number, options);
          if (codes[i] !== expected) throw new Error(`${name} x=${sample[i]}: ${codes[i]} vs ${expected}`);
        }
      }
    }
  });
});
