import { mkdtempSync, readFileSync, writeFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { parseShrink, renderSimulationText } from "../../src/cli/simulate.js";
import { DEFAULT_THRESHOLDS } from "../../src/risk/catalogue.js";
import { parseSpec } from "../../src/spec/index.js";
import { shrinkSpec, simulate } from "../../src/simulate/index.js";
import { predict } from "../../src/magnitude/index.js";
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

  it("positions a network that does not build as check does (file:line:column of the layer), exit 2", () => {
    // a residual branch that widens 16 features to 32 cannot be added back to its input
    const file = specFile("reswidth.yaml", SMALL.replace("  - { type: dense, width: 32, init: he-normal }\n  - relu\n", "  - type: residual\n    branch:\n      - { type: dense, width: 32 }\n      - relu\n"));
    const checked = runCli(["check", file]);
    const simulated = runCli(["simulate", file]);
    expect(simulated.status).toBe(2);
    expect(checked.stderr).toMatch(/reswidth\.yaml:16:5: layers\[0\]: residual-0: /);
    expect(simulated.stderr).toBe(checked.stderr);
    expect(simulated.stdout).toBe("");
  });

  it("says when the network builds at full size but not after shrinking, positioned at the layer", () => {
    const file = specFile("pool.yaml", SMALL.replace("input: { features: 16, scale: 1.0 }", "input: { channels: 2, height: 8, width: 8 }").replace("  - relu\n", "  - relu\n  - { type: average-pool, size: 4 }\n  - flatten\n").replace("type: dense, width: 32", "type: conv2d, channels: 4, kernel: 3, padding: same"));
    expect(runCli(["simulate", file, "--draws", "1"]).status).toBe(0);
    const run = runCli(["simulate", file, "--shrink", "image=4"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/pool\.yaml:18:5: layers\[2\]: after --shrink: average-pool-2: a 4×4 window does not fit a 2×2 image/);
  });
});

// Forward healthy (He, ReLU), backward tiny: the class scores' weights (std 1e-6) shrink every gradient below them by
// about 2^-20, under binary16's smallest normal 2^-14 and near its smallest subnormal 2^-24 (IEEE 754-2019 Table 3.5),
// so unscaled they flush. No loss scale in the main plan; one plan gives its own, one holds gradients in bfloat16.
const FADING = `name: fading
input: { features: 32, scale: 1.0 }
training:
  batch: 16
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
plans:
  - { name: brain, activations: bfloat16, weights: bfloat16, gradients: bfloat16, optimizer-states: binary32, master-weights: binary32 }
  - { name: scaled, activations: binary16, weights: binary16, gradients: binary16, optimizer-states: binary32, master-weights: binary32, loss-scale: 256 }
layers:
  - { type: dense, width: 32, init: he-normal }
  - relu
  - { type: dense, width: 32, init: he-normal }
  - relu
  - { type: dense, width: 32, init: he-normal }
  - relu
  - { type: dense, name: scores, width: 4, init: { kind: normal, std: 1.0e-6 } }
`;

interface SimulationJson {
  lossScale: number;
  lossScaleOrigin: string;
  lossScaleReason?: string;
  tensors: { id: string; slot: string; measured: { rms: number; counts: { flushed: number } } }[];
}

function simulateJson(args: readonly string[]): SimulationJson {
  const run = runCli(["simulate", ...args, "--json"]);
  expect(run.stderr).toBe("");
  return JSON.parse(run.stdout) as SimulationJson;
}

// the share check calls at risk for flushing (1%), read from the check's own thresholds
const flushedGradients = (out: SimulationJson): string[] =>
  out.tensors.filter((t) => t.slot === "gradients" && t.measured.counts.flushed >= DEFAULT_THRESHOLDS.flushedAtRisk).map((t) => t.id);

