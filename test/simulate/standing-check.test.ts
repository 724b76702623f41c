/**
 * The project's standing check of the magnitude engine: for every example spec in specs/, the prediction at
 * initialisation must agree with a float64 simulation of the same (shrunk) network.
 *
 * - rms of the nonzero elements: predicted (median draw) within 0.5 binade of the median over seeds;
 * - share of elements zero after storage in the planned format (exact zeros plus flushed values): within 0.05.
 *
 * The simulation runs in binary64 without storage rounding (`round: false`) and counts what storing each tensor
 * would flush: the magnitude engine predicts exact-arithmetic magnitudes and what storage would do to them, so
 * an earlier tensor's flushing must not leak into a later one's magnitude here. Sizes are shrunk for speed; the
 * predictions are made for the same shrunk network, so the model is still what is tested.
 *
 * Two lists widen the check, each entry with its reason:
 * - KNOWINGLY_APPROXIMATE: where the comparison itself is uncertain (a few draws of a log-normal scale);
 * - KNOWN_MODEL_FAILURES: real disagreements of the magnitude engine found by this check, with the numbers, a
 *   diagnosis and their own larger tolerance (the largest disagreement measured when the entry was last reviewed,
 *   plus half a binade / 0.1 of share): they are held to it, so a change that makes them worse still fails.
 */
import { readFileSync, readdirSync } from "node:fs";
import { join } from "node:path";
import { describe, expect, it } from "vitest";
import { predict } from "../../src/magnitude/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { FORMATS, type FormatName } from "../../src/formats/index.js";
import { predictedFlushedFraction, simulate, STANDING_TOLERANCE, zeroAfterStorage, type ShrinkFactors } from "../../src/simulate/index.js";
import { ROOT } from "../helpers/run.js";

interface Setup {
  shrink: Partial<ShrinkFactors>;
  draws: number;
}

/** How each example is shrunk (fan-in ratios kept: see src/simulate/shrink.ts) and how many seeds are drawn. */
const SETUPS: Record<string, Setup> = {
  "deep-relu-he": { shrink: { width: 2, batch: 16 }, draws: 5 },
  "deep-relu-glorot": { shrink: { width: 2, batch: 16 }, draws: 5 },
  "deep-sigmoid": { shrink: { batch: 8 }, draws: 5 },
  "residual-mlp-unscaled": { shrink: { width: 4, batch: 16 }, draws: 3 },
  "transformer-encoder": { shrink: { width: 8, batch: 16, positions: 8 }, draws: 2 },
  "cnn-batchnorm": { shrink: { width: 4, batch: 16 }, draws: 3 },
  "wide-classifier": { shrink: { width: 8, batch: 64, classes: 16 }, draws: 3 },
};

/**
 * Every tensor's scale varies from draw to draw by its predicted spread σ (binades, finite width: Hanin & Nica
 * 2019). The median of n draws is then uncertain by about 1.2533·σ/√n (the asymptotic standard error of a
 * sample median, √(π/2)·σ/√n; common practice), so the rms tolerance is 0.5 binade plus two such errors, and the
 * zero-after-storage tolerance is 0.05 plus what moving the scale by those two errors does to the predicted share.
 * With σ = 0 both are the 0.5 binade and 0.05.
 */
const KNOWINGLY_APPROXIMATE = {
  reason: "finite-width spread makes the median of a few draws uncertain by 1.2533·σ/√draws binades",
  shift: (spread: number, draws: number): number => (2 * 1.2533 * spread) / Math.sqrt(draws),
};

interface KnownFailure {
  spec: string;
  /** tensor ids matched */
  ids: RegExp;
  /** measured against predicted when this entry was written */
  numbers: string;
  diagnosis: string;
  /** the larger rms tolerance these tensors are held to, in binades */
  binades: number;
  /** the larger tolerance of the zero-after-storage share */
  zeroShare: number;
}

