import { mkdtempSync, readFileSync, writeFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { parseShrink } from "../../src/cli/simulate.js";
import { runCli } from "../helpers/run.js";

const dir = mkdtempSync(join(tmpdir(), "headroom-simulate-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

function specFile(name: string, text: string): string {
  const path = join(dir, name);
  writeFileSync(path, text);
  return path;
}

const SMALL = `name: small
input: { features: 16, scale: 1.0 }
training:
  batch: 8
  loss: { kind: cross-entropy, classes: 4 }
  optimizer: { kind: adam, learning-rate: { peak: 1.0e-3, end: 1.0e-3 } }
precision:
  name: half
  activations: binary16
  weights: binary16
  gradients: binary16
  optimizer-states: binary32
  master-weights: binary32
  accumulate: binary32
layers:
  - { type: dense, width: 32, init: he-normal }
  - relu
  - { type: dense, name: scores, width: 4, init: glorot-normal }
`;

describe("headroom simulate (the built binary)", () => {
  it("prints measured beside predicted magnitudes, with the estimate note, and exits 0", () => {
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--all", "--draws", "2"]);
    expect(run.stderr).toBe("");
    expect(run.status).toBe(0);
    expect(run.stdout).toContain("headroom simulate: small, plan half");
    expect(run.stdout).toContain("seeds 1–2 (median of 2 draws)");
    expect(run.stdout).toMatch(/tensor\s+format\s+predicted rms\s+measured rms\s+diff/);
    expect(run.stdout).toContain("dense-0/pre-activation");
    expect(run.stdout).toContain("scores/activation-gradient:target-class");
    expect(run.stdout).toContain("Where prediction and measurement disagree");
    expect(run.stdout).toContain("Confirm with a short training run.");
  });

  it("writes JSON with the prediction beside each measured tensor", () => {
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--json", "--steps", "2"]);
    expect(run.status).toBe(0);
    const out = JSON.parse(run.stdout) as { tensors: { id: string; measured: { rms: number }; predicted?: { rms: number }; afterSteps?: unknown }[]; history: unknown[][]; steps: number };
    const pre = out.tensors.find((t) => t.id === "dense-0/pre-activation")!;
    expect(pre.measured.rms).toBeGreaterThan(0);
    expect(pre.predicted?.rms).toBeGreaterThan(0);
    expect(pre.afterSteps).toBeDefined();
    expect(out.steps).toBe(2);
    expect(out.history[0]).toHaveLength(2);
  });

  it("writes a page with measured bands over predicted ones (--html), whole, with no scripts", () => {
    const page = join(dir, "bands.html");
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--html", page]);
    expect(run.status).toBe(0);
    const html = readFileSync(page, "utf8");
    expect(html).toContain("<svg");
    expect(html).toContain('class="measured"');
    expect(html).toContain('class="predicted"');
    expect(html).toContain("dense-0/pre-activation");
    expect(html).not.toContain("<script");
  });

  it("states what was shrunk", () => {
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--shrink", "width=2,batch=2"]);
    expect(run.status).toBe(0);
    expect(run.stdout).toContain("Shrunk for speed:");
    expect(run.stdout).toContain("widths ÷2");
    expect(run.stdout).toContain("batch 8 → 4");
    expect(run.stdout).toContain("full size");
  });

  it("exits 1 when a stored tensor overflows (a loss scale far too large for binary16)", () => {
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--loss-scale", String(2 ** 40)]);
    expect(run.status).toBe(1);
  });

  it("reads --loss-scale by check's rule and message: a power of two (Micikevicius et al. 2018 §3.2)", () => {
    const file = specFile("small.yaml", SMALL);
    const run = runCli(["simulate", file, "--loss-scale", "1000"]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toBe(runCli(["check", "--loss-scale", "1000", file]).stderr);
    expect(run.stderr).toBe('headroom: --loss-scale: expected a power of two such as 1024 or 0.5, got "1000"\n');
  });

  it("refuses a spec too large for the memory limit with the memory it needs and a --shrink that fits, exit 2, no stack", () => {
    const big = SMALL.replace("width: 32", "width: 65536");
    const run = runCli(["simulate", specFile("big.yaml", big), "--memory", "0.05"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/^headroom: .*big\.yaml: simulating small would need about [\d.]+ GiB of memory, more than the limit of 0\.05 GiB; --shrink \d+ /);
    expect(run.stderr).not.toMatch(/\n\s+at /);
    expect(run.stdout).toBe("");
  });

  it("rejects bad options and bad specs with exit 2 and a one-line message", () => {
    const file = specFile("small.yaml", SMALL);
    expect(runCli(["simulate", file, "--draws", "0"]).stderr).toContain('--draws "0": expected a whole number from 1 to 1000');
    expect(runCli(["simulate", file, "--shrink", "depth=2"]).stderr).toContain('--shrink "depth=2": expected a factor such as 4');
    expect(runCli(["simulate", file, "--plan", "nope"]).stderr).toContain('no plan named "nope"');
    const broken = runCli(["simulate", specFile("broken.yaml", SMALL.replace("width: 32", "width: -3"))]);
    expect(broken.status).toBe(2);
    expect(broken.stderr).toMatch(/broken\.yaml:\d+:\d+/);
  });
});

describe("--shrink parsing", () => {
  it("takes one factor for widths, batch and positions, or named factors", () => {
    expect(parseShrink("4")).toEqual({ width: 4, batch: 4, positions: 4 });
    expect(parseShrink("width=2, classes=8")).toEqual({ width: 2, classes: 8 });
  });
});
