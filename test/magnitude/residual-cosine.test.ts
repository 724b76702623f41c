import { describe, expect, it } from "vitest";
import { predict } from "../../src/magnitude/index.js";
import { simulate } from "../../src/simulate/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { residualStack } from "../helpers/simulated.js";

// A narrow head's batch rms spreads over draws of its weights by 2·D/width, D = 1/N + (1 − 1/N)·E[c²] with c two
// samples' input cosine (moments of a Gaussian quadratic form), not by 2/width as for one sample. The cosine's E[c²] is
// now carried through residual sums (the parts' spreads added as standard deviations, Minkowski's inequality; the cross
// terms 2·w_x·w_F/n, as Fisher 1915's 1/n). Before, a residual sum dropped it and the head took D = 1: a width-1 head's
// log-variance V = 2, its median draw e^(−V/4) below the mean, 0.6 binade under the measurement here, the spread 4×
// too wide. Checked against the project's float64 simulation (src/simulate), 25 draws of weights and data.

const spec = (head: number): string => residualStack("tide-level", { gain: 2, head });

describe("two samples' cosine through residual sums", () => {
  it("a width-1 head after 16 tanh blocks: its median rms within 0.15 binade of the draws' and its spread within ×1.5", () => {
    const parsed = parseSpec(spec(1), "tide-level.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const { comparison } = simulate(parsed.spec, { draws: 25, seed: 1, round: false, predict });
    const row = comparison!.rows.find((r) => r.id === "head/pre-activation")!;
    const logs = row.measured.draws.map((s) => Math.log2(s.rms));
    const mean = logs.reduce((a, b) => a + b, 0) / logs.length;
    const sd = Math.sqrt(logs.reduce((a, b) => a + (b - mean) ** 2, 0) / (logs.length - 1));
    // the geometric mean over draws estimates the median of a log-normal rms (Hanin & Nica 2019)
    expect(Math.abs(Math.log2(row.predictedRms) - mean)).toBeLessThan(0.15);
    expect(row.predictedLog2Spread / sd).toBeGreaterThan(1 / 1.5);
    expect(row.predictedLog2Spread / sd).toBeLessThan(1.5);
  });
});
