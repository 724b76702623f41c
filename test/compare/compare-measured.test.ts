/**
 * `headroom compare` on a spec with a `measured` section (the built binary, as users run it): every plan is judged
 * with the spec's measured weights, as `headroom check` judges the spec's own plan. Weight files come from the
 * independent writer in test/measure/writers.ts.
 */
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";
import { encode, safetensorsBytes, scratch } from "../measure/writers.js";
import { probeSpec } from "../measure/probe-spec.js";

const files = scratch();
afterAll(() => files.cleanup());

const spec = (measured: string) => probeSpec("measured-compare-probe", measured);

// fc1 trained to weights of magnitude 3000: 16 inputs of rms 1 give pre-activations of rms 3000·4 = 12000 (the
// length map of Poole et al. 2016), whose tail passes binary16's largest finite 65504 (IEEE 754-2019 Table 3.5)
const fc1 = Array.from({ length: 8 * 16 }, (_, i) => (i % 2 ? -1 : 1) * 3000);
files.write("ckpt.safetensors", safetensorsBytes([{ name: "fc1.weight", dtype: "F32", shape: [8, 16], data: encode("F32", fc1) }]));
// 3 bytes cannot hold the 8-byte header length a safetensors file starts with (safetensors format description)
files.write("broken.safetensors", Uint8Array.of(1, 2, 3));

function writeSpec(name: string, text: string): string {
  const path = join(files.dir, name);
  writeFileSync(path, text);
  return path;
}

interface Outcome {
  plan: { name: string };
  fromSpec: boolean;
  verdict: string;
}

function ownOutcome(stdout: string): Outcome {
  const outcomes = (JSON.parse(stdout) as { outcomes: Outcome[] }).outcomes;
  const own = outcomes.find((o) => o.fromSpec && o.plan.name === "all-binary16");
  if (own === undefined) throw new Error("compare lists no all-binary16 plan");
  return own;
}

describe("compare with measured weights", () => {
  const measured = writeSpec("measured.yaml", spec("measured:\n  weights: [ckpt.safetensors]\n"));
  const bare = writeSpec("bare.yaml", spec(""));

  it("the spec's own plan gets the verdict plain check gives, which the measured weights changed", () => {
    const plain = JSON.parse(runCli(["check", "--json", measured]).stdout) as { verdict: string };
    const uncalibrated = JSON.parse(runCli(["check", "--json", bare]).stdout) as { verdict: string };
    // the measured weights are what moves the verdict (the fixture is built so that they do)
    expect(plain.verdict).not.toBe(uncalibrated.verdict);
    const run = runCli(["compare", "--json", measured]);
    expect(run.stderr).toBe("");
    expect(ownOutcome(run.stdout).verdict).toBe(plain.verdict);
    // and the bare spec's comparison still agrees with its own plain check
    expect(ownOutcome(runCli(["compare", "--json", bare]).stdout).verdict).toBe(uncalibrated.verdict);
  });

  it("--only-spec-plans judges with the measured weights too", () => {
    const plain = JSON.parse(runCli(["check", "--json", measured]).stdout) as { verdict: string };
    const run = runCli(["compare", "--json", "--only-spec-plans", measured]);
    expect(ownOutcome(run.stdout).verdict).toBe(plain.verdict);
  });

  it("unreadable measured data: the same positioned lines as plain check, exit code 2, and the comparison still printed", () => {
    const broken = writeSpec("broken.yaml", spec("measured:\n  weights: [broken.safetensors]\n"));
    const plain = runCli(["check", broken]);
    expect(plain.status).toBe(2);
    const run = runCli(["compare", "--json", broken]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(plain.stderr);
    expect(run.stderr).toMatch(/broken\.yaml:\d+:\d+: measured: .*broken\.safetensors: file has 3 bytes/);
    expect(ownOutcome(run.stdout).fromSpec).toBe(true);
  });
});
