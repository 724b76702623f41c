/**
 * Per-tensor statistics against element-by-element references: cast counts against the format model's roundTo applied
 * to each element, binade counts against exact log2, and binary16 also against @petamoriken/float16 (an IEEE 754
 * binary16 reference library).
 */
import { describe, expect, it } from "vitest";
import fc from "fast-check";
import { FORMATS, FORMAT_NAMES, roundTo, type FormatName, type OverflowMode } from "../../src/formats/index.js";
import {
  bucketPlan,
  castTarget,
  ChannelAccumulator,
  scaleRange,
  TensorAccumulator,
  type CastTarget,
} from "../../src/measure/index.js";
import { f16roundCounts } from "./f16-reference.js";

interface Reference {
  flushed: number;
  subnormal: number;
  saturated: number;
  overflowed: number;
  nonFiniteInFile: number;
}

/** Cast counts by rounding every element with roundTo (the definitions in CastResult). */
function referenceCounts(format: FormatName, values: ArrayLike<number>, overflow: OverflowMode, flushSubnormals = false): Reference {
  const f = FORMATS[format];
  const counts = { flushed: 0, subnormal: 0, saturated: 0, overflowed: 0, nonFiniteInFile: 0 };
  for (let i = 0; i < values.length; i++) {
    const x = values[i]!;
    const r = roundTo(f, x, { overflow });
    // non-finite in the file: counted apart whatever the cast makes of it (README, scan), not as the cast's overflow or clip
    if (!Number.isFinite(x)) counts.nonFiniteInFile++;
    else if (!Number.isFinite(r)) counts.overflowed++;
    else if (!Number.isFinite(roundTo(f, x, { overflow: "infinity-or-nan" }))) counts.saturated++;
    else if (x !== 0 && r === 0) counts.flushed++;
    else if (r !== 0 && Math.abs(r) < f.minNormal) {
      if (flushSubnormals) counts.flushed++;
      else counts.subnormal++;
    }
  }
  return counts;
}

/** Values next to every class boundary of every format (both signs), plus specials and ordinary values. */
function boundaryValues(): number[] {
  const out: number[] = [0, -0, Infinity, -Infinity, NaN, 1, -1, 0.02, 1e-3, 3e-8, 1e-8, 7e4];
  for (const name of FORMAT_NAMES) {
    const f = FORMATS[name];
    const midSubnormal = f.maxSubnormal + f.minSubnormal / 2;
    for (const edge of [f.maxFinite, f.overflowThreshold, f.minNormal, f.minSubnormal, f.flushBound, midSubnormal, f.maxSubnormal]) {
      if (!Number.isFinite(edge)) continue;
      for (const step of [-2, -1, 0, 1, 2]) {
        const v = edge * (1 + step * 2 ** -30);
        out.push(v, -v, Math.fround(v), -Math.fround(v));
      }
    }
  }
  return out;
}

const TARGET_NAMES: FormatName[] = ["binary16", "bfloat16", "e4m3", "e5m2"];

const targetCache = new Map<string, CastTarget[]>();
/** One target list per option set, so the bucket tables (cached per list) are built once. */
function targetsFor(overflow?: OverflowMode, flushSubnormals = false): CastTarget[] {
  const key = `${overflow}/${flushSubnormals}`;
  let targets = targetCache.get(key);
  if (!targets) targetCache.set(key, (targets = TARGET_NAMES.map((name) => castTarget(name, { ...(overflow ? { overflow } : {}), flushSubnormals }))));
  return targets;
}
const single = new Map<FormatName, CastTarget[]>();
function only(name: FormatName): CastTarget[] {
  let targets = single.get(name);
  if (!targets) single.set(name, (targets = [castTarget(name)]));
  return targets;
}
const NONE: CastTarget[] = [];

function tallyOf(values: Float32Array | Float64Array, targets: readonly CastTarget[], chunk = 7) {
  const accumulator = new TensorAccumulator(bucketPlan(values instanceof Float32Array ? 32 : 64, targets));
  for (let i = 0; i < values.length; i += chunk) accumulator.add(values.subarray(i, i + chunk));
  return accumulator.tally();
}

