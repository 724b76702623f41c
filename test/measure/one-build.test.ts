/**
 * A spec with measured weights is built into its graph and matched to the weight files once per evaluation: the
 * problems of the measured data (a weight with another element count, README "Measured data in a check") and the
 * check share one `measuredNetwork`. The graph builder and the weight matcher are wrapped in spies to count the calls;
 * results are compared with the check that builds for itself. Weight files come from the independent writer in
 * writers.ts; the two-layer probe is probe-spec.ts's.
 */
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, beforeEach, describe, expect, it, vi } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { calibrateGraph, type Measurements } from "../../src/measure/index.js";
import { check, checkFile, loadSpecMeasurements, measuredIssues, measuredNetwork, measuredWeightProblems } from "../../src/check.js";
import { comparePlans } from "../../src/compare.js";
import { checkMeasuredSpec, MeasuredDataError } from "../../src/batch/measured.js";
import { loadAndCheck } from "../../src/cli/check.js";
import { checkVariants } from "../../src/cli/check-vary.js";
import { runCompare } from "../../src/cli/compare.js";
import { takeExitCode } from "../../src/cli/errors.js";
import { parseSpec, type SpecPosition } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";
import { alternating, probeSpec } from "./probe-spec.js";
import { encode, safetensorsBytes, scratch } from "./writers.js";

vi.mock("../../src/graph/index.js", async (importOriginal) => {
  const original = await importOriginal<typeof import("../../src/graph/index.js")>();
  return { ...original, buildGraph: vi.fn(original.buildGraph) };
});
vi.mock("../../src/measure/index.js", async (importOriginal) => {
  const original = await importOriginal<typeof import("../../src/measure/index.js")>();
  return { ...original, calibrateGraph: vi.fn(original.calibrateGraph) };
});

const builds = () => vi.mocked(buildGraph).mock.calls.length;
const matchings = () => vi.mocked(calibrateGraph).mock.calls.length;

const files = scratch();
afterAll(() => files.cleanup());

// a checkpoint of the 8-wide probe (fc1 8×16, fc2 4×8: a dense layer's weight is outputs × inputs)
files.write(
  "ckpt.safetensors",
  safetensorsBytes([
    { name: "fc1.weight", dtype: "F32", shape: [8, 16], data: encode("F32", alternating(128, 0.5)) },
    { name: "fc2.weight", dtype: "F32", shape: [4, 8], data: encode("F32", alternating(32, 0.25)) },
  ]),
);
writeFileSync(join(files.dir, "stats.csv"), "tensor,role,rms,max\nfc2,pre-activation,0.25,1.5\n");

function writeSpec(name: string, text: string): string {
  const path = join(files.dir, name);
  writeFileSync(path, text);
  return path;
}

const fullText = probeSpec("one-build-probe", "measured:\n  weights: [ckpt.safetensors]\n  statistics: stats.csv\n");
const full = writeSpec("full.yaml", fullText);
// the 4-wide network: both weights of the checkpoint hold another number of elements
const narrow = writeSpec("narrow.yaml", probeSpec("one-build-probe", "measured:\n  weights: [ckpt.safetensors]\n", 4));

function parsed(path: string, text: string): NetworkSpec {
  const result = parseSpec(text, path);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return result.spec;
}

async function loaded(): Promise<{ spec: NetworkSpec; measurements: Measurements }> {
  const spec = parsed(full, fullText);
  const measurements = await loadSpecMeasurements(spec);
  if (measurements === undefined) throw new Error("the probe has a measured section");
  return { spec, measurements };
}

beforeEach(() => {
  vi.mocked(buildGraph).mockClear();
  vi.mocked(calibrateGraph).mockClear();
  takeExitCode();
});

