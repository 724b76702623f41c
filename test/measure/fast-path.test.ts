/**
 * The binary32 counting pass (src/measure/fast32.ts, driven by TensorAccumulator) against a plain per-element
 * reference, on arrays crowded with values at and one binary32 ulp either side of every class boundary of the four
 * narrow formats. The reference rounds each element with the format model's roundTo, and binary16 again with
 * @petamoriken/float16's f16round; binades come from the binary32 bit fields, not from the code under test.
 */
import { describe, expect, it } from "vitest";
import fc from "fast-check";
import { FORMATS, roundTo, type FormatName } from "../../src/formats/index.js";
import { bucketPlan, castTarget, ChannelAccumulator, TensorAccumulator, type CastTarget } from "../../src/measure/index.js";
import { f16roundCounts } from "./f16-reference.js";

/** Class boundaries of each target, as published (not read from the format model). */
const THRESHOLDS: Record<"binary16" | "bfloat16" | "e4m3" | "e5m2", { halfMinSubnormal: number; minNormal: number; overflow: number }> = {
  // IEEE 754-2019 binary16 (p = 11, emin = −14, emax = 15): smallest subnormal 2^-24; RNE overflows from 65520 = (2 − 2^-11)·2^15
  binary16: { halfMinSubnormal: 2 ** -25, minNormal: 2 ** -14, overflow: 65520 },
  // Intel, bfloat16 – Hardware Numerics Definition (2018): binary32's exponent range with p = 8; smallest subnormal
  // 2^-133; RNE overflows from (2 − 2^-8)·2^127
  bfloat16: { halfMinSubnormal: 2 ** -134, minNormal: 2 ** -126, overflow: (2 - 2 ** -8) * 2 ** 127 },
  // OCP 8-bit floating point specification (OFP8) Rev. 1.0, 2023, Table 1: E4M3 smallest subnormal 2^-9, smallest
  // normal 2^-6, largest 448; 464 rounds to 448 (tie to even), anything above saturates or becomes NaN
  e4m3: { halfMinSubnormal: 2 ** -10, minNormal: 2 ** -6, overflow: 464 },
  // OFP8 Rev. 1.0, Table 1: E5M2 smallest subnormal 2^-16, smallest normal 2^-14, largest 57344; RNE overflows
  // from 61440 = (2 − 2^-3)·2^15
  e5m2: { halfMinSubnormal: 2 ** -17, minNormal: 2 ** -14, overflow: 61440 },
};
const NAMES = Object.keys(THRESHOLDS) as (keyof typeof THRESHOLDS)[];

const bitsOf = (x: number): number => new Int32Array(Float32Array.of(x).buffer)[0]!;
const floatOf = (bits: number): number => new Float32Array(Int32Array.of(bits).buffer)[0]!;

/** Each threshold in binary32 and its neighbours up to two binary32 ulps away, both signs. */
function boundaryValues(): number[] {
  const out: number[] = [];
  for (const name of NAMES) {
    for (const edge of Object.values(THRESHOLDS[name])) {
      // every threshold is a binary32 value (IEEE 754-2019 binary32 has p = 24, emin = −126 with subnormals to 2^-149)
      expect(Math.fround(edge)).toBe(edge);
      for (let step = -2; step <= 2; step++) {
        const v = floatOf(bitsOf(edge) + step);
        out.push(v, -v);
      }
    }
  }
  return out;
}

/** Zeros, binary32 subnormals (smallest, in between, largest), infinities, NaNs with several payloads (IEEE 754-2019). */
const SPECIALS = [
  0,
  -0,
  2 ** -149,
  -(2 ** -149),
  3 * 2 ** -149,
  2 ** -140,
  1.5 * 2 ** -127,
  2 ** -126 - 2 ** -149,
  -(2 ** -126 - 2 ** -149),
  Infinity,
  -Infinity,
  floatOf(0x7fc00000),
  floatOf(0x7f800001),
  floatOf(-1),
  floatOf(0x7fbfffff),
];

const TARGETS: CastTarget[] = NAMES.map((n) => castTarget(n));
const SATURATING: CastTarget[] = NAMES.map((n) => castTarget(n, { overflow: "saturate" }));
const FLUSHING: CastTarget[] = NAMES.map((n) => castTarget(n, { flushSubnormals: true }));

/** The counts CastResult defines, element by element with roundTo. */
function reference(target: CastTarget, values: Float32Array) {
  const f = FORMATS[target.format as FormatName];
  const out = { flushed: 0, subnormal: 0, saturated: 0, overflowed: 0, nonFiniteInFile: 0 };
  for (const x of values) {
    const r = roundTo(f, x, { overflow: target.overflow });
    // non-finite in the file: counted apart whatever the cast makes of it (README, scan), not as the cast's overflow or clip
    if (!Number.isFinite(x)) out.nonFiniteInFile++;
    else if (!Number.isFinite(r)) out.overflowed++;
    else if (!Number.isFinite(roundTo(f, x, { overflow: "infinity-or-nan" }))) out.saturated++;
    else if (x !== 0 && r === 0) out.flushed++;
    else if (r !== 0 && Math.abs(r) < f.minNormal) {
      if (target.flushSubnormals) out.flushed++;
      else out.subnormal++;
    }
  }
  return out;
}

