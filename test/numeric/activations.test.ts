import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import {
  activationFunction,
  activationMoments,
  ELEMENTWISE_ACTIVATIONS,
  gaussianExpectationSplit,
  type ActivationMoments,
  type ElementwiseActivationName,
} from "../../src/numeric/index.js";
import { ACTIVATIONS } from "../../src/spec/types.js";

function near(actual: number, expected: number, tol: number): void {
  expect(Math.abs(actual - expected), `actual ${actual}, expected ${expected}`).toBeLessThanOrEqual(tol);
}

describe("activationMoments at q = 1 (SCIENCE.md §2.9 [X], quadrature, table 'φ (q = 1)')", () => {
  // [name, slope, E[φ], E[φ²], E[φ'], E[φ'²]]
  const rows: [ElementwiseActivationName, number, number, number, number, number][] = [
    ["relu", 0, 0.3989422804, 0.5, 0.5, 0.5],
    ["leaky-relu", 0.01, 0.3949528576, 0.50005, 0.505, 0.50005],
    ["leaky-relu", 0.2, 0.3191538243, 0.52, 0.6, 0.52],
    ["tanh", 0, 0, 0.3942944904, 0.6057055096, 0.4644029024],
    ["sigmoid", 0, 0.5, 0.2933790359, 0.2066209641, 0.0448362414],
    ["gelu", 0, 0.2820947918, 0.4252214826, 0.5, 0.4558508656],
    ["silu", 0, 0.2066209641, 0.3557755198, 0.5, 0.3794823516],
    ["softplus", 0, 0.8060591833, 0.9212459089, 0.5, 0.2933790359],
  ];
  it.each(rows)("%s (slope %s) to 1e-9 (table gives 10 decimals)", (name, slope, m1, m2, d1, d2) => {
    const m = activationMoments(name, 1, slope);
    near(m.mean, m1, 1e-9);
    near(m.second, m2, 1e-9);
    near(m.derivativeMean, d1, 1e-9);
    near(m.derivativeSecond, d2, 1e-9);
  });
});

describe("activationMoments at q = 0.25 and q = 4 (SCIENCE.md §2.9 [X], table 'q-dependence')", () => {
  // [name, q, E_q[φ²], E_q[φ'²]]
  const rows: [ElementwiseActivationName, number, number, number][] = [
    ["tanh", 0.25, 0.1735161434, 0.7173798616],
    ["tanh", 4, 0.6352612343, 0.2559504432],
    ["sigmoid", 0.25, 0.2639555776, 0.0560346833],
    ["sigmoid", 4, 0.3485736226, 0.0290251814],
    ["gelu", 0.25, 0.0835067238, 0.3556851397],
    ["gelu", 4, 1.9298650159, 0.5060447641],
    ["silu", 0.25, 0.0722491242, 0.3003079851],
    ["silu", 4, 1.7578898667, 0.4664250548],
    ["softplus", 0.25, 0.5876846301, 0.2639555776],
    ["softplus", 4, 2.3297814636, 0.3485736226],
  ];
  it.each(rows)("%s at q = %s to 1e-9", (name, q, m2, d2) => {
    const m = activationMoments(name, q);
    near(m.second, m2, 1e-9);
    near(m.derivativeSecond, d2, 1e-9);
  });
});

describe("SCIENCE.md check values #20–#24", () => {
  it("#20 ReLU: E_q[φ²] = q/2 and E_q[φ'²] = 1/2 to 1e-12 at any q", () => {
    for (const q of [1e-6, 0.3, 1, 7, 1e5]) {
      const m = activationMoments("relu", q);
      near(m.second, q / 2, 1e-12 * Math.max(1, q));
      near(m.derivativeSecond, 0.5, 1e-12);
    }
  });
  it("#21 tanh at q = 1: 0.3942944904, 0.4644029024", () => {
    const m = activationMoments("tanh", 1);
    near(m.second, 0.3942944904, 1e-9);
    near(m.derivativeSecond, 0.4644029024, 1e-9);
  });
  it("#22 sigmoid at q = 1: 0.2933790359, 0.0448362414", () => {
    const m = activationMoments("sigmoid", 1);
    near(m.second, 0.2933790359, 1e-9);
    near(m.derivativeSecond, 0.0448362414, 1e-9);
  });
  it("#23 GELU at q = 1: E[φ²] = 0.4252214826 (closed form), and it agrees with quadrature", () => {
    near(activationMoments("gelu", 1).second, 0.4252214826, 1e-9);
    const gelu = activationFunction("gelu");
    for (const q of [0.01, 0.25, 1, 4, 25]) {
      const quad = gaussianExpectationSplit((x) => gelu.f(x) ** 2, q);
      near(activationMoments("gelu", q).second, quad, 1e-12 * Math.max(1, q));
    }
  });
  it("#24 SiLU at q = 1: 0.3557755198, 0.3794823516", () => {
    const m = activationMoments("silu", 1);
    near(m.second, 0.3557755198, 1e-9);
    near(m.derivativeSecond, 0.3794823516, 1e-9);
  });
});

