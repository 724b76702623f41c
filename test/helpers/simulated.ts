/**
 * Prediction against the project's float64 simulation (src/simulate: the described network run forward and backward on
 * random data), for the tests that hold a magnitude rule to it.
 */
import { expect, it } from "vitest";
import { predict } from "../../src/magnitude/index.js";
import { simulate } from "../../src/simulate/index.js";
import { parseSpec } from "../../src/spec/index.js";

/** A plan that stores every tensor in binary32, so that what a test compares is the magnitude model alone. */
export const WIDE_PLAN = `precision:
  activations: binary32
  weights: binary32
  gradients: binary32
`;

/**
 * log2(measured rms / predicted rms) of each tensor whose id matches `pattern`, the measurement the median of `draws`
 * draws (seeds 1 …), unrounded.
 */
export function measuredDifferences(yaml: string, name: string, pattern: RegExp, draws = 5): Map<string, number> {
  const parsed = parseSpec(yaml, `${name}.yaml`);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  const { comparison } = simulate(parsed.spec, { draws, seed: 1, round: false, predict });
  return new Map(comparison!.rows.filter((r) => pattern.test(r.id)).map((r) => [r.id, r.differenceBinades]));
}

/** A tensor's draw-to-draw spread: measured over the draws and predicted, both as the standard deviation of log2 rms. */
export interface SpreadRow {
  measured: number;
  predicted: number;
  /** log2(measured rms / predicted rms), the measurement the median draw (as measuredDifferences) */
  difference: number;
}

/**
 * The measured and predicted draw-to-draw spread of every tensor, unrounded, over `draws` draws (seeds 1 …). The rms
 * measured is of all elements, zeros included (the simulation's rms over the nonzero ones times √(1 − zero share)):
 * the rules' spread is that of ln of a tensor's squared norm (Hanin & Nica 2019), and a ReLU unit's count of nonzero
 * terms moves with its mean square, so the rms of the nonzero elements alone spreads less.
 */
export function measuredSpreads(yaml: string, name: string, draws: number): Map<string, SpreadRow> {
  const parsed = parseSpec(yaml, `${name}.yaml`);
  if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
  const { comparison } = simulate(parsed.spec, { draws, seed: 1, round: false, predict });
  const rows = new Map<string, SpreadRow>();
  for (const r of comparison!.rows) {
    const logs = r.measured.draws.map((d) => Math.log2(d.rms * Math.sqrt(1 - d.zeroFraction)));
    const mean = logs.reduce((a, b) => a + b, 0) / logs.length;
    const variance = logs.reduce((a, b) => a + (b - mean) ** 2, 0) / (logs.length - 1);
    rows.set(r.id, { measured: Math.sqrt(variance), predicted: r.predictedLog2Spread, difference: r.differenceBinades });
  }
  return rows;
}

/**
 * One test per `[tensor id, what it checks]`: the tensor's predicted spread within a factor `factor` of the measured,
 * either way (rows from {@link measuredSpreads}; the measured spread's own sampling error over n draws is about
 * 1/√(2(n − 1)), the standard error of a standard deviation).
 */
export function spreadsWithin(rows: Map<string, SpreadRow>, cases: readonly (readonly [string, string])[], factor = 1.35): void {
  for (const [id, what] of cases) {
    it(what, () => {
      const row = rows.get(id);
      expect(row, id).toBeDefined();
      const ratio = row!.predicted / row!.measured;
      const said = `${id}: predicted ${row!.predicted.toFixed(3)}, measured ${row!.measured.toFixed(3)}`;
      expect(ratio, said).toBeGreaterThan(1 / factor);
      expect(ratio, said).toBeLessThan(factor);
    });
  }
}

/**
 * The spec of an invented image classifier: `layers` (YAML list items, one a line, a leading newline dropped) then a
 * flatten and a 4-way dense head, trained with cross-entropy under {@link WIDE_PLAN}.
 */
export function imageClassifier(name: string, input: string, layers: string, batch = 24): string {
  return `name: ${name}
description: invented
input: { ${input} }
training: { batch: ${batch}, loss: { kind: cross-entropy, classes: 4 } }
${WIDE_PLAN}layers:
${layers.replace(/^\n/, "")}  - flatten
  - { type: dense, name: head, width: 4 }
`;
}

/**
 * The spec of an invented regressor of width 64: a dense stem, 16 residual blocks of dense → `activation` → dense (LeCun
 * initialisation at `gain`, branch multiplier `multiplier`), a dense head of `head` outputs, mean squared error, under
 * {@link WIDE_PLAN}.
 */
export function residualStack(name: string, options: { gain: number; multiplier?: number; activation?: string; head?: number }): string {
  const { gain, multiplier = 1, activation = "tanh", head = 4 } = options;
  return `name: ${name}
description: invented
input: { features: 64 }
training: { batch: 64, loss: { kind: mean-squared-error } }
${WIDE_PLAN}layers:
  - { type: dense, name: stem, width: 64 }
  - type: repeat
    name: trunk
    times: 16
    layers:
      - type: residual
        multiplier: ${multiplier}
        branch:
          - { type: dense, width: 64, init: { kind: lecun, gain: ${gain} } }
          - ${activation}
          - { type: dense, width: 64, init: { kind: lecun, gain: ${gain} } }
  - { type: dense, name: head, width: ${head} }
`;
}
