import { f16round } from "@petamoriken/float16";
import { describe, expect, it } from "vitest";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { createRandom } from "../../src/numeric/index.js";
import { softmaxMoments } from "../../src/ops/activation/analytic.js";
import { DEFAULT_THRESHOLDS, isProbabilityRow, tensorFormatRisk, tensorStatistics, type RiskThresholds } from "../../src/risk/index.js";
import { BINARY16 } from "./limits.js";

// Softmax probabilities weigh the values they average (Σ_j p_j·v_j), so a flush takes from a row the probability
// mass its flushed elements carry: the first moment, not their count. The reference is a float64 softmax rounded to
// binary16 by @petamoriken/float16 (round to nearest, IEEE 754-2019 §4.3.1).

const DEFAULT_KEYS = 256;
const DEFAULT_SD = 5;
const KEYS = DEFAULT_KEYS;
const LOGIT_SD = DEFAULT_SD;
const ROWS = 400;

// rows of softmax(N(0, LOGIT_SD²) logits) in float64 (row maximum subtracted, common practice), then rounded to binary16:
// the share of nonzero elements that round to zero, and the share of each row's mass they carried
function simulated(
  LOGIT_SD = DEFAULT_SD,
  KEYS = DEFAULT_KEYS,
): { elements: number; mass: number; worstRowMass: number; subnormalElements: number; subnormalMass: number; subnormalNoise: number } {
  const random = createRandom(17);
  const logits = new Float64Array(KEYS);
  let flushedElements = 0;
  let massSum = 0;
  let worstRowMass = 0;
  let subnormalElements = 0;
  let subnormalMass = 0;
  let noise = 0;
  let energy = 0;
  for (let row = 0; row < ROWS; row++) {
    random.fillNormal(logits);
    let max = -Infinity;
    for (let j = 0; j < KEYS; j++) max = Math.max(max, LOGIT_SD * (logits[j] as number));
    let sum = 0;
    for (let j = 0; j < KEYS; j++) sum += Math.exp(LOGIT_SD * (logits[j] as number) - max);
    let lost = 0;
    for (let j = 0; j < KEYS; j++) {
      const p = Math.exp(LOGIT_SD * (logits[j] as number) - max) / sum;
      const rounded = f16round(p);
      energy += p * p;
      if (rounded === 0) {
        flushedElements++;
        lost += p;
      } else if (rounded < 2 ** -14) {
        // below binary16's smallest normal 2^-14 (IEEE 754-2019 Table 3.5): a subnormal
        subnormalElements++;
        subnormalMass += p;
        noise += (rounded - p) ** 2;
      }
    }
    massSum += lost;
    worstRowMass = Math.max(worstRowMass, lost);
  }
  return { elements: flushedElements / (ROWS * KEYS), mass: massSum / ROWS, worstRowMass, subnormalElements: subnormalElements / (ROWS * KEYS), subnormalMass: subnormalMass / ROWS, subnormalNoise: noise / energy };
}

// the engine's profile of those probabilities: rms from E[p²], log-normal elements capped at 1 (src/ops/activation)
function probabilities(LOGIT_SD = DEFAULT_SD, KEYS = DEFAULT_KEYS): TensorPrediction {
  const { second, elementLog2Spread } = softmaxMoments(LOGIT_SD * LOGIT_SD, KEYS);
  const p: MagnitudeProfile = { elements: ROWS * KEYS, zeroFraction: 0, shape: "log-normal", rms: Math.sqrt(second), log2Spread: 0, bound: 1, elementLog2Spread };
  return {
    id: "attention-1/activation:probabilities",
    layer: "attention-1",
    layerIndex: 1,
    family: "attention",
    role: "activation",
    slot: "activations",
    shape: [ROWS, KEYS],
    start: p,
    end: p,
    ledger: [],
    source: "predicted",
  };
}

