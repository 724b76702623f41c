import { describe, expect, it } from "vitest";
import { bisectDecreasing } from "../../src/numeric/bisection.js";
import { derivativeMixture, mixtureShareAbove } from "../../src/numeric/derivative-mixture.js";
import { erfc } from "../../src/numeric/normal.js";

// The plain bisection, as fitStepOf (src/risk/laws.ts) and mixtureMax (src/magnitude/profile.ts) ran it before
function plainBisection(f: (x: number) => number, level: number, low: number, high: number, maxSteps: number, absTol: number, relTol: number): number {
  for (let k = 0; k < maxSteps && high - low > absTol + relTol * high; k++) {
    const mid = 0.5 * (low + high);
    if (f(mid) > level) low = mid;
    else high = mid;
  }
  return 0.5 * (low + high);
}

function counted(f: (x: number) => number): { f: (x: number) => number; calls: () => number } {
  let calls = 0;
  return {
    f: (x) => {
      calls++;
      return f(x);
    },
    calls: () => calls,
  };
}

describe("bisection settled by a bracket found first", () => {
  it("gives the plain bisection's result bit for bit on scale mixture tails, from under half its evaluations from a guess", () => {
    let plainCalls = 0;
    let fastCalls = 0;
    for (const [activation, q] of [["gelu", 2], ["tanh", 4], ["sigmoid", 1], ["softplus", 16], ["silu", 0.25]] as const) {
      const m = derivativeMixture(activation, q);
      for (const level of [0.3, 1e-3, 1e-7, 1e-15, 1e-60]) {
        // in log2 of the threshold over [−64, 16] to 1e-12 (fitStepOf), and linear over [0, 12·c₀] to 1e-10 relative
        // (mixtureMax), from a guess near the crossing, a poor one, none, and one outside the interval; the evaluations
        // counted from a guess a few binades off in log2 and from the interval's top end (as mixtureMax starts)
        const inLog = (x: number): number => mixtureShareAbove(m, 2 ** x);
        const inLinear = (x: number): number => mixtureShareAbove(m, x);
        const top = 12 * (m.scales[0] as number);
        for (const start of [Math.log2(top / 4), 3, -40, NaN, 100]) {
          const plain = counted(inLog);
          const fast = counted(inLog);
          expect(bisectDecreasing(fast.f, level, -64, 16, { maxSteps: 64, absTol: 1e-12, relTol: 0 }, start, 1 / 4)).toBe(plainBisection(plain.f, level, -64, 16, 64, 1e-12, 0));
          if (start === 3) {
            plainCalls += plain.calls();
            fastCalls += fast.calls();
          }
        }
        for (const start of [top, top / 3, 0, NaN]) {
          const plain = counted(inLinear);
          const fast = counted(inLinear);
          expect(bisectDecreasing(fast.f, level, 0, top, { maxSteps: 60, absTol: 0, relTol: 1e-10 }, start, top / 4)).toBe(plainBisection(plain.f, level, 0, top, 60, 0, 1e-10));
          if (start === top) {
            plainCalls += plain.calls();
            fastCalls += fast.calls();
          }
        }
      }
    }
    expect(fastCalls).toBeLessThan(plainCalls / 2);
  });

  it("keeps the plain result where the crossing lies outside the interval or the level is never reached", () => {
    const tail = (x: number): number => erfc(x);
    for (const level of [1.5, 0, -1, 1e-320, 0.5]) {
      for (const [low, high] of [[0, 4], [3, 30], [-5, -1]]) {
        expect(bisectDecreasing(tail, level, low as number, high as number, { maxSteps: 64, absTol: 1e-12, relTol: 0 }, 0.5 * ((low as number) + (high as number)), 0.5)).toBe(
          plainBisection(tail, level, low as number, high as number, 64, 1e-12, 0),
        );
      }
    }
  });
});
