/**
 * Extreme but legal-looking spec values (a practitioner's review): each gives a clear input error with
 * file:line:column and key path, exit code 2, in bounded time, instead of a hang, a crash or a verdict on rms 0.
 * The "hang" reproducers end because the values are refused here, and the search that hung is held to a bounded
 * number of steps on its own in test/scale/window-nan-guess.test.ts.
 */
import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

const INVALID = "test/fixtures/specs/invalid";
// specs that parse but describe no network a step can run: refused when the network is built
const UNBUILDABLE = "test/fixtures/specs/unbuildable";
const EXTREMES = "test/fixtures/specs/extremes";
const STACK = /\n\s+at /;

/** The rows of `batch --jsonl`, one JSON object a line. */
function rowsOf(stdout: string): unknown[] {
  return stdout
    .split("\n")
    .filter((line) => line !== "")
    .map((line) => JSON.parse(line) as unknown);
}

describe("spec values beyond any real network, refused by check", () => {
  // each was hand-checked against the value's column in the fixture; bounds from src/spec/limits.ts (10^±30, data
  // scales 10^±60, weight growth 10^±3: "common practice" puts real scales, stds and learning rates decades inside)
  it.each([
    [
      "target-scale-beyond-any-network.yaml",
      "target-scale-beyond-any-network.yaml:6:51: training.loss.target-scale: beyond any real network: at most 1e60, got 1e+160; check the value",
    ],
    [
      "weight-growth-beyond-any-network.yaml",
      "weight-growth-beyond-any-network.yaml:7:42: training.horizon.weight-growth: beyond any real network: at most 1000, got 1e+300; check the value",
    ],
    [
      "init-std-beyond-any-network.yaml",
      "init-std-beyond-any-network.yaml:7:58: layers[0].init.std: beyond any real network: at most 1e30, got 1e+100; check the value",
    ],
    [
      "input-scale-beyond-any-network.yaml",
      "input-scale-beyond-any-network.yaml:3:31: input.scale: beyond any real network: at least 1e-60, got 1e-300; check the value",
    ],
  ])("%s: exit 2, the first line names the position and key", (file, first) => {
    const run = runCli(["check", `${INVALID}/${file}`]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr.split("\n")[0]).toBe(`${INVALID}/${first}`);
    expect(run.stderr).not.toMatch(STACK);
  });

  it("batch refuses them too, each as a positioned row (the worker that hung ends)", () => {
    const run = runCli(["batch", "--jsonl", `${INVALID}/target-scale-beyond-any-network.yaml`, `${INVALID}/weight-growth-beyond-any-network.yaml`]);
    expect(run.status).toBe(2);
    const rows = rowsOf(run.stdout) as { status: string; error?: { kind: string; position?: { line: number; column: number } } }[];
    expect(rows.map((row) => [row.status, row.error?.kind, row.error?.position?.line, row.error?.position?.column])).toEqual([
      ["error", "input", 6, 51],
      ["error", "input", 7, 42],
    ]);
  });
});

