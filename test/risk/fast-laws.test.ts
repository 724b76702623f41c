import fc from "fast-check";
import { describe, expect, it } from "vitest";
import type { MagnitudeProfile } from "../../src/magnitude/types.js";
import { gaussianBelowOverDraws, gaussianEnergyBelowOverDraws, lawMixtureCrossing, lawOverDraws } from "../../src/risk/laws.js";
import { fractionBelow, energyBelow, probabilityAnyAbove, profileStatistics } from "../../src/risk/profile.js";
import { exp2 } from "../../src/risk/_math.js";

// The law kernels' shortcuts against what they replace: the closed forms' moment factors by products against an exp per
// term, and the caches (per count, per spread row) against the same numbers computed in another order, where a cache
// that kept another count's values would show.

function apart(a: number, b: number): number {
  return a === b ? 0 : Math.abs(a - b) / Math.max(Math.abs(a), Math.abs(b));
}

// The series as written in the sources, one exp per term: erf(x) = (2/√π)·Σ (−1)^n x^{2n+1}/(n!(2n+1)) (Abramowitz &
// Stegun 7.1.5) and E[Z²; |Z| ≤ a] = 2φ(0)·Σ (−1/2)^k/k!·a^{2k+3}/(2k+3) (termwise integral of z²φ(z)), each power
// a^m averaged over the draws by the log-normal moment E[a^m] = (t/rms)^m·e^{(m·σ)²/2}, σ = spread·ln 2 (the moments of
// a log-normal, Aitchison & Brown 1957, eq. 2.5; from memory).
function termwise(ratio: number, spread: number, energy: boolean): number {
  const sigma = spread * Math.LN2;
  let sum = 0;
  let coefficient = 1;
  // (an asymptotic series: its terms turn and grow past some m, so it ends where a term falls below 1e-17 of the sum,
  // and is not summed, NaN, if none does within 40 terms, as the kernels do)
  for (let n = 0; n < 40; n++) {
    const m = energy ? 2 * n + 3 : 2 * n + 1;
    // the power and the moment's factor in one exp: each alone can leave the doubles' range
    const base = energy ? ratio : ratio / Math.SQRT2;
    const term = (coefficient * Math.exp(m * Math.log(base) + 0.5 * (m * sigma) ** 2)) / m;
    sum += term;
    if (Math.abs(term) < 1e-17 * Math.abs(sum)) return energy ? 2 * 0.3989422804014327 * sum : 1.1283791670955126 * sum;
    coefficient *= energy ? -0.5 / (n + 1) : -1 / (n + 1);
  }
  return NaN;
}

describe("exp2", () => {
  // 2^x by the definition e^{x·ln 2} (ECMAScript's `**` on binary64, ECMA-262 §6.1.6.1.3, is the reference); the bound
  // is the rounding of x·ln 2 carried through the exponential plus Math.exp's own ulp
  it("stays within (|x| + 1)·2^-52 relative of 2 ** x over the normal range", () => {
    fc.assert(
      fc.property(fc.double({ min: -1000, max: 1000, noNaN: true }), (x) => {
        expect(apart(exp2(x), 2 ** x)).toBeLessThanOrEqual((Math.abs(x) + 1) * 2 ** -52);
      }),
      { numRuns: 2000 },
    );
    for (const x of [0, 1, -1, 0.5, 1 / 16, 9 * 2.7, -9 * 8.5]) expect(apart(exp2(x), 2 ** x)).toBeLessThanOrEqual((Math.abs(x) + 1) * 2 ** -52);
    expect(exp2(0)).toBe(1);
  });
});

describe("closed forms of the Gaussian shares far below the scale", () => {
  it("the moment factors by products stay within 1e-12 of an exp per term", () => {
    let compared = 0;
    fc.assert(
      fc.property(fc.double({ min: 0.01, max: 9, noNaN: true }), fc.double({ min: -60, max: 0, noNaN: true }), (spread, margin) => {
        // ratios up to the closed forms' own limit (every draw of the rule at t/r ≤ 1/2)
        const ratio = 0.5 * 2 ** (-spread * 9 + margin);
        for (const energy of [false, true]) {
          const closed = energy ? gaussianEnergyBelowOverDraws(ratio, spread) : gaussianBelowOverDraws(ratio, spread);
          const reference = termwise(ratio, spread, energy);
          // (NaN: the closed form does not apply here, or its series does not end, and the rows decide)
          if (Number.isNaN(closed)) continue;
          compared++;
          expect(apart(closed, reference)).toBeLessThan(1e-12);
        }
      }),
      { numRuns: 400 },
    );
    expect(compared).toBeGreaterThan(500);
  });

  it("at the closed forms' limit, where the series takes the most terms, too", () => {
    for (let spread = 0.01; spread < 1; spread += 0.013) {
      const ratio = 0.5 * 2 ** (-spread * 9) * (1 - 1e-12);
      for (const energy of [false, true]) {
        const closed = energy ? gaussianEnergyBelowOverDraws(ratio, spread) : gaussianBelowOverDraws(ratio, spread);
        expect(Number.isNaN(closed)).toBe(false);
        expect(apart(closed, termwise(ratio, spread, energy))).toBeLessThan(1e-12);
      }
    }
  });
});