/** binade of a nonzero finite binary32 value from its bit fields: exponent − 127, or for subnormals from the top set bit. */
function binade32(x: number): number {
  const u = bitsOf(x) & 0x7fffffff;
  const field = u >>> 23;
  return field > 0 ? field - 127 : 31 - Math.clz32(u) - 149;
}

/** Feed `values` in chunks of the given lengths (cycled), with per-channel figures of a [rows, columns] matrix when asked. */
function measure(values: Float32Array, targets: readonly CastTarget[], chunks: readonly number[], columns?: number) {
  const accumulator = new TensorAccumulator(bucketPlan(32, targets));
  const channels = columns ? new ChannelAccumulator([values.length / columns, columns], "C") : undefined;
  for (let i = 0, c = 0; i < values.length; c++) {
    const length = chunks[c % chunks.length]!;
    accumulator.add(values.subarray(i, i + length), channels, i);
    i += length;
  }
  return { tally: accumulator.tally(), channels: channels?.result() };
}

function expectMatchesReference(values: Float32Array, targets: readonly CastTarget[], chunks: readonly number[], columns?: number): void {
  const { tally, channels } = measure(values, targets, chunks, columns);
  targets.forEach((target, t) => {
    expect({ format: target.format, ...tally.casts[t] }).toEqual({ format: target.format, ...reference(target, values) });
  });
  const binades = new Map<number, number>();
  let zeros = 0;
  let infinities = 0;
  let nans = 0;
  let maxAbs = -1;
  let minNonzero = Infinity;
  let sum = 0;
  for (const x of values) {
    if (Number.isNaN(x)) nans++;
    else if (!Number.isFinite(x)) infinities++;
    else {
      sum += x * x;
      maxAbs = Math.max(maxAbs, Math.abs(x));
      if (x === 0) zeros++;
      else {
        minNonzero = Math.min(minNonzero, Math.abs(x));
        binades.set(binade32(x), (binades.get(binade32(x)) ?? 0) + 1);
      }
    }
  }
  expect([tally.zeros, tally.infinities, tally.nans]).toEqual([zeros, infinities, nans]);
  expect(new Map(tally.binades)).toEqual(binades);
  expect(tally.maxAbs).toBe(maxAbs < 0 ? null : maxAbs);
  expect(tally.minNonzero).toBe(minNonzero === Infinity ? null : minNonzero);
  expect(Math.abs(tally.sumOfSquares - sum)).toBeLessThanOrEqual(sum * 1e-12);
  if (columns && channels) {
    // the same values through the channel accumulator alone: the figures must not depend on the pass that fed them
    const alone = new ChannelAccumulator([values.length / columns, columns], "C");
    alone.add(values, 0);
    const expected = alone.result();
    channels.forEach((axis, a) => {
      const want = expected[a]!;
      expect([axis.axis, axis.loudest, axis.maxOverRmsChannel]).toEqual([want.axis, want.loudest, want.maxOverRmsChannel]);
      for (const key of ["medianRms", "loudestRms", "rmsRatio", "maxOverRms"] as const) {
        const got = axis[key];
        const ref = want[key];
        if (ref === null || got === null || !Number.isFinite(ref)) expect(got).toBe(ref);
        else expect(Math.abs(got - ref)).toBeLessThanOrEqual(Math.abs(ref) * 1e-12);
      }
    });
  }
}

const edges = boundaryValues();
/** elements: mostly boundary values and specials, some arbitrary binary32 patterns (every NaN payload included) */
const element = fc.oneof(
  { weight: 4, arbitrary: fc.constantFrom(...edges) },
  { weight: 2, arbitrary: fc.constantFrom(...SPECIALS) },
  { weight: 2, arbitrary: fc.integer({ min: -(2 ** 31), max: 2 ** 31 - 1 }).map(floatOf) },
  { weight: 2, arbitrary: fc.double({ min: -4, max: 4, noNaN: true }).map(Math.fround) },
);