describe("predictions that leave binary64's range (values within bounds that compound over depth)", () => {
  const gain =
    `${EXTREMES}/compounding-gain.yaml:9:7: blocks.loud[0]: the predicted pre-activation of stack.7.use-0.dense-0 grows to rms 1.0e+80, ` +
    "above 2^255, beyond what the prediction carries in binary64; it compounds input.scale, the init (std, limit, gain), gain and multiplier " +
    "of the layers up to here: check those values\n";
  const growth =
    `${EXTREMES}/compounding-growth.yaml:10:7: blocks.plain[0]: the predicted pre-activation of stack.25.use-0.dense-0 at the end of the horizon ` +
    "grows to rms 1.0e+78, above 2^255, beyond what the prediction carries in binary64; it compounds input.scale, the init (std, limit, gain), " +
    "gain and multiplier of the layers up to here, training.horizon.weight-growth: check those values\n";

  // lecun gain g on 32 inputs of rms r gives rms g·r per layer (LeCun et al. 1998: var 1/fan-in): 10^10 per layer
  // passes 2^255 ≈ 5.8e76 at the eighth layer (10^80); a growth of 1000 per layer at the end passes it at the 26th
  it.each([
    ["check", "compounding-gain.yaml", gain],
    ["compare", "compounding-gain.yaml", gain],
    ["simulate", "compounding-gain.yaml", gain],
    ["check", "compounding-growth.yaml", growth],
  ])("%s %s: exit 2 with the layer, its position and the keys, no verdict", (command, file, message) => {
    const run = runCli([command, `${EXTREMES}/${file}`]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toBe(message);
  });

  it("batch reports it as a positioned input error", () => {
    const run = runCli(["batch", "--jsonl", `${EXTREMES}/compounding-gain.yaml`]);
    expect(run.status).toBe(2);
    const row = rowsOf(run.stdout)[0] as { error?: { kind: string; message: string } } | undefined;
    expect(row?.error).toMatchObject({ kind: "input", message: gain.trimEnd() });
  });
});

describe("the loss scale's bounds say what they mean", () => {
  // IEEE 754-2019 Table 3.5, binary32: emin −126, emax 127, p 24; smallest subnormal 2^(emin−p+1) = 2^-149
  it("--loss-scale 2^-149 is refused as a subnormal of binary32, not as outside its range", () => {
    const run = runCli(["check", "--loss-scale", "2^-149", "specs/deep-relu-he.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(
      `headroom: --loss-scale: 2^-149 is outside binary32's normal range, 2^-126 to 2^127 (a subnormal there, holding fewer significant bits), got "2^-149"\n`,
    );
  });

  it("--loss-scale 2^-150 is below binary32's smallest subnormal", () => {
    expect(runCli(["check", "--loss-scale", "2^-150", "specs/deep-relu-he.yaml"]).stderr).toBe(
      `headroom: --loss-scale: 2^-150 is outside binary32's normal range, 2^-126 to 2^127 (below binary32's smallest subnormal, 2^-149: it would be zero), got "2^-150"\n`,
    );
  });

  it("2^-126, binary32's smallest normal, is accepted", () => {
    expect(runCli(["check", "--json", "--loss-scale", "2^-126", "specs/deep-relu-he.yaml"]).stderr).toBe("");
  });
});

describe("batch norm over one value per channel", () => {
  it("is refused at the batch norm, with the reason (x − mean(x) = 0: Ioffe & Szegedy 2015, Algorithm 1)", () => {
    const run = runCli(["check", `${UNBUILDABLE}/batch-norm-one-value-per-channel.yaml`]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(
      `${UNBUILDABLE}/batch-norm-one-value-per-channel.yaml:10:7: blocks.squeeze[1]: use-1.batch-norm-1: batch-norm over one value per channel (batch 1, one position): ` +
        "x − mean(x) is 0, so it outputs exactly 0; use a batch above 1, or a layer-norm\n",
    );
  });

  it("is found on an image pooled to one pixel, once for a block used twice (Ioffe & Szegedy 2015, Algorithm 1)", () => {
    const run = runCli(["check", `${UNBUILDABLE}/batch-norm-one-pixel.yaml`]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(
      `${UNBUILDABLE}/batch-norm-one-pixel.yaml:16:7: blocks.settle[0]: use-2.batch-norm-0: batch-norm over one value per channel (batch 1, one pixel): ` +
        "x − mean(x) is 0, so it outputs exactly 0; use a batch above 1, or a layer-norm (the same in 1 more repeat or use of this layer)\n",
    );
  });
});

describe("--plan names a plan the spec lacks: an input error, before the run", () => {
  it.each([["check"], ["simulate"]])("%s", (command) => {
    const run = runCli([command, "--plan", "all-bfloat61", "specs/deep-relu-he.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/^headroom: specs\/deep-relu-he\.yaml: .*no plan named "all-bfloat61".*\(did you mean "all-bfloat16"\?\)/);
    expect(run.stderr).not.toMatch(STACK);
  });
});