/** Real disagreements of the magnitude engine (found by this check), left for the model to fix. */
export const KNOWN_MODEL_FAILURES: KnownFailure[] = [
  {
    spec: "deep-relu-he",
    ids: /weight-gradient(:bias)?$/,
    numbers:
      "early and middle layers' weight gradients: 0.06–0.11 more exact zeros than the predicted 0.08–0.50, and rms up to 0.6 binade above the prediction (layers 14 and 43–48; 0.8 at layers 13–16 before two samples' own parts of the gradient were paired, test/magnitude/relu-sample-pairs.test.ts, and up to 1.1 before the loss's curvature was carried, test/magnitude/loss-curvature.test.ts); the bias gradients of the last hidden layers and the classifier, 0.67–0.87 binade below before the softmax seed's shared part was computed exactly, are now within 0.2",
    diagnosis:
      "the batch correlation is now carried (arc-cosine map, Cho & Saul 2009) into the coherent part of the batch sum and into the share of units off for the whole batch, which matches the measured zeros within 0.11 and the rms of most layers within 0.5 binade. The softmax seed's shared part E[p_n p_m] − 1/C² is now exact for Gaussian logits (src/numeric/softmax.ts), which fixed the classifier's bias gradient (a sum of the seed alone: −0.83 → +0.13 binade) and lowered every weight gradient behind it by 0.3–1 binade, so the remaining rms gaps (+0.2 to +1.1) lie in the coherent part of the weight-gradient sums; in the early layers the finite width spreads the pairwise correlations around the mean-field value, giving a few more units off for the whole batch",
    binades: 1.1,
    zeroShare: 0.21,
  },
  {
    spec: "residual-mlp-unscaled",
    ids: /relu-1\/activation$|dense-0\/activation-gradient$|weight-gradient(:bias)?$/,
    numbers:
      "zero share only: ReLU outputs (and the gradients they gate) 0.42–0.56 exact zeros in the median of 3 draws against 1/2; weight gradients of a few blocks 0.15–0.27 exact zeros against 0.25–0.35 predicted. Their rms is within the standard tolerance with the spread allowance (largest gap −1.33 binades at a predicted spread of 1.41)",
    diagnosis:
      "the residual stream makes the batch correlated, so a unit is on or off for most of the batch: the ReLU zero share varies from draw to draw around 1/2 (3 draws), and the share of units off for the whole batch, which leaves whole rows of the weight gradients zero, varies with it. The loss seed now inherits the output's draw-to-draw spread and the loss value is predicted at the median draw (src/magnitude/loss.ts), which removed the rms disagreements this entry used to hold (loss value −3.5, gradients −1.7 to −2.0 binades)",
    binades: 1.9,
    zeroShare: 0.21,
  },
];

function specFiles(): string[] {
  const dir = join(ROOT, "specs");
  return readdirSync(dir)
    .filter((f) => f.endsWith(".yaml"))
    .sort()
    .map((f) => join(dir, f));
}

function knownFailure(spec: string, id: string): KnownFailure | undefined {
  return KNOWN_MODEL_FAILURES.find((k) => k.spec === spec && k.ids.test(id));
}

describe("standing check: every example spec's prediction against a float64 simulation", () => {
  it("has a setup for every example spec", () => {
    const names = specFiles().map((f) => f.replace(/^.*\//, "").replace(/\.yaml$/, ""));
    expect(names.length).toBeGreaterThan(0);
    for (const name of names) expect(SETUPS[name], `no standing-check setup for specs/${name}.yaml`).toBeDefined();
  });

  for (const file of specFiles()) {
    const name = file.replace(/^.*\//, "").replace(/\.yaml$/, "");
    it(`${name}: rms within 0.5 binade and zero-after-storage share within 0.05, outside the listed cases`, () => {
      const setup = SETUPS[name];
      if (setup === undefined) return; // reported by the test above
      const parsed = parseSpec(readFileSync(file, "utf8"), file);
      if (!parsed.ok) throw new Error(`${file}: ${parsed.issues[0]?.message}`);
      const { comparison } = simulate(parsed.spec, { ...setup, seed: 1, round: false, predict });
      expect(comparison).toBeDefined();
      expect(comparison!.predictedOnly, "predicted tensors the simulation does not measure").toEqual([]);
      const failures: string[] = [];
      const known: string[] = [];
      for (const row of comparison!.rows) {
        const predictedZero = row.predictedZeroFraction + row.predictedFlushed;
        const measuredZero = zeroAfterStorage(row.measured.median);
        const shift = KNOWINGLY_APPROXIMATE.shift(row.predictedLog2Spread, setup.draws);
        const binades = STANDING_TOLERANCE.binades + shift;
        const rmsOk = Math.abs(row.differenceBinades) <= binades || (row.predictedRms === 0 && row.measured.median.rms === 0);
        const format = FORMATS[row.format as FormatName];
        const shifted = [-shift, shift].map((d) => row.predictedProfile.zeroFraction + predictedFlushedFraction({ ...row.predictedProfile, rms: row.predictedProfile.rms * 2 ** d }, format));
        const zeroTolerance = STANDING_TOLERANCE.flushed + Math.max(...shifted.map((z) => Math.abs(z - predictedZero)));
        const zeroOk = Number.isNaN(predictedZero) || Math.abs(measuredZero - predictedZero) <= zeroTolerance;
        if (rmsOk && zeroOk) continue;
        const line = `${row.id}: rms predicted ${row.predictedRms.toExponential(3)}, measured ${row.measured.median.rms.toExponential(3)} (${row.differenceBinades.toFixed(2)} binades, allowed ${binades.toFixed(2)}); zero after storage predicted ${predictedZero.toFixed(3)}, measured ${measuredZero.toFixed(3)} (allowed ±${zeroTolerance.toFixed(3)})`;
        const knownCase = knownFailure(name, row.id);
        if (knownCase === undefined) failures.push(line);
        else if (Math.abs(row.differenceBinades) > knownCase.binades || Math.abs(measuredZero - predictedZero) > knownCase.zeroShare) {
          failures.push(`${line}; beyond the known case's own tolerance (${knownCase.binades} binades, ±${knownCase.zeroShare})`);
        } else known.push(line);
      }
      if (known.length > 0) console.info(`standing check, ${name}: ${known.length} tensor(s) of KNOWN_MODEL_FAILURES within their own larger tolerance`);
      expect(failures, `${name}: disagreements outside the known lists`).toEqual([]);
    });
  }
});