function expectExact(values: Float32Array | Float64Array, overflow?: OverflowMode, flushSubnormals = false): void {
  const targets = targetsFor(overflow, flushSubnormals);
  const tally = tallyOf(values, targets);
  targets.forEach((target, t) => {
    const expected = referenceCounts(target.format as FormatName, values, target.overflow, flushSubnormals);
    expect({ format: target.format, ...tally.casts[t] }).toEqual({ format: target.format, ...expected });
  });
  // every element is a zero, an infinity, a NaN, or in exactly one binade
  const inBinades = tally.binades.reduce((n, [, c]) => n + c, 0);
  expect(inBinades + tally.zeros + tally.infinities + tally.nans).toBe(values.length);
  const binades = new Map<number, number>();
  let zeros = 0;
  let maxAbs = -1;
  let minNonzero = Infinity;
  let sum = 0;
  for (const x of values) {
    if (x === 0) zeros++;
    if (Number.isFinite(x)) {
      maxAbs = Math.max(maxAbs, Math.abs(x));
      sum += x * x;
      if (x !== 0) {
        minNonzero = Math.min(minNonzero, Math.abs(x));
        // exact binade by repeated halving/doubling, independent of exactBinade's log2
        let k = 0;
        let a = Math.abs(x);
        while (a >= 2) {
          a /= 2;
          k++;
        }
        while (a < 1) {
          a *= 2;
          k--;
        }
        binades.set(k, (binades.get(k) ?? 0) + 1);
      }
    }
  }
  expect(tally.zeros).toBe(zeros);
  expect(new Map(tally.binades)).toEqual(binades);
  expect(tally.maxAbs).toBe(maxAbs < 0 ? null : maxAbs);
  expect(tally.minNonzero).toBe(minNonzero === Infinity ? null : minNonzero);
  if (Number.isFinite(sum)) expect(Math.abs(tally.sumOfSquares - sum)).toBeLessThanOrEqual(sum * 1e-12);
  else expect(tally.sumOfSquares).toBe(sum);
}

describe("TensorAccumulator cast counts equal element-by-element rounding (roundTo)", () => {
  const edges = boundaryValues();
  it("binary64 values at every class boundary, default overflow modes", () => expectExact(Float64Array.from(edges)));
  it("binary32 values at every class boundary, default overflow modes", () => expectExact(Float32Array.from(edges)));
  it("both overflow modes, and subnormals counted as flushed", () => {
    for (const overflow of ["saturate", "infinity-or-nan"] as const) {
      expectExact(Float64Array.from(edges), overflow);
      expectExact(Float32Array.from(edges), overflow);
    }
    expectExact(Float32Array.from(edges), undefined, true);
  });

  it("long binary32 chunks: blocks that touch boundary buckets are classified again, others are not", () => {
    // binary32 normal values only, so every chunk takes the fast path (no zeros, subnormals, infinities, NaNs)
    const edges32 = Float32Array.from(edges).filter((x) => Number.isFinite(x) && Math.abs(x) >= 2 ** -126);
    expect(edges32.length).toBeGreaterThan(100);
    const values = new Float32Array(50_000);
    for (let i = 0; i < values.length; i++) values[i] = i % 997 === 0 ? edges32[(i / 997) % edges32.length]! : ((i % 200) - 100.5) * 0.01;
    const targets = targetsFor();
    const tally = tallyOf(values, targets, values.length);
    targets.forEach((target, t) => {
      expect(tally.casts[t]).toEqual(referenceCounts(target.format as FormatName, values, target.overflow));
    });
  });

  it("long binary32 chunks whose blocks each touch one boundary bucket", () => {
    // e4m3 flushes |x| ≤ 2^-10 and keeps 2^-10·(1 + 2^-20): both share one bucket (OCP 8-bit specification limits)
    const values = new Float32Array(40_000).fill(0.5);
    for (let i = 0; i < values.length; i += 1500) values[i] = i % 3000 === 0 ? 2 ** -10 : 2 ** -10 * (1 + 2 ** -20);
    const targets = targetsFor();
    const tally = tallyOf(values, targets, values.length);
    targets.forEach((target, t) => {
      expect(tally.casts[t]).toEqual(referenceCounts(target.format as FormatName, values, target.overflow));
    });
    expect(tally.casts[2]!.flushed).toBe(14);
  });

  it("fast-check: random binary32 and binary64 arrays", () => {
    const element = fc.oneof(
      fc.double(),
      fc.double({ min: -1e-3, max: 1e-3 }),
      fc.double({ min: -1e6, max: 1e6 }),
      fc.constantFrom(...edges),
    );
    fc.assert(
      fc.property(fc.array(element, { maxLength: 300 }), fc.boolean(), (list, wide) => {
        expectExact(wide ? Float64Array.from(list) : Float32Array.from(list));
      }),
      { numRuns: 60 },
    );
  });

  it("binary16 counts agree with @petamoriken/float16 (f16round) on Gaussian-like weights", () => {
    // a deterministic spread of magnitudes over 2^-30 … 2^17
    const values = new Float32Array(20000);
    for (let i = 0; i < values.length; i++) values[i] = (i % 2 ? -1 : 1) * 2 ** (-30 + (47 * ((i * 7919) % 20000)) / 20000);
    // one chunk of five fast-path blocks, then the same values in uneven chunks: identical counts
    const tally = tallyOf(values, only("binary16"), values.length);
    expect(tallyOf(values, only("binary16"), 3001).casts).toEqual(tally.casts);
    const reference = f16roundCounts(values);
    expect(tally.casts[0]).toEqual(reference);
    expect(reference.flushed).toBeGreaterThan(0);
    expect(reference.overflowed).toBeGreaterThan(0);
  });

  it("infinities and NaNs are counted apart in every target: in the file, not overflowed or clipped by the cast", () => {
    const tally = tallyOf(Float32Array.of(Infinity, -Infinity, NaN, 1), targetsFor());
    expect([tally.infinities, tally.nans, tally.zeros]).toEqual([2, 1, 0]);
    // OCP 8-bit specification: a saturating e4m3 conversion would clamp the infinities to ±448, hiding values the file
    // had already lost; they count as the file's in e4m3's row too
    expect(tally.casts.map((c) => [c.overflowed, c.saturated, c.nonFiniteInFile])).toEqual([
      [0, 0, 3],
      [0, 0, 3],
      [0, 0, 3],
      [0, 0, 3],
    ]);
  });
});

