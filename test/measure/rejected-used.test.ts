/**
 * A tensor found for two weights by the default matching rule is used for the first only (README, "Measured data in
 * a check": the default rule takes a tensor once; only tensors named in measured.names may be shared): the rejection
 * names the weight that took it, and the check's notes say which. Weight files come from the independent writer in
 * writers.ts.
 */
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { checkFile, loadSpecMeasurements, measuredNetwork } from "../../src/check.js";
import type { RejectedMatch } from "../../src/measure/index.js";
import { parseSpec } from "../../src/spec/index.js";
import { alternating } from "./probe-spec.js";
import { encode, safetensorsBytes, scratch } from "./writers.js";

const files = scratch();
afterAll(() => files.cleanup());

// an invented probe: a repeat whose one dense layer is named r.0.fc, then a dense layer named fc; the checkpoint has
// r.0.fc.weight only, which fc finds by the ending ".fc.weight" after r.0.fc has taken it
const TEXT = `name: claimed-twice-probe
description: an invented probe whose two dense layers end in the same name
input: { features: 8, scale: 1.0 }
training:
  batch: 4
  loss: { kind: mean-squared-error, reduction: mean, target-scale: 1.0 }
  optimizer: { kind: sgd, learning-rate: { peak: 1.0e-3, end: 1.0e-3 } }
layers:
  - type: repeat
    name: r
    times: 1
    layers:
      - type: dense
        name: fc
        width: 8
        bias: false
        init: he-normal
  - type: dense
    name: fc
    width: 8
    bias: false
    init: he-normal
measured:
  weights: [ckpt.safetensors]
`;
files.write("ckpt.safetensors", safetensorsBytes([{ name: "r.0.fc.weight", dtype: "F32", shape: [8, 8], data: encode("F32", alternating(64, 0.5)) }]));
const path = join(files.dir, "claimed.yaml");
writeFileSync(path, TEXT);

/** The words of a rejection; a `used` one always names the weight that took the tensor (a type error otherwise). */
function takenBy(rejected: RejectedMatch): string {
  return rejected.reason === "used" ? rejected.usedBy : `not taken (${rejected.reason})`;
}

describe("a tensor the default rule finds for two weights", () => {
  it("is used for the first; the second's rejection names the first", async () => {
    const parsed = parseSpec(TEXT, path);
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const network = measuredNetwork(parsed.spec, await loadSpecMeasurements(parsed.spec));
    const calibration = network.calibration!;
    expect(calibration.matches.map((m) => [m.id, m.tensor])).toEqual([["r.0.fc/weight", "r.0.fc.weight"]]);
    const rejected = calibration.unmatched.find((u) => u.id === "fc/weight")?.rejected;
    expect(rejected).toMatchObject({ reason: "used", usedBy: "r.0.fc/weight", tensor: "r.0.fc.weight" });
    expect(takenBy(rejected!)).toBe("r.0.fc/weight");
    // tied on purpose or not, a tensor taken twice is no element-count problem of the measured data
    expect(network.weightProblems).toEqual([]);
  });

  it("the check's notes name the weight that took it", async () => {
    const checked = await checkFile(path);
    if (!checked.ok) throw new Error("the spec does not load");
    expect(checked.result.assumptions.join("\n")).toMatch(
      /1 weight keeps the spec's initialisation because the tensor it matched cannot be used: fc\/weight \(r\.0\.fc\.weight is already used for r\.0\.fc\/weight\)\./,
    );
  });
});
