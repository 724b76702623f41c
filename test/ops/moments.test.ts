/** Activation moments and order statistics against SCIENCE.md §2.9 and §4 (quadrature values marked [X] there). */
import { describe, expect, test } from "vitest";
import { activationKappa, activationMoments, erf } from "../../src/ops/activation/moments.js";
import { maxOfNormals } from "../../src/ops/pool/analytic.js";
import { attentionRowSums } from "../../src/ops/attention/analytic.js";
import { allBelowZero, crossMoments } from "../../src/ops/activation/analytic.js";
import { expectedMaxAbsProduct, expectedMaxNormal } from "../../src/magnitude/profile.js";
import { gaussianSoftmaxMoments } from "../../src/numeric/softmax.js";

describe("activationMoments at q = 1 (SCIENCE.md §2.9 table, checks 20–24)", () => {
  const table = [
    ["tanh", 0, 0.3942944904, 0.6057055096, 0.4644029024],
    ["sigmoid", 0.5, 0.2933790359, 0.2066209641, 0.0448362414],
    ["gelu", 0.2820947918, 0.4252214826, 0.5, 0.4558508656],
    ["silu", 0.2066209641, 0.3557755198, 0.5, 0.3794823516],
    ["softplus", 0.8060591833, 0.9212459089, 0.5, 0.2933790359],
    ["relu", 0.3989422804, 0.5, 0.5, 0.5],
  ] as const;
  for (const [name, mean, second, dMean, dSecond] of table) {
    test(`${name}: E[φ], E[φ²], E[φ'], E[φ'²]`, () => {
      const m = activationMoments(name, 1);
      expect(m.mean).toBeCloseTo(mean, 9);
      expect(m.second).toBeCloseTo(second, 9);
      expect(m.derivativeMean).toBeCloseTo(dMean, 9);
      expect(m.derivativeSecond).toBeCloseTo(dSecond, 9);
    });
  }

  test("leaky ReLU slope 0.2: E[φ] 0.3191538243, E[φ²] 0.52, E[φ'] 0.6, E[φ'²] 0.52", () => {
    const m = activationMoments("leaky-relu", 1, 0.2);
    expect(m.mean).toBeCloseTo(0.3191538243, 9);
    expect(m.second).toBeCloseTo(0.52, 12);
    expect(m.derivativeMean).toBeCloseTo(0.6, 12);
    expect(m.derivativeSecond).toBeCloseTo(0.52, 12);
  });

  test("ReLU: E_q[φ²] = q/2 and E_q[φ'²] = 1/2 at every q (check 20)", () => {
    for (const q of [1e-6, 0.3, 7, 1e5]) {
      expect(activationMoments("relu", q).second).toBeCloseTo(q / 2, 12);
      expect(activationMoments("relu", q).derivativeSecond).toBe(0.5);
    }
  });
});