describe("softmax probabilities in binary16", () => {
  const reference = simulated();
  const t = probabilities();
  const risk = tensorFormatRisk(t, BINARY16, tensorStatistics(t, 1, DEFAULT_THRESHOLDS), {
    judged: true,
    perTensorScaling: false,
    thresholds: DEFAULT_THRESHOLDS as RiskThresholds,
  });

  it("the reference: many elements flush, but they carry almost none of a row's mass", () => {
    // past the old rule's 10% share of elements (a "fails" there), while the rows lose under 1e-4 of their mass
    expect(reference.elements).toBeGreaterThan(DEFAULT_THRESHOLDS.flushedFails);
    expect(reference.mass).toBeLessThan(1e-4);
    expect(reference.worstRowMass).toBeLessThan(1e-3);
  });

  it("are judged by the flushed mass: no finding where the reference loses under 1e-4 of each row", () => {
    expect(isProbabilityRow(t)).toBe(true);
    // the element share is still reported as a number, past the 10% the old rule failed on (as the reference is)
    expect(risk.worst.flushedFraction).toBeGreaterThan(DEFAULT_THRESHOLDS.flushedFails);
    expect(risk.findings.map((f) => f.kind)).not.toContain("flushed-values");
    expect(risk.findings.map((f) => f.kind)).not.toContain("probability-mass-flushed");
    expect(risk.verdict).not.toBe("fails");
  });

  it("their subnormal elements are judged by the noise their rounding adds to the rows: many elements, little noise, no finding", () => {
    // logits of sd 3 over 1024 keys: most elements land between 2^-25 and 2^-14, past the 25% share of elements an
    // element count would call at risk, while their rounding adds about 1e-9 of the rows' squared norm (bfloat16's
    // own rounding adds 2.75e-6)
    const wide = simulated(3, 1024);
    expect(wide.subnormalElements).toBeGreaterThan(0.25);
    expect(wide.subnormalNoise).toBeLessThan(DEFAULT_THRESHOLDS.subnormalNoiseAtRisk / 100);
    const t3 = probabilities(3, 1024);
    const judged = tensorFormatRisk(t3, BINARY16, tensorStatistics(t3, 1, DEFAULT_THRESHOLDS), {
      judged: true,
      perTensorScaling: false,
      thresholds: DEFAULT_THRESHOLDS as RiskThresholds,
    });
    expect(judged.worst.subnormalFraction).toBeGreaterThan(0.25);
    // the predicted noise against the rounded rows: within a factor 3 (the engine's log-normal law of a softmax row is an
    // approximation of the rows' own law)
    expect(judged.worst.subnormalNoise / wide.subnormalNoise).toBeGreaterThan(1 / 3);
    expect(judged.worst.subnormalNoise / wide.subnormalNoise).toBeLessThan(3);
    expect(judged.findings.map((f) => f.kind)).not.toContain("subnormal-values");
  });

  it("a row whose mass does flush is still found: the same logits scaled down by 2^-20", () => {
    const small = probabilities();
    const shrink = (p: MagnitudeProfile): MagnitudeProfile => ({ ...p, rms: p.rms * 2 ** -20, bound: 2 ** -20 });
    small.start = shrink(small.start);
    small.end = small.start;
    const shrunk = tensorFormatRisk(small, BINARY16, tensorStatistics(small, 1, DEFAULT_THRESHOLDS), {
      judged: true,
      perTensorScaling: false,
      thresholds: DEFAULT_THRESHOLDS as RiskThresholds,
    });
    // reference: the same rows times 2^-20 (exact in binary64) rounded to binary16
    const random = createRandom(17);
    const logits = new Float64Array(KEYS);
    let lost = 0;
    for (let row = 0; row < ROWS; row++) {
      random.fillNormal(logits);
      let max = -Infinity;
      for (let j = 0; j < KEYS; j++) max = Math.max(max, LOGIT_SD * (logits[j] as number));
      let sum = 0;
      for (let j = 0; j < KEYS; j++) sum += Math.exp(LOGIT_SD * (logits[j] as number) - max);
      for (let j = 0; j < KEYS; j++) {
        const p = Math.exp(LOGIT_SD * (logits[j] as number) - max) / sum;
        if (f16round(p * 2 ** -20) === 0) lost += p;
      }
    }
    const referenceMass = lost / ROWS;
    expect(referenceMass).toBeGreaterThan(DEFAULT_THRESHOLDS.flushedAtRisk);
    const finding = shrunk.findings.find((f) => f.kind === "probability-mass-flushed");
    expect(finding).toBeDefined();
    // the log-normal model of the row's lower tail against the float64 rows: on the safe side, within a factor 6
    // (measured 4.8: the model's element spread √q/ln 2 widens the tail past a real row's, whose denominator is shared)
    expect(finding!.value).toBeGreaterThanOrEqual(referenceMass);
    expect(finding!.value / referenceMass).toBeLessThan(6);
  });
});
