import { mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

const SPECS = readdirSync("specs").filter((name) => /\.ya?ml$/.test(name)).sort();
const STACK = /\n\s+at /;

describe("headroom check (the built binary) on every example spec", () => {
  for (const file of SPECS) {
    const name = file.replace(/\.ya?ml$/, "");
    it(`${file}: stdout is the golden text, stderr is empty, exit code follows the verdict`, () => {
      const run = runCli(["check", `specs/${file}`]);
      const golden = JSON.parse(readFileSync(`test/golden/check/${name}.json`, "utf8")) as { verdict: string };
      expect(run.stderr).toBe("");
      expect(run.stdout).toBe(readFileSync(`test/golden/check/${name}.txt`, "utf8"));
      // exit code 1 when the verdict is "fails", 0 otherwise (README.md, "Exit codes")
      expect(run.status).toBe(golden.verdict === "fails" ? 1 : 0);
    });

  }

  // the JSON path for two examples (the in-process golden test covers every example's JSON)
  for (const file of SPECS.slice(0, 2)) {
    const name = file.replace(/\.ya?ml$/, "");
    it(`${file} --json prints the golden result`, () => {
      const run = runCli(["check", "--json", `specs/${file}`]);
      expect(run.stderr).toBe("");
      expect(run.stdout).toBe(readFileSync(`test/golden/check/${name}.json`, "utf8"));
    });
  }
});

describe("headroom check options", () => {
  const spec = "test/fixtures/specs/hazards/linear-chain-grow.yaml";

  it("--format judges other formats than the plan's, and aliases are accepted", () => {
    const run = runCli(["check", "--json", "--format", "bf16,binary16", spec]);
    const result = JSON.parse(run.stdout) as { formats: { format: string; planned: boolean; verdict: string }[] };
    expect(result.formats.map((f) => [f.format, f.planned])).toEqual([
      ["bfloat16", false],
      ["binary16", true],
    ]);
    expect(result.formats[0]?.verdict).not.toBe("fails");
    expect(result.formats[1]?.verdict).toBe("fails");
    expect(run.status).toBe(1);
  });

  it("--all lists every tensor; the default lists only those at risk", () => {
    const all = runCli(["check", "--all", spec]).stdout.split("\n").length;
    const some = runCli(["check", "--format", "bfloat16", spec]).stdout;
    expect(all).toBeGreaterThan(400);
    expect(some).toMatch(/--all lists every tensor|none of the/);
  });

  it("every answer carries the caution and suggests a short confirmation run", () => {
    const run = runCli(["check", spec]);
    expect(run.stdout).toMatch(/These are estimates/);
    expect(run.stdout).toMatch(/short run of a few hundred steps/);
  });
});

describe("headroom check input errors: exit code 2, one line each, no stack trace", () => {
  it("a missing file", () => {
    const run = runCli(["check", "specs/no-such-spec.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe("specs/no-such-spec.yaml: no such file\n");
    expect(run.stdout).toBe("");
  });

  it("an invalid spec prints file:line:column: path: message", () => {
    const bad = runCli(["check", "test/fixtures/specs/hazards/bad-width.yaml"]);
    expect(bad.status).toBe(2);
    expect(bad.stderr).toMatch(/^test\/fixtures\/specs\/hazards\/bad-width\.yaml:\d+:\d+: layers\[0\]\.width: .+\n$/);
    expect(bad.stderr).not.toMatch(STACK);
  });

  it("a truncated JSON spec: one line for its one problem, not the same place twice", () => {
    const dir = mkdtempSync(join(tmpdir(), "headroom-truncated-"));
    try {
      // an invented classifier written as JSON, cut off inside its layers (an unclosed `{` at the end of the file)
      const path = join(dir, "cut.json");
      writeFileSync(path, '{\n  "input": { "features": 16 },\n  "training": { "batch": 8, "loss": { "kind": "cross-entropy", "classes": 4 } },\n  "layers": [\n    { "type": "dense", "width": 4 ');
      const run = runCli(["check", path]);
      expect(run.status).toBe(2);
      const lines = run.stderr.trimEnd().split("\n");
      expect(lines).toHaveLength(1);
      expect(lines[0]!.startsWith(`${path}:`)).toBe(true);
      expect(lines[0]).toMatch(/^[^:]+:\d+:\d+: yaml: flow (map|sequence)/);
      expect(run.stdout).toBe("");
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });

  it("a network that parses but cannot be built is positioned like any spec problem", () => {
    const run = runCli(["check", "test/fixtures/specs/hazards/graph-error.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stdout).toBe("");
    expect(run.stderr).toMatch(/^test\/fixtures\/specs\/hazards\/graph-error\.yaml:9:5: layers\[0\]: .*conv2d needs an image input/);
    expect(run.stderr).not.toMatch(STACK);
  });

  it("a file that is not a spec", () => {
    const run = runCli(["check", "README.md"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe('README.md: unsupported extension ".md": a spec is a .yaml, .yml or .json file\n');
  });

  it("an unknown format names the accepted ones", () => {
    const run = runCli(["check", "--format", "fp12", "specs/deep-relu-he.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(
      'headroom: --format: unknown format "fp12"; accepted: binary16, bfloat16, binary32, binary64, tf32, e5m2, e4m3 (comma-separated)\n',
    );
  });

  it("--format leaving the plan's binary16 states out: their findings are shown, the exit code follows the formats judged", () => {
    // epsilon 1e-8 rounds to 0 in binary16 (below its flush bound 2^-25; IEEE 754-2019 binary16, SCIENCE.md §3.3)
    const fixture = "test/fixtures/specs/hazards/adam-epsilon-binary16.yaml";
    const planned = runCli(["check", fixture]);
    expect(planned.status).toBe(1);
    const brain = runCli(["check", "--format", "bf16", fixture]);
    expect(brain.stderr).toBe("");
    expect(brain.stdout).toMatch(/Verdict fits/);
    const text = brain.stdout.replace(/\s+/g, " ");
    expect(text).toMatch(/epsilon 1e-8 rounds to 0 in binary16; .*? divides by zero there\. Not counted in the verdict: binary16 is not among the formats judged\./);
    expect(brain.status).toBe(0);
  });

  it("--format e5m2 on a plan without scale factors judges e5m2 at the pick of e5m2's own window, and says so", () => {
    // the example written in e4m3 without scale factors, a choice the what-if e5m2 keeps (a binary16 plan makes none:
    // 8-bit formats put in its place take the spec's default per-tensor factors and need no loss scale)
    const dir = mkdtempSync(join(tmpdir(), "headroom-unscaled-"));
    const he = join(dir, "deep-relu-he-e4m3.yaml");
    writeFileSync(
      he,
      readFileSync("specs/deep-relu-he.yaml", "utf8").replace(/^precision:\n((?: {2}.*\n)*)/m, (block: string) =>
        block.replace(/^ {2}(activations|weights|gradients): binary16$/gm, "  $1: e4m3").replace(/\n$/, "\n  scaling: none\n"),
      ),
    );
    const json = runCli(["check", "--json", "--format", "e5m2", he]);
    expect(json.stderr).toBe("");
    const result = JSON.parse(json.stdout) as {
      lossScale: { value: number; origin: string; window?: { format: string; pickLog2: number } };
      lossScaleAnswer: { format: string; window: { lowestLog2: number; pickLog2: number } };
    };
    const plain = JSON.parse(runCli(["check", "--json", "--format", "binary16", he]).stdout) as typeof result;
    expect(result.lossScaleAnswer.format).toBe("e5m2");
    expect(result.lossScale.window?.format).toBe("e5m2");
    const pick = result.lossScaleAnswer.window.pickLog2;
    expect(result.lossScale.value).toBe(2 ** pick);
    // e5m2's smallest subnormal 2^-16 (OCP 8-bit floating point specification) is 8 binades above binary16's 2^-24
    // (IEEE 754-2019): the flush edge of its window moves up by 8
    expect(result.lossScaleAnswer.window.lowestLog2).toBe(plain.lossScaleAnswer.window.lowestLog2 + 8);
    const text = runCli(["check", "--format", "e5m2", he]);
    expect(text.stderr).toBe("");
    const flat = text.stdout.replace(/\s+/g, " ");
    expect(flat).toContain(`loss scale for e5m2: none in the plan; judged with the recommended 2^${pick} = ${2 ** pick}`);
    expect(text.stdout).toMatch(new RegExp(`\\nLoss scale\\n {2}e5m2 gradients: pick 2\\^${pick}, window `));
    expect(flat).toContain(`Use a static loss scale of 2^${pick}`);
    // exit code 1 when the verdict is "fails", 0 otherwise (README.md, "Exit codes")
    expect(text.status).toBe((JSON.parse(json.stdout) as { verdict: string }).verdict === "fails" ? 1 : 0);
    rmSync(dir, { recursive: true, force: true });
  });

  it("a misspelt plan gets the nearest plan name suggested", () => {
    const check = runCli(["check", "--plan", "mixed-binary61", "specs/transformer-encoder.yaml"]);
    expect(check.status).toBe(2);
    expect(check.stderr).toContain('no plan named "mixed-binary61" in the spec (did you mean "mixed-binary16"?); its plans: ');
  });

  it("an unknown plan names the spec's plans", () => {
    const run = runCli(["check", "--plan", "nope", "specs/deep-relu-he.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/no plan named "nope" in the spec; its plans: /);
    expect(run.stderr).not.toMatch(STACK);
  });

  it("a bad loss scale", () => {
    const run = runCli(["check", "--loss-scale", "-4", "specs/deep-relu-he.yaml"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/--loss-scale: expected a power of two/);
    const notPower = runCli(["check", "--loss-scale", "1000", "specs/deep-relu-he.yaml"]);
    expect(notPower.status).toBe(2);
    expect(notPower.stderr).toMatch(/--loss-scale: expected a power of two such as 1024 or 0.5, got "1000"/);
    expect(notPower.stderr).not.toMatch(STACK);
    // the spec's own bound on loss-scale: binary32's normal range, 2^-126 to 2^127 (IEEE 754-2019 Table 3.5)
    const huge = runCli(["check", "--loss-scale", String(2 ** 200), "specs/deep-relu-he.yaml"]);
    expect(huge.status).toBe(2);
    expect(huge.stderr).toMatch(/--loss-scale: 2\^200 is outside binary32's normal range, 2\^-126 to 2\^127 \(above its largest finite value\)/);
    expect(runCli(["check", "--json", "--loss-scale", String(2 ** 127), "specs/deep-relu-he.yaml"]).stderr).toBe("");
  });

  it("takes a loss scale written 2^k, as the output writes it", () => {
    // the check's own line says "judged with the recommended 2^-22 = 2.38e-7" for a scale a user may want to pass back
    const power = runCli(["check", "--json", "--loss-scale", "2^-22", "specs/deep-relu-he.yaml"]);
    expect(power.stderr).toBe("");
    // the window searched for the gradients stays beside the given scale (README, lossScale)
    expect((JSON.parse(power.stdout) as { lossScale: { value: number; origin: string } }).lossScale).toMatchObject({ value: 2 ** -22, origin: "option", window: { format: "binary16" } });
    const decimal = runCli(["check", "--json", "--loss-scale", String(2 ** -22), "specs/deep-relu-he.yaml"]);
    expect(power.stdout).toBe(decimal.stdout);
    // the same bounds: binary32's normal range 2^-126 to 2^127 (IEEE 754-2019 Table 3.5)
    expect(runCli(["check", "--loss-scale", "2^128", "specs/deep-relu-he.yaml"]).stderr).toMatch(/--loss-scale: 2\^128 is outside binary32's normal range/);
    expect(runCli(["check", "--loss-scale", "2^1.5", "specs/deep-relu-he.yaml"]).stderr).toMatch(/expected a power of two such as 1024 or 0.5, got "2\^1.5"/);
  });

  it("check --vary reads --loss-scale by the same rule and message as a plain check", () => {
    // a loss scale is a power of two so scaling and unscaling are exact (Micikevicius et al. 2018 §3.2)
    const plain = runCli(["check", "--loss-scale", "1000", "specs/deep-relu-he.yaml"]);
    const varied = runCli(["check", "--loss-scale", "1000", "--vary", "training.batch=4,64", "specs/deep-relu-he.yaml"]);
    expect(varied.status).toBe(2);
    expect(varied.stdout).toBe("");
    expect(varied.stderr).toBe(plain.stderr);
    expect(varied.stderr).toBe('headroom: --loss-scale: expected a power of two such as 1024 or 0.5, got "1000"\n');
    // a power of two is taken by every variant
    const good = runCli(["check", "--json", "--loss-scale", "0.5", "--vary", "training.batch=4,64", "specs/deep-relu-he.yaml"]);
    expect(good.stderr).toBe("");
    const rows = JSON.parse(good.stdout) as { variant: string; result: { lossScale: { value: number; origin: string } } }[];
    expect(rows.map((row) => [row.variant, row.result.lossScale.value, row.result.lossScale.origin])).toEqual([
      ["training.batch=4", 0.5, "option"],
      ["training.batch=64", 0.5, "option"],
    ]);
  });
});

describe("check --help tells the exit code the command gives", () => {
  it("exit code 1 for a verdict 'fails' that comes from the optimizer while every format fits (README, Exit codes)", () => {
    // an invented deep, narrow bfloat16 network with no master copy: Adam's updates fall below half an ulp of the weights
    const dir = mkdtempSync(join(tmpdir(), "headroom-help-"));
    const file = join(dir, "meltwater.yaml");
    writeFileSync(
      file,
      [
        "name: meltwater",
        "input: { features: 12 }",
        "training: { batch: 32, loss: { kind: mean-squared-error }, optimizer: { kind: adam, learning-rate: 1.0e-4 } }",
        "precision: { activations: bfloat16, master-weights: none }",
        "layers: [{ type: dense, width: 24, init: glorot-normal }, tanh, { type: dense, width: 1 }]",
      ].join("\n"),
    );
    const run = runCli(["check", "--json", file]);
    rmSync(dir, { recursive: true, force: true });
    const result = JSON.parse(run.stdout) as { verdict: string; formats: { verdict: string }[]; optimizer: { verdict: string } };
    expect(result.formats.every((f) => f.verdict !== "fails")).toBe(true);
    expect(result.optimizer.verdict).toBe("fails");
    expect(run.status).toBe(1);
    const help = runCli(["check", "--help"]).stdout.replace(/\s+/g, " ");
    expect(help).toContain('Exit code 1 when the verdict is "fails" (a format, the optimizer or the loss scale)');
  });
});

describe("check --md carries the spec's warnings, as batch --md does", () => {
  it("lists each warning under the table and still prints it on stderr (specs/README: a warm-up longer than the horizon loads with a warning)", () => {
    const dir = mkdtempSync(join(tmpdir(), "headroom-md-"));
    const file = join(dir, "short.yaml");
    writeFileSync(
      file,
      [
        "name: short",
        "input: { features: 10 }",
        "training: { batch: 8, loss: { kind: cross-entropy, classes: 3 }, horizon: { steps: 10 }, optimizer: { kind: adam, warmup-steps: 100 } }",
        "layers: [{ type: dense, width: 3 }]",
      ].join("\n"),
    );
    const run = runCli(["check", "--md", file]);
    const varied = runCli(["check", "--md", "--vary", "training.batch=4", file]);
    rmSync(dir, { recursive: true, force: true });
    expect(run.status).toBe(0);
    const line = `${file}:3:`;
    expect(run.stderr).toContain(`warning: ${line}`);
    expect(run.stdout).toContain("\nWarnings (judged as written):\n\n- ");
    expect(run.stdout).toMatch(/\n- .*short\.yaml:3:\d+: training\.optimizer\.warmup-steps: warm-up \(100 steps\) is longer than the horizon \(10 steps\)/);
    expect(varied.stdout).toContain("\nWarnings (judged as written):\n\n- ");
  });
});

describe("check --md --all", () => {
  it("lists every finding, where --md alone lists the worst 10 (README, Markdown for CI)", () => {
    const some = runCli(["check", "--md", "specs/deep-sigmoid.yaml"]);
    const all = runCli(["check", "--md", "--all", "specs/deep-sigmoid.yaml"]);
    const json = JSON.parse(runCli(["check", "--json", "specs/deep-sigmoid.yaml"]).stdout) as { formats: { findings: unknown[] }[] };
    const total = json.formats.reduce((n, f) => n + f.findings.length, 0);
    expect(total).toBeGreaterThan(10);
    expect(some.stdout).toContain(`Worst findings (10 of ${total}):`);
    expect(all.stdout).toContain(`Worst findings (${total} of ${total}):`);
  });
});