describe("TensorAccumulator quantiles", () => {
  it("lie within one bucket (2^-7 relative) above the exact order statistic", () => {
    const values = new Float32Array(5000);
    for (let i = 0; i < values.length; i++) values[i] = Math.fround(Math.exp(Math.sin(i * 12.9898) * 8));
    const tally = tallyOf(values, NONE, 1000);
    const sorted = Array.from(values, Math.abs).sort((a, b) => a - b);
    for (const q of [0.1, 0.5, 0.9, 0.99]) {
      const exact = sorted[Math.ceil(q * sorted.length) - 1]!;
      const got = tally.quantile(q)!;
      expect(got).toBeGreaterThanOrEqual(exact);
      expect(got).toBeLessThanOrEqual(exact * (1 + 2 ** -7) * (1 + 1e-7));
    }
    expect(tally.quantile(1)).toBe(sorted[sorted.length - 1]);
  });
});

describe("scaleRange", () => {
  it("bounds are the exact edges where the extremes start to fit (checked with roundTo)", () => {
    fc.assert(
      fc.property(
        fc.double({ min: 1e-30, max: 1e30, noNaN: true }),
        fc.double({ min: 1e-30, max: 1e30, noNaN: true }),
        fc.constantFrom<FormatName>(...TARGET_NAMES),
        (a, b, name) => {
          const values = Float64Array.of(a, -b);
          const [target] = only(name) as [CastTarget];
          const f = FORMATS[name];
          const tally = tallyOf(values, only(name));
          const range = scaleRange(target, tally)!;
          const max = Math.max(a, b);
          const min = Math.min(a, b);
          const fitsTop = (k: number) => Math.abs(roundTo(f, max * 2 ** k, { overflow: "infinity-or-nan" })) <= f.maxFinite;
          expect(fitsTop(range.highest)).toBe(true);
          expect(fitsTop(range.highest + 1)).toBe(false);
          expect(roundTo(f, min * 2 ** range.lowest)).not.toBe(0);
          expect(roundTo(f, min * 2 ** (range.lowest - 1))).toBe(0);
          expect(Math.abs(roundTo(f, min * 2 ** range.lowestNormal))).toBeGreaterThanOrEqual(f.minNormal);
          expect(Math.abs(roundTo(f, min * 2 ** (range.lowestNormal - 1)))).toBeLessThan(f.minNormal);
          expect(range.fits).toBe(range.lowest <= range.highest);
          const scaled = [a, b].map((v) => v * 2 ** range.highest);
          expect(range.belowSubnormalAtHighest).toBe(scaled.filter((v) => v < f.minSubnormal).length);
          expect(range.belowNormalAtHighest).toBe(scaled.filter((v) => v < f.minNormal).length);
        },
      ),
      { numRuns: 200 },
    );
  });

  it("e4m3 (saturating): a tensor with max 1 fits up to 2^8, since 448 = 1.75 · 2^8 (OCP 8-bit specification)", () => {
    const tally = tallyOf(Float32Array.of(1, 0.5), only("e4m3"));
    const range = scaleRange(only("e4m3")[0]!, tally)!;
    expect(range.highest).toBe(8);
    // e4m3 flushes |x| ≤ 2^-10 (SCIENCE.md §1.3, half the smallest subnormal 2^-9; the tie goes to zero):
    // 0.5 · 2^-9 = 2^-10 flushes, 0.5 · 2^-8 = 2^-9 is the smallest subnormal
    expect(range.lowest).toBe(-8);
    // smallest normal 2^-6: 0.5 · 2^-5
    expect(range.lowestNormal).toBe(-5);
  });

  it("no nonzero finite values: no scale range", () => {
    expect(scaleRange(castTarget("binary16"), tallyOf(Float32Array.of(0, 0), NONE))).toBeNull();
  });
});

