import { describe, expect, it } from "vitest";
import { withProfiles } from "../../src/magnitude/copy.js";
import type { MagnitudeProfile, TensorPrediction } from "../../src/magnitude/types.js";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { predictForCheck } from "../../src/magnitude/predict.js";
import { clippedBy, gradientClips, weightGradientsOf } from "../../src/risk/second-moments.js";
import { act, dense, makeSpec } from "./build-spec.js";

// A tensor's ledger is worked out when first read (src/magnitude/predict.ts): the clipped and summed copies the judge
// makes must not read it (a spread did, on every weight gradient: a 1,000-layer check with clip-norm took 3.5× longer).
const profile = (rms: number): MagnitudeProfile => ({ elements: 4, zeroFraction: 0, shape: "gaussian", rms, log2Spread: 0 }) as MagnitudeProfile;

describe("withProfiles: a copy with other profiles keeps the ledger lazy", () => {
  it("reads the original's ledger only when the copy's is read, and gives the same entries", () => {
    let reads = 0;
    const entries = [{ layer: "a" }];
    const tensor = { id: "a/weight-gradient", role: "weight-gradient", start: profile(1), end: profile(2) } as unknown as TensorPrediction;
    Object.defineProperty(tensor, "ledger", { enumerable: true, configurable: true, get: () => (reads++, entries) });
    const copy = withProfiles(tensor, profile(3), profile(4));
    expect(reads).toBe(0);
    expect([copy.id, copy.role, copy.start.rms, copy.end.rms, tensor.start.rms]).toEqual(["a/weight-gradient", "weight-gradient", 3, 4, 1]);
    expect(copy.ledger).toBe(entries);
    expect(reads).toBe(1);
    // JSON as the original's: the same keys, the ledger included
    expect(Object.keys(copy)).toEqual(Object.keys(tensor));
  });

  it("a copy's ledger can be set, as a prediction's can", () => {
    const tensor = { id: "t", start: profile(1), end: profile(1) } as unknown as TensorPrediction;
    Object.defineProperty(tensor, "ledger", { enumerable: true, configurable: true, get: () => [] });
    const copy = withProfiles(tensor, profile(1), profile(1));
    const mine = [{ layer: "x" }] as unknown as TensorPrediction["ledger"];
    copy.ledger = mine;
    expect(copy.ledger).toBe(mine);
  });

  it("clipped weight gradients of a real prediction: same ledgers as the tensors they copy", () => {
    const s = makeSpec([dense("d0", 16), act("a0"), dense("d1", 4)]);
    const built = buildGraph(s);
    if (!built.ok) throw new Error("does not build");
    const prediction = predict(built.graph, s);
    const gradients = weightGradientsOf(prediction);
    // a clip far below the global norm scales every gradient down
    const clipped = clippedBy(gradients, gradientClips(1e-6, gradients));
    expect(clipped.length).toBe(gradients.length);
    for (let i = 0; i < clipped.length; i++) {
      expect(clipped[i]!.start.rms).toBeLessThan(gradients[i]!.start.rms);
      expect(JSON.stringify(clipped[i]!.ledger)).toBe(JSON.stringify(gradients[i]!.ledger));
    }
  });

  it("a tensor of the prediction check keeps (ledger through its class): the copy reads the same ledger and has the same own keys", () => {
    const s = makeSpec([dense("d0", 16), act("a0"), dense("d1", 4)]);
    const built = buildGraph(s);
    if (!built.ok) throw new Error("does not build");
    const kept = weightGradientsOf(predictForCheck(built.graph, s));
    const returned = weightGradientsOf(predict(built.graph, s));
    const clipped = clippedBy(kept, gradientClips(1e-6, kept));
    expect(clipped.length).toBe(returned.length);
    for (let i = 0; i < clipped.length; i++) {
      expect(Object.keys(clipped[i]!)).toEqual(Object.keys(kept[i]!));
      expect(clipped[i]!.ledger.length).toBeGreaterThan(0);
      expect(JSON.stringify(clipped[i]!.ledger)).toBe(JSON.stringify(returned[i]!.ledger));
    }
  });
});