describe("the loss scale simulate runs at", () => {
  const file = specFile("fading.yaml", FADING);

  it("with no scale in the plan, runs at the scale check judges the gradients at, and says so", () => {
    // the second opinion must run under the verdict's conditions: `headroom check --json`'s own answer is the reference
    const judged = (JSON.parse(runCli(["check", file, "--json"]).stdout) as { lossScale: { value: number; origin: string } }).lossScale;
    expect(judged.origin).toBe("recommended");
    const k = Math.log2(judged.value);
    expect(Number.isInteger(k) && k > 0).toBe(true);
    const out = simulateJson([file]);
    expect(out.lossScale).toBe(judged.value);
    expect(out.lossScaleOrigin).toBe("recommended");
    expect(out.lossScaleReason).toBe("recommended by check");
    const text = runCli(["simulate", file]).stdout;
    expect(text).toContain(`loss scale 2^${k} (recommended by check; --loss-scale to change)`);
    // the gradients really ran scaled: the loss gradient is measured before storage in binary64, where multiplying
    // by a power of two is exact (IEEE 754-2019 §4.3, no overflow or underflow here), so its rms moves by exactly 2^k
    const unscaled = simulateJson([file, "--loss-scale", "1"]);
    const seed = (o: SimulationJson) => o.tensors.find((t) => t.id === "scores/activation-gradient:target-class")!.measured.rms;
    expect(seed(out) / seed(unscaled)).toBe(judged.value);
    // and it matters: unscaled, gradients flush beyond check's at-risk share; at check's scale none does
    expect(flushedGradients(unscaled).length).toBeGreaterThan(0);
    expect(flushedGradients(out)).toEqual([]);
  });

  it("asks check about the network as simulated: the shrunk one, naming the full-size pick beside it", () => {
    const parsed = parseSpec(FADING, file);
    if (!parsed.ok) throw new Error("fixture does not parse");
    // batch ÷8 makes the mean loss's gradient per sample 8× larger: the gradients, and with them the window, move
    const shrunk = check(shrinkSpec(parsed.spec, { batch: 8 }).spec).lossScale;
    const full = check(parsed.spec).lossScale;
    expect(shrunk.origin).toBe("recommended");
    expect(shrunk.value).not.toBe(full.value);
    const out = simulateJson([file, "--shrink", "batch=8"]);
    expect(out.lossScale).toBe(shrunk.value);
    expect(out.lossScaleOrigin).toBe("recommended");
    expect(out.lossScaleReason).toBe(`recommended by check for the shrunk network; 2^${Math.log2(full.value)} for the full-size one`);
  });

  it("keeps the plan's own scale, and --loss-scale over both", () => {
    const planned = simulateJson([file, "--plan", "scaled"]);
    expect([planned.lossScale, planned.lossScaleOrigin]).toEqual([256, "plan"]);
    expect(runCli(["simulate", file, "--plan", "scaled"]).stdout).toContain("loss scale 2^8 (the plan's)");
    const given = simulateJson([file, "--loss-scale", "4"]);
    expect([given.lossScale, given.lossScaleOrigin]).toEqual([4, "option"]);
    expect(simulateJson([file, "--plan", "scaled", "--loss-scale", "4"]).lossScale).toBe(4);
    expect(runCli(["simulate", file, "--loss-scale", "4"]).stdout).toContain("loss scale 2^2 (given by --loss-scale)");
  });

  it("leaves bfloat16 gradients unscaled, as check does (binary32's exponent range: Kalamkar et al. 2019, from memory)", () => {
    const judged = (JSON.parse(runCli(["check", file, "--plan", "brain", "--json"]).stdout) as { lossScale: { value: number; origin: string } }).lossScale;
    expect(judged).toEqual({ value: 1, origin: "none" });
    const out = simulateJson([file, "--plan", "brain"]);
    expect([out.lossScale, out.lossScaleOrigin]).toEqual([1, "none"]);
    expect(out.lossScaleReason).toBe("none needed: gradients are held in bfloat16, which has binary32's exponent range");
  });

  it("names the scale and its origin on the page (--html)", () => {
    const page = join(dir, "fading.html");
    expect(runCli(["simulate", file, "--html", page]).status).toBe(0);
    expect(readFileSync(page, "utf8")).toMatch(/loss scale 2\^\d+ \(recommended by check; --loss-scale to change\)/);
  });
});