describe("binary32 counting pass equals per-element rounding at every class boundary", () => {
  it("the boundaries themselves, both overflow modes and subnormals counted as flushed (IEEE 754-2019, OCP OFP8)", () => {
    const values = Float32Array.from([...edges, ...SPECIALS]);
    for (const targets of [TARGETS, SATURATING, FLUSHING]) {
      expectMatchesReference(values, targets, [values.length]);
      expectMatchesReference(values, targets, [1, 2, 3, 5, 7]);
    }
  });

  it("fast-check: random arrays around the boundaries, cut into random chunks, with and without channel figures", () => {
    fc.assert(
      fc.property(
        fc.array(element, { minLength: 1, maxLength: 1000, size: "max" }),
        fc.array(fc.integer({ min: 1, max: 700 }), { minLength: 1, maxLength: 6 }),
        fc.constantFrom(0, 1, 3, 64, 100),
        fc.constantFrom(TARGETS, SATURATING, FLUSHING),
        (list, chunks, columns, targets) => {
          // a matrix needs whole rows: trim to a multiple of the row length (rows of 64 and 100 take the fused pass)
          const length = columns > 0 ? list.length - (list.length % columns) : list.length;
          if (length === 0) return;
          expectMatchesReference(Float32Array.from(list.slice(0, length)), targets, chunks, columns || undefined);
        },
      ),
      // no shrinking: a failing array of a thousand elements would take minutes to shrink; the seed replays it
      { numRuns: 80, endOnFailure: true },
    );
  });

  it("binary16 counts agree with @petamoriken/float16 (f16round) around its boundaries", () => {
    const values = Float32Array.from(edges.filter((x) => Math.abs(x) < 2 ** 20 && Math.abs(x) > 2 ** -30));
    const { tally } = measure(values, [castTarget("binary16")], [values.length]);
    const reference = f16roundCounts(values);
    expect(tally.casts[0]).toEqual(reference);
    expect(reference.flushed * reference.subnormal * reference.overflowed).toBeGreaterThan(0);
  });

  it("the smallest and largest magnitudes are found in each of the four lanes of a step, and in a row's tail", () => {
    for (const columns of [undefined, 64, 102]) {
      for (let at = 0; at < 8; at++) {
        const values = new Float32Array(408);
        for (let i = 0; i < values.length; i++) values[i] = Math.fround(0.5 + (i % 17) / 64);
        values[200 + at] = -3e-6;
        values[100 + at] = 7;
        // columns 102: positions 204 and 205 are the two elements after a row's last whole step of four
        expectMatchesReference(values, TARGETS, [values.length], columns);
        expectMatchesReference(values, TARGETS, [150, 258], columns);
      }
    }
  });

  it("a long chunk of ordinary values with a few boundary values, zeros and a NaN: each is found", () => {
    const values = new Float32Array(30_000);
    for (let i = 0; i < values.length; i++) values[i] = Math.fround(Math.sin(i) * 0.05);
    const plant = [...edges, 0, -0, NaN, Infinity, 2 ** -149];
    plant.forEach((x, k) => (values[(k * 7919 + 13) % values.length] = x));
    // non-finite values in each of the four lanes of a step of the counting loop, and in a row's last, shorter step
    [Infinity, NaN, -Infinity, NaN, 0, Infinity].forEach((x, k) => (values[4000 + k] = x));
    values[4999] = NaN;
    expectMatchesReference(values, TARGETS, [values.length], 1000);
    expectMatchesReference(values, SATURATING, [16384, 13627]);
  });
});

describe("the WebAssembly counting pass: counters held by one accumulator at a time, chunks cut anywhere in a run", () => {
  it("fast-check: two accumulators fed in turn (each takes the counters from the other) match the reference", () => {
    fc.assert(
      fc.property(
        fc.array(element, { minLength: 1, maxLength: 600, size: "max" }),
        fc.array(element, { minLength: 1, maxLength: 600, size: "max" }),
        fc.array(fc.integer({ min: 1, max: 300 }), { minLength: 1, maxLength: 4 }),
        fc.constantFrom(TARGETS, SATURATING),
        (first, second, chunks, targets) => {
          const arrays = [Float32Array.from(first), Float32Array.from(second)];
          // the second uses another target list, so the counters at rest differ between the two
          const plans = [bucketPlan(32, targets), bucketPlan(32, FLUSHING)];
          const accumulators = plans.map((plan) => new TensorAccumulator(plan));
          const at = [0, 0];
          for (let c = 0; at[0]! < arrays[0]!.length || at[1]! < arrays[1]!.length; c++) {
            for (const k of [0, 1]) {
              const length = chunks[(c + k) % chunks.length]!;
              accumulators[k]!.add(arrays[k]!.subarray(at[k], at[k]! + length));
              at[k] = Math.min(arrays[k]!.length, at[k]! + length);
            }
          }
          // an accumulator tallied while the other holds the counters, then one started afresh after both
          const tallies = accumulators.map((a) => a.tally());
          [targets, FLUSHING].forEach((list, k) => {
            list.forEach((target, t) => expect(tallies[k]!.casts[t]).toEqual(reference(target, arrays[k]!)));
            const fresh = measure(arrays[k]!, list, [arrays[k]!.length]).tally;
            expect([tallies[k]!.zeros, tallies[k]!.nans, tallies[k]!.binades]).toEqual([fresh.zeros, fresh.nans, fresh.binades]);
          });
        },
      ),
      { numRuns: 40, endOnFailure: true },
    );
  });

  it("rows longer than a chunk, and a vector: chunks starting inside a run and running past its end", () => {
    const values = new Float32Array(6000);
    for (let i = 0; i < values.length; i++) values[i] = Math.fround(Math.cos(i * 0.37) * 2 ** ((i % 40) - 20));
    edges.forEach((x, k) => (values[(k * 131 + 7) % values.length] = x));
    values[2999] = 70000;
    for (const columns of [1500, 2000, 6000]) {
      expectMatchesReference(values, TARGETS, [1000, 777, 1999, 3], columns);
      expectMatchesReference(values, FLUSHING, [4001, 5], columns);
    }
  });
});
