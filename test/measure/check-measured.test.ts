/**
 * `headroom check` on a spec whose `measured` section names a weights file and a recorded-statistics file
 * (the built binary, as users run it). Weight files come from the independent writer in writers.ts.
 */
import { readFileSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { checkFile } from "../../src/check.js";
import { runCli } from "../helpers/run.js";
import { encode, safetensorsBytes, scratch } from "./writers.js";
import { probeSpec } from "./probe-spec.js";

const files = scratch();
afterAll(() => files.cleanup());

const spec = (measured: string) => probeSpec("measured-probe", measured);

// fc1 trained to weights of magnitude 3000: 16 inputs of rms 1 give outputs of rms 3000·4 = 12000 (Poole et al. 2016
// length map), fine for binary16's 65504 on average but with a tail that overflows
const fc1 = Array.from({ length: 8 * 16 }, (_, i) => (i % 2 ? -1 : 1) * 3000);
files.write("ckpt.safetensors", safetensorsBytes([{ name: "fc1.weight", dtype: "F32", shape: [8, 16], data: encode("F32", fc1) }]));
writeFileSync(join(files.dir, "stats.csv"), "tensor,role,rms,max\nfc2,pre-activation,0.25,1.5\n");

describe("check with measured data", () => {
  it("uses the measured weights, marks measured tensors, and reports what matched", () => {
    const path = join(files.dir, "measured.yaml");
    writeFileSync(path, spec("measured:\n  weights: [ckpt.safetensors]\n  statistics: stats.csv\n"));
    const run = runCli(["check", path, "--json"]);
    expect(run.stderr).toBe("");
    const result = JSON.parse(run.stdout);
    const byId = Object.fromEntries(result.tensors.map((t: { id: string }) => [t.id, t]));
    expect(byId["fc1/weight"].source).toBe("measured");
    expect(byId["fc1/weight"].start.rms).toBeCloseTo(3000, 6);
    expect(byId["fc2/weight"].source).toBe("predicted");
    // the recorded row replaces fc2's output profile (a dense layer's output is its pre-activation)
    expect(byId["fc2/pre-activation"].source).toBe("measured");
    expect(byId["fc2/pre-activation"].start.rms).toBeCloseTo(0.25, 9);
    expect(byId["fc1/pre-activation"].source).toBe("predicted");
    expect(result.assumptions.join(" ")).toMatch(/Weights measured from .*ckpt\.safetensors \(1 of 2 weights\): fc1\/weight ← fc1\.weight/);
    expect(result.assumptions.join(" ")).toMatch(/keeps the spec's initialisation \(no tensor matched\): fc2\/weight/);
    // the text output carries the same notes
    const text = runCli(["check", path]);
    expect(text.stdout).toMatch(/measured profiles: fc1\/weight, fc2\/pre-activation; every other profile is predicted\./);
  });

  it("recorded rows no tensor takes are named in the result and under the header, with the tensors a row could mean", () => {
    const path = join(files.dir, "unused-rows.yaml");
    writeFileSync(join(files.dir, "unused.csv"), "tensor,role,rms\nfc2,pre-activation,0.25\nfc1,weight-gradient,0.01\nfc9,activation,1\n");
    // fc1 with a bias: two weight gradients, the matrix's and the bias's
    writeFileSync(path, spec("measured:\n  statistics: unused.csv\n").replace("bias: false\n    init: he-normal", "init: he-normal"));
    const result = JSON.parse(runCli(["check", path, "--json"]).stdout);
    expect(result.unusedStatistics.map((u: { tensor: string; at: string; candidates: string[] }) => [u.tensor, u.at, u.candidates])).toEqual([
      ["fc1", "line 3", ["fc1/weight-gradient", "fc1/weight-gradient:bias"]],
      ["fc9", "line 4", []],
    ]);
    const text = runCli(["check", path]).stdout.replace(/\s+/g, " ");
    expect(text).toContain(
      "recorded statistics not used: fc1 (weight-gradient, line 3) fits 2 tensors (fc1/weight-gradient, fc1/weight-gradient:bias): name one by its id; fc9 (activation, line 4) matches no tensor.",
    );
    // Markdown (for CI comments) and the HTML report say so too
    const md = runCli(["check", path, "--md"]).stdout;
    expect(md).toContain("Recorded statistics not used:\n\n- fc1 (weight-gradient, line 3) fits 2 tensors");
    expect(md).toContain("- fc9 (activation, line 4) matches no tensor\n");
    const html = join(files.dir, "unused.html");
    expect(runCli(["report", path, "-o", html]).status).not.toBe(2);
    expect(readFileSync(html, "utf8")).toContain("<li>fc9 (activation, line 4) matches no tensor</li>");
    // every row used: no such field
    const used = join(files.dir, "used-rows.yaml");
    writeFileSync(used, spec("measured:\n  statistics: stats.csv\n"));
    expect(JSON.parse(runCli(["check", used, "--json"]).stdout).unusedStatistics).toBeUndefined();
  });

  it("the same spec without the checkpoint predicts from initialisation, 3000/sqrt(2/16) times smaller", async () => {
    const path = join(files.dir, "plain.yaml");
    writeFileSync(path, spec(""));
    const measuredPath = join(files.dir, "weights-only.yaml");
    writeFileSync(measuredPath, spec("measured:\n  weights: [ckpt.safetensors]\n"));
    const plain = await checkFile(path);
    const measured = await checkFile(measuredPath);
    if (!plain.ok || !measured.ok) throw new Error("check failed");
    const out = (r: typeof plain) => r.result.tensors.find((t) => t.layer === "fc1" && t.slot === "activations" && t.role !== "weight")!;
    // He: var_w = 2/16; measured: rms 3000, so var 9e6: the rms ratio is 3000 / sqrt(2/16)
    expect(out(measured).start.rms / out(plain).start.rms).toBeCloseTo(3000 / Math.sqrt(2 / 16), 6);
  });

  it("an unreadable weights file is an error line naming it; the check still runs; exit code 2", () => {
    const path = join(files.dir, "broken.yaml");
    files.write("broken.safetensors", Uint8Array.of(1, 2, 3));
    writeFileSync(path, spec("measured:\n  weights: [broken.safetensors]\n"));
    const run = runCli(["check", path]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/broken\.safetensors: file has 3 bytes, fewer than the 8-byte header length/);
    expect(run.stdout).toMatch(/headroom check: measured-probe/);
  });
});