describe("activationMoments away from q = 1 (SCIENCE.md §2.9 q-dependence)", () => {
  const table = [
    ["tanh", 0.1735161434, 0.7173798616, 0.6352612343, 0.2559504432],
    ["sigmoid", 0.2639555776, 0.0560346833, 0.3485736226, 0.0290251814],
    ["gelu", 0.0835067238, 0.3556851397, 1.9298650159, 0.5060447641],
    ["silu", 0.0722491242, 0.3003079851, 1.7578898667, 0.4664250548],
    ["softplus", 0.5876846301, 0.2639555776, 2.3297814636, 0.3485736226],
  ] as const;
  for (const [name, second25, dSecond25, second4, dSecond4] of table) {
    test(`${name} at q = 0.25 and q = 4`, () => {
      expect(activationMoments(name, 0.25).second).toBeCloseTo(second25, 9);
      expect(activationMoments(name, 0.25).derivativeSecond).toBeCloseTo(dSecond25, 9);
      expect(activationMoments(name, 4).second).toBeCloseTo(second4, 9);
      expect(activationMoments(name, 4).derivativeSecond).toBeCloseTo(dSecond4, 9);
    });
  }

  test("limits as q → 0: sigmoid E[φ²] → 1/4, E[φ'²] → 1/16; GELU and SiLU E[φ'²] → 1/4; tanh E[φ'²] → 1", () => {
    expect(activationMoments("sigmoid", 1e-10).second).toBeCloseTo(0.25, 8);
    expect(activationMoments("sigmoid", 1e-10).derivativeSecond).toBeCloseTo(1 / 16, 8);
    expect(activationMoments("gelu", 1e-10).derivativeSecond).toBeCloseTo(0.25, 8);
    expect(activationMoments("silu", 1e-10).derivativeSecond).toBeCloseTo(0.25, 8);
    expect(activationMoments("tanh", 1e-10).derivativeSecond).toBeCloseTo(1, 8);
  });

  test("wide inputs: tanh² → 1 and sigmoid² → 1/2 as q grows (step limit)", () => {
    expect(activationMoments("tanh", 1e6).second).toBeGreaterThan(0.999);
    expect(activationMoments("sigmoid", 1e6).second).toBeCloseTo(0.5, 3);
  });

  test("E_q[φ'] = ½ at every q for GELU, SiLU and softplus (exact identity, SCIENCE.md §2.9)", () => {
    for (const q of [0.01, 0.25, 1, 4, 25]) expect(activationMoments("silu", q).derivativeMean).toBeCloseTo(0.5, 9);
    for (const q of [0.01, 0.25, 1, 4, 25]) expect(activationMoments("softplus", q).derivativeMean).toBeCloseTo(0.5, 9);
    for (const q of [0.01, 0.25, 1, 4, 25]) expect(activationMoments("gelu", q).derivativeMean).toBeCloseTo(0.5, 12);
  });
});

describe("finite-width κ (SCIENCE.md §2.6 heuristic)", () => {
  test("ReLU 5/5, linear 2/2, leaky 0.2 gives 6(1+a⁴)/(1+a²)² − 1 = 4.556 forward", () => {
    expect(activationKappa(activationMoments("relu", 1))).toEqual({ forward: 5, backward: 5 });
    const linear = activationKappa(activationMoments("identity", 1));
    expect(linear.forward).toBeCloseTo(2, 12);
    expect(linear.backward).toBeCloseTo(2, 12);
    expect(activationKappa(activationMoments("leaky-relu", 1, 0.2)).forward).toBeCloseTo((6 * (1 + 0.2 ** 4)) / (1 + 0.04) ** 2 - 1, 12);
  });

  test("GELU 6.22/5.27, SiLU 6.26/4.97, tanh 0.63/3.75, sigmoid 0.53/2.41 at q = 1 (two decimals as given)", () => {
    const check = (name: "gelu" | "silu" | "tanh" | "sigmoid", f: number, b: number): void => {
      const k = activationKappa(activationMoments(name, 1));
      expect(k.forward).toBeCloseTo(f, 1);
      expect(k.backward).toBeCloseTo(b, 1);
    };
    check("gelu", 6.22, 5.27);
    check("silu", 6.26, 4.97);
    check("tanh", 0.63, 3.75);
    check("sigmoid", 0.53, 2.41);
  });
});