describe("ChannelAccumulator", () => {
  const rows = 5;
  const cols = 7;
  const matrix = Array.from({ length: rows }, (_, r) => Array.from({ length: cols }, (_, c) => (r === 3 ? 40 : 1) * (c + 1) * (c % 2 ? -1 : 1)));

  function direct(axis: "row" | "column") {
    const n = axis === "row" ? rows : cols;
    const rms: number[] = [];
    const max: number[] = [];
    for (let i = 0; i < n; i++) {
      const line = axis === "row" ? matrix[i]! : matrix.map((row) => row[i]!);
      rms.push(Math.sqrt(line.reduce((s, x) => s + x * x, 0) / line.length));
      max.push(Math.max(...line.map(Math.abs)));
    }
    return { rms, max };
  }

  for (const order of ["C", "F"] as const) {
    it(`rows and columns of a matrix in ${order} order, fed in uneven chunks`, () => {
      const flat = order === "C" ? matrix.flat() : Array.from({ length: cols }, (_, c) => matrix.map((row) => row[c]!)).flat();
      const acc = new ChannelAccumulator([rows, cols], order);
      const values = Float64Array.from(flat);
      for (let i = 0; i < values.length; i += 3) acc.add(values.subarray(i, i + 3), i);
      const [rowAxis, colAxis] = acc.result();
      const r = direct("row");
      expect(rowAxis!.axis).toBe("row");
      expect(rowAxis!.loudest).toBe(3);
      expect(rowAxis!.loudestRms).toBeCloseTo(r.rms[3]!, 12);
      const sortedRows = [...r.rms].sort((a, b) => a - b);
      expect(rowAxis!.medianRms).toBeCloseTo(sortedRows[2]!, 12);
      expect(rowAxis!.rmsRatio).toBeCloseTo(r.rms[3]! / sortedRows[2]!, 12);
      const c = direct("column");
      expect(colAxis!.channels).toBe(cols);
      expect(colAxis!.loudest).toBe(6);
      // the largest magnitude per channel is tracked along the slow storage axis: rows in C order, columns in F order
      const slowAxis = order === "C" ? rowAxis! : colAxis!;
      const fastAxis = order === "C" ? colAxis! : rowAxis!;
      const ref = order === "C" ? r : c;
      const ratios = ref.rms.map((v, i) => ref.max[i]! / v);
      expect(slowAxis.maxOverRms).toBeCloseTo(Math.max(...ratios), 12);
      expect(slowAxis.maxOverRmsChannel).toBe(ratios.indexOf(Math.max(...ratios)));
      expect(fastAxis.maxOverRms).toBeNull();
    });
  }

  it("a vector: each element is a channel (a norm gain), the loudest is the largest magnitude", () => {
    const acc = new ChannelAccumulator([6], "C");
    acc.add(Float32Array.of(1, 1, -9, 1, 2, 1), 0);
    const [axis] = acc.result();
    expect(axis).toMatchObject({ axis: "element", channels: 6, loudest: 2, loudestRms: 9, medianRms: 1, rmsRatio: 9 });
  });

  it("non-finite values are left out of channel figures", () => {
    const acc = new ChannelAccumulator([2, 2], "C");
    acc.add(Float64Array.of(1, NaN, Infinity, 2), 0);
    const [rowAxis] = acc.result();
    expect(rowAxis!.loudestRms).toBeCloseTo(Math.sqrt(2), 12);
  });
});
