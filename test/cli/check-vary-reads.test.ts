/**
 * `check --vary` reads the spec file once and the files its `measured` section names once per distinct section,
 * however many variants there are: counted at the file-system calls (node:fs/promises), in process.
 */
import * as fsp from "node:fs/promises";
import { join, resolve } from "node:path";
import { afterAll, beforeEach, describe, expect, it, vi } from "vitest";
import { encode, safetensorsBytes, scratch } from "../measure/writers.js";

vi.mock("node:fs/promises", async (importOriginal) => {
  const actual = await importOriginal<typeof import("node:fs/promises")>();
  return { ...actual, readFile: vi.fn(actual.readFile) };
});

const { checkVariants } = await import("../../src/cli/check-vary.js");

const files = scratch();
afterAll(() => files.cleanup());

// an invented one-layer probe on made-up readings, with trained weights and two recorded runs
const text = `name: read-count-probe
input: { features: 16 }
training:
  batch: 8
  loss: { kind: mean-squared-error }
precision: { activations: binary32, weights: binary32, gradients: binary32 }
layers:
  - { type: dense, name: fc1, width: 4, bias: false }
measured:
  weights: [ckpt.safetensors]
  statistics: run-a.csv
`;
files.write("ckpt.safetensors", safetensorsBytes([{ name: "fc1.weight", dtype: "F32", shape: [4, 16], data: encode("F32", new Array(64).fill(0.5)) }]));
files.write("run-a.csv", new TextEncoder().encode("tensor,role,rms\nfc1,pre-activation,0.5\n"));
files.write("run-b.csv", new TextEncoder().encode("tensor,role,rms\nfc1,pre-activation,2\n"));
const path = join(files.dir, "probe.yaml");
files.write("probe.yaml", new TextEncoder().encode(text));

const readFile = vi.mocked(fsp.readFile);
/** How many times a file was read (paths compared resolved). */
const readsOf = (file: string) => readFile.mock.calls.filter(([p]) => resolve(String(p)) === resolve(file)).length;

describe("check --vary reads", () => {
  beforeEach(() => {
    readFile.mockClear();
  });

  it("the spec once, and the measured statistics once when no variant changes the section", async () => {
    const runs = await checkVariants(path, ["training.batch=4,8,16", "layers[0].width=4,2"], {});
    // 3 batches × 2 widths
    expect(runs.map((r) => r.variant)).toHaveLength(6);
    expect(readsOf(path)).toBe(1);
    expect(readsOf(join(files.dir, "run-a.csv"))).toBe(1);
    // every variant is calibrated: fc1's pre-activation is the recorded one (rms 0.5 in run-a.csv)
    for (const { result } of runs) {
      const t = result.tensors.find((x) => x.id === "fc1/pre-activation")!;
      expect([t.source, t.start.rms]).toEqual(["measured", 0.5]);
    }
  });

  it("each statistics file once when a variant names another one", async () => {
    const runs = await checkVariants(path, ["training.batch=4,8", "measured.statistics=run-a.csv,run-b.csv"], {});
    // 2 batches × 2 statistics files
    expect(runs).toHaveLength(4);
    expect(readsOf(path)).toBe(1);
    expect(readsOf(join(files.dir, "run-a.csv"))).toBe(1);
    expect(readsOf(join(files.dir, "run-b.csv"))).toBe(1);
    const rms = runs.map(({ result }) => result.tensors.find((x) => x.id === "fc1/pre-activation")!.start.rms);
    // run-a.csv records 0.5, run-b.csv 2 (the files written above)
    expect(rms).toEqual([0.5, 2, 0.5, 2]);
  });
});