describe("one graph build and one weight matching per evaluation", () => {
  it("check given the measured network builds and matches nothing again, and answers as check given the measurements", async () => {
    const { spec, measurements } = await loaded();
    const network = measuredNetwork(spec, measurements);
    expect([builds(), matchings()]).toEqual([1, 1]);
    const reused = check(spec, {}, network);
    expect([builds(), matchings()]).toEqual([1, 1]);
    // the check that builds for itself: one more build and matching, the same answer
    const own = check(spec, {}, measurements);
    expect([builds(), matchings()]).toEqual([2, 2]);
    expect(reused).toEqual(own);
    expect(reused.tensors.find((t) => t.id === "fc1/weight")?.source).toBe("measured");
    expect(reused.tensors.find((t) => t.id === "fc2/pre-activation")?.source).toBe("measured");
  });

  it("a copy of the spec with another plan takes the same network; another network is a TypeError", async () => {
    const { spec, measurements } = await loaded();
    const network = measuredNetwork(spec, measurements);
    const other = spec.plans[0] ?? { ...spec.precision, name: "all-binary32", activations: "binary32", weights: "binary32", gradients: "binary32" };
    const planned = { ...spec, precision: other };
    const reused = check(planned, {}, network);
    expect(builds()).toBe(1);
    expect(reused).toEqual(check(planned, {}, measurements));
    const narrower = parsed(narrow, probeSpec("one-build-probe", "measured:\n  weights: [ckpt.safetensors]\n", 4));
    expect(() => check(narrower, {}, network)).toThrow(TypeError);
    expect(() => check(narrower, {}, network)).toThrow(/made for another network than the spec "one-build-probe"/);
  });

  it("a network that cannot be built: CheckInputError from the one build, no weight problems", async () => {
    const { spec, measurements } = await loaded();
    const broken: NetworkSpec = { ...spec, layers: [] };
    const network = measuredNetwork(broken, measurements);
    expect(network.weightProblems).toEqual([]);
    expect(() => check(broken, {}, network)).toThrow("the network has no layers");
    expect([builds(), matchings()]).toEqual([1, 0]);
  });

  it("checkFile: one build and one matching, the warnings as measuredWeightProblems gives them", async () => {
    const checked = await checkFile(narrow);
    expect([builds(), matchings()]).toEqual([1, 1]);
    if (!checked.ok) throw new Error("the spec does not load");
    const spec = parsed(narrow, probeSpec("one-build-probe", "measured:\n  weights: [ckpt.safetensors]\n", 4));
    const expected = measuredWeightProblems(spec, await loadSpecMeasurements(spec));
    expect(expected).toHaveLength(2);
    expect(checked.warnings.map((w) => w.message)).toEqual(expected);
    await checkFile(full);
    expect([builds(), matchings()]).toEqual([3, 3]);
  });

  it("check, explain and report (loadAndCheck): one build and one matching", async () => {
    const result = await loadAndCheck(full, {});
    expect(result?.tensors.find((t) => t.id === "fc1/weight")?.source).toBe("measured");
    expect([builds(), matchings()]).toEqual([1, 1]);
    expect(takeExitCode()).toBe(0);
  });

  it("check --vary: one build and one matching per variant", async () => {
    const runs = await checkVariants(full, ["training.batch=4,8,16"], {});
    expect(runs).toHaveLength(3);
    expect([builds(), matchings()]).toEqual([3, 3]);
  });

  it("batch worker: one build and one matching per spec; problems still stop the check as an input error", async () => {
    const { spec } = await loaded();
    const summary = await checkMeasuredSpec(spec, {}, new Map());
    expect(summary.verdict).toMatch(/^(fits|at-risk|fails)$/);
    expect([builds(), matchings()]).toEqual([1, 1]);
    const narrower = parsed(narrow, probeSpec("one-build-probe", "measured:\n  weights: [ckpt.safetensors]\n", 4));
    const refused = checkMeasuredSpec(narrower, {}, new Map());
    await expect(refused).rejects.toBeInstanceOf(MeasuredDataError);
    await expect(refused).rejects.toThrow(/tensor "fc1\.weight" has 128 elements \[8, 16\] but fc1\/weight needs 64 \[4, 16\]/);
    expect([builds(), matchings()]).toEqual([2, 2]);
  });

  it("compare: one build and one matching for the problems and every plan's check, the same ranking", async () => {
    const { spec, measurements } = await loaded();
    const shared = comparePlans(spec, { measurements: measuredNetwork(spec, measurements) });
    expect(shared.outcomes.length).toBeGreaterThan(1);
    expect([builds(), matchings()]).toEqual([1, 1]);
    // the comparison that builds in every plan's check: one build per plan
    const own = comparePlans(spec, { measurements });
    expect(builds()).toBe(1 + own.outcomes.length);
    expect(shared).toEqual(own);

    vi.mocked(buildGraph).mockClear();
    const write = vi.spyOn(process.stdout, "write").mockImplementation(() => true);
    try {
      await runCompare(full, { json: true });
    } finally {
      write.mockRestore();
    }
    expect(builds()).toBe(1);
    takeExitCode();
  });
});

describe("measuredIssues positions problem lines", () => {
  it("each line becomes an issue at the spec's measured section", () => {
    const at: SpecPosition = { file: "spec.yaml", line: 30, column: 3 };
    const locate = vi.fn(() => at);
    expect(measuredIssues(["a.safetensors: no such file", "b.csv:2:1: bad"], locate)).toEqual([
      { ...at, path: "measured", message: "a.safetensors: no such file" },
      { ...at, path: "measured", message: "b.csv:2:1: bad" },
    ]);
    expect(locate).toHaveBeenCalledWith(["measured"]);
    expect(measuredIssues([], locate)).toEqual([]);
  });
});