describe("--shrink parsing", () => {
  it("takes one factor for widths, batch and positions, or named factors", () => {
    expect(parseShrink("4")).toEqual({ width: 4, batch: 4, positions: 4 });
    expect(parseShrink("width=2, classes=8")).toEqual({ width: 2, classes: 8 });
  });
});

// a gated feed-forward's gate activation (and its gradient) is measured but has no prediction of its own
const GATED = `name: gated
input: { tokens: 8 }
training: { batch: 2, loss: { kind: cross-entropy, classes: 3 } }
layers:
  - { type: embedding, vocabulary: 20, width: 8 }
  - { type: gated-feed-forward, hidden: 16, activation: silu }
  - { type: dense, width: 3 }
`;

describe("simulate's counts of tensors", () => {
  it("says what the header and the disagreement summary each count: all measured, and those with a prediction", () => {
    const parsed = parseSpec(GATED, "gated.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const report = simulate(parsed.spec, { predict, draws: 1 });
    const measured = report.result.tensors.length;
    const compared = report.comparison!.rows.length;
    const inner = report.comparison!.measuredOnly.length;
    expect(inner).toBeGreaterThan(0);
    expect(compared + inner).toBe(measured);
    const text = renderSimulationText(report);
    expect(text).toMatch(new RegExp(`Tensors with findings or disagreements: \\d+ of the ${measured} measured `));
    expect(text).toMatch(new RegExp(`: \\d+ of the ${compared} tensors with a prediction \\(the other ${inner} measured are inner tensors with no prediction\\)`));
  });
});

describe("what --shrink did, in numbers", () => {
  it("names each kind of width before and after, an uneven factor rounded to the nearest whole number", () => {
    const parsed = parseSpec(GATED.replace("hidden: 16", "hidden: 10"), "gated.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const { report } = shrinkSpec(parsed.spec, { width: 3 });
    // 8 / 3 = 2.67 → 3 and 10 / 3 = 3.33 → 3 (nearest whole number)
    expect(report.changes[0]).toBe('widths ÷3, rounded to the nearest whole number: embedding widths 8 → 3; gated hidden widths 10 → 3; the output layer "dense-2" keeps its width');
    expect(report.warnings).toEqual([]);
  });

  it("warns when a width, a head count or the batch falls to 1, naming batch norm when it has one sample", () => {
    const parsed = parseSpec(SMALL.replace("  - relu\n", "  - batch-norm\n  - relu\n"), "small.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    const { report } = shrinkSpec(parsed.spec, { width: 1000, batch: 1000 });
    expect(report.changes[0]).toContain("input features 16 → 1; dense widths 32 → 1");
    expect(report.warnings[0]).toContain("widths ÷1000 leave sizes of 1 (input features 16 → 1, dense widths 32 → 1)");
    expect(report.warnings[1]).toBe("batch 8 → 1: one sample per step; batch norm over one sample's features sets them to their mean, unlike the full-size run");
  });

  it("refuses a class shrink that leaves one class, whose cross-entropy has no gradient, and says it from the command line", () => {
    const parsed = parseSpec(SMALL, "small.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map((i) => i.message).join("; "));
    expect(() => shrinkSpec(parsed.spec, { classes: 4 })).toThrow("shrinking classes 4 by 4 leaves 1 class, whose cross-entropy is 0 with no gradient; give a classes factor of at most 2");
    expect(shrinkSpec(parsed.spec, { classes: 2 }).report.changes).toContain("classes 4 → 2");
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--shrink", "classes=4"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/small\.yaml: shrinking classes 4 by 4 leaves 1 class/);
  });

  it("prints the warnings under what was shrunk", () => {
    const run = runCli(["simulate", specFile("small.yaml", SMALL), "--shrink", "width=64"]);
    expect(run.stdout).toContain("  - warning: widths ÷64 leave sizes of 1 (input features 16 → 1, dense widths 32 → 1)");
  });
});