describe("order statistics and tails (SCIENCE.md §4)", () => {
  test("E[max of n N(0,1)]: 1.53875 at n = 10 (quadrature) and the refined expansion at 1e3, 1e6, 1e9", () => {
    expect(maxOfNormals(10).m1).toBeCloseTo(1.53875, 4);
    expect(expectedMaxNormal(10)).toBeCloseTo(1.53875, 4);
    // the refined expansion is within 1% of the exact values 3.24144, 4.86290, 6.08768
    expect(expectedMaxNormal(1e3) / 3.24144).toBeCloseTo(1, 1);
    expect(Math.abs(expectedMaxNormal(1e3) / 3.27176 - 1)).toBeLessThan(1e-5);
    expect(Math.abs(expectedMaxNormal(1e6) / 4.87582 - 1)).toBeLessThan(1e-5);
    expect(Math.abs(expectedMaxNormal(1e9) / 6.09556 - 1)).toBeLessThan(1e-5);
  });

  test("the maximum of a product of two Gaussians sits far above a Gaussian's at the same rms (K0 tail)", () => {
    expect(expectedMaxAbsProduct(1e8)).toBeGreaterThan(15);
    expect(expectedMaxAbsProduct(1e8)).toBeLessThan(20);
  });

  test("erf: erf(0.5) = 0.5204998778, 1 − erf(4) = 1.541725790e-8 (A&S Table 7.1)", () => {
    expect(erf(0.5)).toBeCloseTo(0.5204998778130465, 14);
    expect((1 - erf(4)) / 1.541725790028002e-8).toBeCloseTo(1, 6);
  });

  test("attention rows: uniform attention gives Σp² = 1/P; causal gives H_P/P; concentrated rows the exact E[Σp²]", () => {
    expect(attentionRowSums(100, false, 0).sumSquares).toBeCloseTo(0.01, 15);
    let h = 0;
    for (let i = 1; i <= 1000; i++) h += 1 / i;
    expect(attentionRowSums(1000, true, 0).sumSquares).toBeCloseTo(h / 1000, 12);
    // concentrated rows: E[Σp²] of Gaussian logits by the softmax quadrature (src/numeric/softmax.ts), one-hot only in the
    // limit: 1 − E[Σp²] → E[max of 16 normals]/s (Stein's lemma, Stein 1981, Lemma 1: E[Σ p z] = s²·(1 − E[Σp²]))
    expect(attentionRowSums(16, false, 10).sumSquares).toBeCloseTo(16 * gaussianSoftmaxMoments(10, 16).second, 12);
    const peaked = attentionRowSums(16, false, 1e6).sumSquares;
    expect(peaked).toBeLessThan(1);
    expect((1 - peaked) * 1e3 / expectedMaxNormal(16)).toBeCloseTo(1, 1);
  });
});

describe("two-sample moments (the correlation map)", () => {
  test("ReLU: the arc-cosine kernel E[φ(u)φ(v)] = (q/2π)(sin θ + (π − θ) cos θ) (Cho & Saul 2009): q/2π at c = 0, q/2 at c = 1", () => {
    const m = activationMoments("relu", 2);
    expect(crossMoments("relu", 0, 2, 0, m).value).toBeCloseTo(2 / (2 * Math.PI), 14);
    expect(crossMoments("relu", 0, 2, 1, m).value).toBeCloseTo(1, 12);
    expect(crossMoments("relu", 0, 2, 0, m).derivative).toBeCloseTo(0.25, 14);
    expect(crossMoments("relu", 0, 2, 1, m).derivative).toBeCloseTo(0.5, 12);
    // He init: the next layer's correlation c' = 2·E[φ(u)φ(v)]/q = (√(1 − c²) + (π − arccos c)·c)/π
    const c = 0.3;
    const expected = (Math.sqrt(1 - c * c) + (Math.PI - Math.acos(c)) * c) / Math.PI;
    expect((2 * crossMoments("relu", 0, 1, c, activationMoments("relu", 1)).value) / 1).toBeCloseTo(expected, 14);
  });

  test("leaky ReLU and smooth activations are exact at c = 0 (E[φ]²) and c = 1 (E[φ²])", () => {
    for (const [name, slope] of [["leaky-relu", 0.2], ["tanh", 0], ["gelu", 0], ["silu", 0]] as const) {
      const m = activationMoments(name, 1.5, slope);
      expect(crossMoments(name, slope, 1.5, 0, m).value).toBeCloseTo(m.mean * m.mean, 12);
      expect(crossMoments(name, slope, 1.5, 1, m).value).toBeCloseTo(m.second, 12);
      expect(crossMoments(name, slope, 1.5, 0, m).derivative).toBeCloseTo(m.derivativeMean ** 2, 12);
      expect(crossMoments(name, slope, 1.5, 1, m).derivative).toBeCloseTo(m.derivativeSecond, 12);
    }
  });
});