// profiles of many counts (non-integer ones as a ReLU's zero share gives) and spreads, visited in two orders
function profiles(): MagnitudeProfile[] {
  const list: MagnitudeProfile[] = [];
  for (let k = 0; k < 90; k++) {
    const elements = [256, 4096, 8192, 65536, 3_000_000][k % 5]!;
    list.push({
      elements,
      zeroFraction: k % 3 === 0 ? 0 : 0.5 - 1e-4 * (k % 7),
      shape: k % 4 === 0 ? "half-gaussian" : "gaussian",
      rms: 1e-3 * 1.7 ** (k % 11),
      log2Spread: 0.55 + 0.087 * k,
    });
  }
  return list;
}
function shuffled<T>(items: T[]): T[] {
  const out = items.slice();
  let seed = 12345;
  for (let i = out.length - 1; i > 0; i--) {
    seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
    const j = seed % (i + 1);
    [out[i], out[j]] = [out[j]!, out[i]!];
  }
  return out;
}

describe("the per-count and per-row caches give the numbers computed afresh", () => {
  it("profileStatistics: the same levels whatever the order of the profiles", () => {
    const list = profiles();
    const levels = [
      { maxQuantile: 1e-3, lowQuantile: 1e-2 },
      { maxQuantile: 1e-4, lowQuantile: 1e-3 },
    ];
    const first = list.map((p) => levels.map((l) => profileStatistics(p, l)));
    const order = shuffled(list.map((_, i) => i));
    for (const i of order) {
      for (let l = 0; l < levels.length; l++) {
        const again = profileStatistics(list[i]!, levels[l]!);
        expect(again.max).toBe(first[i]![l]!.max);
        expect(again.low).toBe(first[i]![l]!.low);
      }
    }
  });

  it("the tabled any-above level stays within 1e-6 binade of the level search (the table's own bound)", () => {
    let worst = 0;
    for (const p of profiles()) {
      const tabled = lawMixtureCrossing(p, "any-above", 1e-3);
      const searched = lawMixtureCrossing(p, "any-above", 1e-3, false);
      worst = Math.max(worst, Math.abs(tabled - searched));
    }
    expect(worst).toBeLessThan(1e-6);
  });

  it("probabilityAnyAbove, fractionBelow and energyBelow: the same values whatever the order of the calls", () => {
    const list = profiles();
    const calls: [number, number][] = [];
    for (let i = 0; i < list.length; i++) for (const x of [-30, -8, -1.5, 0.5, 2.5, 3.7, 5, 9]) calls.push([i, x]);
    const values = (order: number[]): number[][] => {
      const out: number[][] = [];
      for (const k of order) {
        const [i, x] = calls[k]!;
        const p = list[i]!;
        const t = p.rms * 2 ** x;
        out[k] = [probabilityAnyAbove(p, t), probabilityAnyAbove(p, t, true), fractionBelow(p, t), energyBelow(p, t), lawOverDraws(p, "any-above", t)];
      }
      return out;
    };
    const inOrder = values(calls.map((_, k) => k));
    const again = values(shuffled(calls.map((_, k) => k)));
    expect(again).toEqual(inOrder);
    // and they are probabilities that rise or fall with the threshold as they should
    for (let k = 1; k < calls.length; k++) {
      if (calls[k]![0] !== calls[k - 1]![0]) continue;
      expect(inOrder[k]![0]!).toBeLessThanOrEqual(inOrder[k - 1]![0]!);
      expect(inOrder[k]![2]!).toBeGreaterThanOrEqual(inOrder[k - 1]![2]!);
    }
  });
});