describe("limits as q → 0 (SCIENCE.md §2.9 'Limits')", () => {
  it("sigmoid E[φ²] → 1/4, E[φ'²] → 1/16; tanh E[φ'²] → 1; GELU and SiLU E[φ'²] → 1/4", () => {
    for (const q of [1e-8, 0]) {
      const tol = q === 0 ? 0 : 1e-7;
      near(activationMoments("sigmoid", q).second, 0.25, tol);
      near(activationMoments("sigmoid", q).derivativeSecond, 1 / 16, tol);
      near(activationMoments("tanh", q).derivativeSecond, 1, tol);
      near(activationMoments("gelu", q).derivativeSecond, 0.25, tol);
      near(activationMoments("silu", q).derivativeSecond, 0.25, tol);
    }
  });
  it("zero fraction: 1/2 for relu and leaky-relu with slope 0, 0 otherwise; 1 at q = 0 where φ(0) = 0", () => {
    expect(activationMoments("relu", 2).zeroFraction).toBe(0.5);
    expect(activationMoments("leaky-relu", 2, 0).zeroFraction).toBe(0.5);
    expect(activationMoments("leaky-relu", 2, 0.1).zeroFraction).toBe(0);
    for (const name of ["gelu", "silu", "tanh", "sigmoid", "softplus", "identity"] as const) {
      expect(activationMoments(name, 2).zeroFraction).toBe(0);
    }
    expect(activationMoments("relu", 0).zeroFraction).toBe(1);
    expect(activationMoments("tanh", 0).zeroFraction).toBe(1);
    expect(activationMoments("sigmoid", 0).zeroFraction).toBe(0);
  });
});

describe("exact identities (SCIENCE.md §2.9)", () => {
  const qs = [0.01, 0.25, 1, 3, 10, 100];
  it("Stein's lemma: E_q[SiLU] = q·E_q[σ'] (E[x·g(x)] = q·E[g'(x)] for x ~ N(0, q))", () => {
    for (const q of qs) near(activationMoments("silu", q).mean, q * activationMoments("sigmoid", q).derivativeMean, 1e-12 * Math.max(1, q));
  });
  it("softplus' = sigmoid, so softplus E_q[φ'²] = sigmoid E_q[φ²]", () => {
    for (const q of qs) near(activationMoments("softplus", q).derivativeSecond, activationMoments("sigmoid", q).second, 1e-13);
  });
  it("leaky-relu with slope a: E[φ⁴]/E[φ²]² = 6(1+a⁴)/(1+a²)² (SCIENCE.md §2.6) and identity moments q, 3q²", () => {
    const a = 0.2;
    const m = activationMoments("leaky-relu", 2, a);
    near(m.fourth / m.second ** 2, (6 * (1 + a ** 4)) / (1 + a * a) ** 2, 1e-13);
    const id = activationMoments("identity", 2);
    expect([id.mean, id.second, id.fourth, id.derivativeSecond]).toEqual([0, 2, 12, 1]);
  });
});

interface ReferenceRow {
  name: ElementwiseActivationName;
  q: number;
  mean: string;
  second: string;
  fourth: string;
  derivativeMean: string;
  derivativeSecond: string;
  derivativeFourth: string;
}
const reference = JSON.parse(
  readFileSync(new URL("./reference/activation_moments.json", import.meta.url), "utf8"),
) as { source: string; rows: ReferenceRow[] };

describe("activationMoments against mpmath 1.3.0 quadrature (test/numeric/reference/activation_moments.py)", () => {
  const keys = ["mean", "second", "fourth", "derivativeMean", "derivativeSecond", "derivativeFourth"] as const;
  it.each(reference.rows.map((r) => [r.name, r.q, r] as const))("%s at q = %s: all six moments to 1e-11 relative (measured worst 3.3e-12)", (name, q, row) => {
    const m: ActivationMoments = activationMoments(name, q);
    for (const k of keys) {
      const expected = Number(row[k]);
      expect(Math.abs(m[k] - expected), `${k}: ${m[k]} vs ${expected}`).toBeLessThanOrEqual(1e-11 * Math.max(Math.abs(expected), 1e-3));
    }
  });
});