/** Midpoint rule on [−12, 12]² (a grid of n² cells) for E[f(u)·f(v)], u, v standard Gaussians of correlation c: independent of the closed forms. */
function gridCross(f: (x: number) => number, c: number, n = 1200): number {
  const h = 24 / n;
  const det = 1 - c * c;
  let sum = 0;
  for (let i = 0; i < n; i++) {
    const u = -12 + (i + 0.5) * h;
    const fu = f(u);
    if (fu === 0) continue;
    for (let j = 0; j < n; j++) {
      const v = -12 + (j + 0.5) * h;
      sum += fu * f(v) * Math.exp(-(u * u - 2 * c * u * v + v * v) / (2 * det));
    }
  }
  return (sum * h * h) / (2 * Math.PI * Math.sqrt(det));
}

describe("the ReLU correlation map against numerical integration", () => {
  // the arc-cosine map c' = (√(1 − c²) + (π − arccos c)·c)/π of two samples' correlation through a He-initialised
  // ReLU layer (Cho & Saul 2009, arc-cosine kernel of degree 1; Poole et al. 2016, correlation map)
  const relu = (x: number): number => (x > 0 ? x : 0);
  for (const c of [-0.6, 0, 0.3, 0.8, 0.95]) {
    test(`c = ${c}: 2·E[relu(u)relu(v)] from the kernel equals a 2-D grid integral`, () => {
      const numeric = 2 * gridCross(relu, c);
      const map = 2 * crossMoments("relu", 0, 1, c, activationMoments("relu", 1)).value;
      expect(map).toBeCloseTo(numeric, 4);
      expect(map).toBeCloseTo((Math.sqrt(1 - c * c) + (Math.PI - Math.acos(c)) * c) / Math.PI, 12);
    });
  }

  test("c = 1 is the fixed point and every c < 1 moves toward it (Poole et al. 2016: the ReLU map has the single fixed point c* = 1)", () => {
    const next = (c: number): number => 2 * crossMoments("relu", 0, 1, c, activationMoments("relu", 1)).value;
    expect(next(1)).toBeCloseTo(1, 12);
    let c = 0;
    for (let layer = 0; layer < 200; layer++) {
      const following = next(c);
      expect(following).toBeGreaterThan(c);
      expect(following).toBeLessThan(1);
      c = following;
    }
    expect(c).toBeGreaterThan(0.999);
  });
});

describe("allBelowZero: a ReLU unit off for every sample of a batch", () => {
  test("independent samples give 2^−n and identical ones 1/2 (definition)", () => {
    expect(allBelowZero(0, 16)).toBeCloseTo(2 ** -16, 15);
    expect(allBelowZero(1, 16)).toBe(0.5);
    expect(allBelowZero(-0.2, 3)).toBeCloseTo(1 / 8, 15);
  });

  test("two samples: Sheppard's orthant probability 1/4 + arcsin(c)/2π (Sheppard 1899)", () => {
    for (const c of [0.1, 0.5, 0.9, 0.999]) expect(allBelowZero(c, 2)).toBeCloseTo(0.25 + Math.asin(c) / (2 * Math.PI), 9);
  });

  test("three equicorrelated samples: 1/8 + 3·arcsin(c)/4π (trivariate orthant probability, from memory; checked by the grid below)", () => {
    for (const c of [0.2, 0.6, 0.95]) expect(allBelowZero(c, 3)).toBeCloseTo(1 / 8 + (3 * Math.asin(c)) / (4 * Math.PI), 9);
  });

  test("sixteen samples: equals a fine midpoint rule over the shared component (independent integration)", () => {
    // P = ∫ φ(s)·Φ(−s·√(c/(1 − c)))^n ds on a plain grid (the code under test uses graded Gauss–Legendre panels)
    const phiCdf = (x: number): number => 0.5 * (1 + erf(x / Math.SQRT2));
    for (const c of [0.5, 0.9, 0.99]) {
      const r = Math.sqrt(c / (1 - c));
      const steps = 200000;
      const h = 20 / steps;
      let sum = 0;
      for (let i = 0; i < steps; i++) {
        const s = -10 + (i + 0.5) * h;
        sum += (Math.exp(-0.5 * s * s) / Math.sqrt(2 * Math.PI)) * phiCdf(-r * s) ** 16;
      }
      expect(allBelowZero(c, 16)).toBeCloseTo(sum * h, 8);
    }
  });
});