describe("activationFunction (SCIENCE.md §4 and §2.9 derivative values)", () => {
  it("sigmoid'(x) table: 0.25, 0.196611933, 0.104993585, 0.017662706, 2.4665093e-3, 3.3523767e-4, 4.5395808e-5", () => {
    const d = activationFunction("sigmoid").df;
    const table: [number, number][] = [
      [0, 0.25],
      [1, 0.196611933],
      [2, 0.104993585],
      [4, 0.017662706],
      [6, 2.4665093e-3],
      [8, 3.3523767e-4],
      [10, 4.5395808e-5],
    ];
    for (const [x, v] of table) {
      expect(Math.abs(d(x) / v - 1)).toBeLessThan(5e-8);
      expect(d(-x)).toBe(d(x));
    }
    near(d(4), 0.0176627062, 1e-9); // check #35
  });
  it("tanh'(2) = 0.070650825, tanh'(4) = 1.340951e-3", () => {
    const d = activationFunction("tanh").df;
    expect(Math.abs(d(2) / 0.070650825 - 1)).toBeLessThan(1e-8);
    expect(Math.abs(d(4) / 1.340951e-3 - 1)).toBeLessThan(1e-6);
  });
  it("derivative extrema: GELU' max 1.1289041 at √2, min −0.1289041 at −√2; SiLU' max 1.0998393 at 2.39936, min −0.0998393", () => {
    const g = activationFunction("gelu").df;
    near(g(Math.SQRT2), 1.1289041, 1e-7);
    near(g(-Math.SQRT2), -0.1289041, 1e-7);
    const s = activationFunction("silu").df;
    near(s(2.39936), 1.0998393, 1e-7);
    near(s(-2.39936), -0.0998393, 1e-7);
  });
  it("function minima: GELU −0.1699712 at −0.75179, SiLU −0.2784645 at −1.27847", () => {
    near(activationFunction("gelu").f(-0.75179), -0.1699712, 1e-7);
    near(activationFunction("silu").f(-1.27847), -0.2784645, 1e-7);
  });
  it("df matches a central difference of f for every elementwise activation (away from kinks)", () => {
    for (const name of ELEMENTWISE_ACTIVATIONS) {
      const { f, df } = activationFunction(name, 0.1);
      for (const x of [-30, -3.3, -0.7, 0.4, 1.9, 12]) {
        const h = 1e-5;
        near(df(x), (f(x + h) - f(x - h)) / (2 * h), 1e-8 * Math.max(1, Math.abs(x)));
      }
    }
  });
  it("stays finite far out: softplus(800) = 800, sigmoid(−800) = 0, tanh'(400) = 0 without NaN", () => {
    expect(activationFunction("softplus").f(800)).toBe(800);
    expect(activationFunction("sigmoid").f(-800)).toBe(0);
    expect(activationFunction("tanh").df(400)).toBe(0);
    expect(activationFunction("silu").df(-800)).toBe(0);
  });
  it("leaky-relu uses the given slope", () => {
    const { f, df } = activationFunction("leaky-relu", 0.2);
    expect(f(-2)).toBeCloseTo(-0.4, 15);
    expect(df(-2)).toBe(0.2);
    expect(f(3)).toBe(3);
  });
});

describe("names", () => {
  it("covers every ACTIVATIONS name except softmax, which is rejected with a RangeError", () => {
    expect([...ELEMENTWISE_ACTIVATIONS, "softmax"].sort()).toEqual([...ACTIVATIONS].sort());
    expect(() => activationMoments("softmax", 1)).toThrow(RangeError);
    expect(() => activationFunction("softmax")).toThrow(/not elementwise/);
    expect(() => activationMoments("swish" as never, 1)).toThrow(/unknown activation "swish"/);
  });
  it("q = ∞ gives the limits: tanh → sign (E[φ²] = 1, E[φ'²] = 0), sigmoid → step, GELU → ReLU (E[φ'²] = ½)", () => {
    expect(activationMoments("tanh", Infinity).second).toBe(1);
    expect(activationMoments("tanh", Infinity).derivativeSecond).toBe(0);
    expect(activationMoments("sigmoid", Infinity).second).toBe(0.5);
    expect(activationMoments("gelu", Infinity).derivativeSecond).toBe(0.5);
    expect(activationMoments("relu", Infinity).second).toBe(Infinity);
  });
  it("very large q stays finite and approaches those limits (q = 1e300: tanh E[φ'²] ≈ (4/3)·√(2/(πq)))", () => {
    // E[sech⁴(√q z)] ≈ φ(0)·∫sech⁴(x)dx/√q = (4/3)/√(2πq) for large q (Laplace-type limit)
    const m = activationMoments("tanh", 1e300);
    expect(Math.abs(m.derivativeSecond / ((4 / 3) / Math.sqrt(2 * Math.PI * 1e300)) - 1)).toBeLessThan(1e-9);
    expect(Math.abs(activationMoments("gelu", 1e300).derivativeSecond - 0.5)).toBeLessThan(1e-9);
  });
  it("q < 0 or NaN gives NaN moments rather than throwing (numeric kernels do not throw)", () => {
    expect(activationMoments("tanh", -1).second).toBeNaN();
    expect(activationMoments("relu", NaN).second).toBeNaN();
  });
});
