import { readFileSync, readdirSync } from "node:fs";
import { join } from "node:path";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { comparePlans, STANDARD_PLANS } from "../../src/compare.js";
import { renderCompareJson, renderCompareText } from "../../src/report/compare-text.js";
import { loadSpec } from "../../src/spec/index.js";
import { ROOT, runCli } from "../helpers/run.js";

const examples = readdirSync(join(ROOT, "specs")).filter((f) => f.endsWith(".yaml")).sort();

describe("comparePlans on every example spec (golden results made by scripts/golden-compare.mjs)", () => {
  for (const file of examples) {
    it(file, async () => {
      process.chdir(ROOT);
      const loaded = await loadSpec(`specs/${file}`);
      expect(loaded.ok).toBe(true);
      if (!loaded.ok) return;
      const comparison = comparePlans(loaded.spec);
      const golden = readFileSync(join(ROOT, "test", "golden", "compare", file.replace(".yaml", ".json")), "utf8");
      expect(renderCompareJson(comparison)).toBe(golden);
      // the ranking is explained: the first line names the best plan, or says none trains safely
      const best = comparison.outcomes[0]!;
      expect(comparison.explanation[0]).toContain(best.verdict !== "fails" ? best.plan.name : "No plan");
      // an at-risk plan is never called safe; when it ranks first, the cheapest plan that fits is named next to it
      if (best.verdict === "at-risk") {
        expect(comparison.explanation[0]).not.toContain("safely");
        expect(comparison.explanation[0]).toContain("at risk");
        const fitting = comparison.outcomes.find((o) => o.verdict === "fits");
        expect(comparison.explanation[1]).toEqual(fitting === undefined ? "No plan fits without a risk." : expect.stringContaining(fitting.plan.name));
      } else if (best.verdict !== "fails") expect(comparison.explanation[0]).toContain("expected to train safely");
      // every line about a plan speaks of an expectation: a ranking rests on estimates, never "<plan> trains"
      for (const o of comparison.outcomes) {
        for (const line of comparison.explanation.filter((l) => l.startsWith(`${o.plan.name} `))) {
          expect(line.slice(o.plan.name.length)).toMatch(/^ is (the cheapest plan|expected to train|not expected to)/);
        }
      }
      // the counts failing plans are ranked by agree with the verdict check gives: a plan fails exactly when one of its
      // findings fails, and fits exactly when it has none
      for (const o of comparison.outcomes) {
        expect(o.findingCounts.fails > 0, o.plan.name).toBe(o.verdict === "fails");
        expect(o.findingCounts.fails + o.findingCounts.atRisk === 0, o.plan.name).toBe(o.verdict === "fits");
      }
      // plans that train safely come before those that do not, and among them the cheapest first
      const safe = comparison.outcomes.filter((o) => o.verdict !== "fails");
      expect(comparison.outcomes.slice(0, safe.length)).toEqual(safe);
      const bytes = safe.map((o) => o.cost.parameterBytes + o.cost.activationBytes);
      expect([...bytes].sort((a, b) => a - b)).toEqual(bytes);
    });
  }
});

describe("ranking failing plans", () => {
  it("puts the least broken first, and says the network is the problem when binary32 fails too (deep-sigmoid)", async () => {
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/deep-sigmoid.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    const comparison = comparePlans(loaded.spec);
    const names = comparison.outcomes.map((o) => o.plan.name);
    expect(comparison.outcomes.every((o) => o.verdict === "fails")).toBe(true);
    // fewest failing findings first, then fewest at risk
    const keys = comparison.outcomes.map((o) => [o.findingCounts.fails, o.findingCounts.atRisk] as const);
    const sorted = [...keys].sort((a, b) => a[0] - b[0] || a[1] - b[1]);
    expect(keys).toEqual(sorted);
    // bfloat16 with no master copy loses the updates of more weights than a binary32 master copy does (its weights'
    // 8-bit significand against binary32's 24, IEEE 754-2019 Table 3.5; Kalamkar et al. 2019), so it ranks below
    // binary32, whose failures are the network's own (Glorot & Bengio 2010 sec. 3: sigmoid gradients vanish with depth)
    const f32 = comparison.outcomes.find((o) => o.plan.name === "binary32")!;
    const bare = comparison.outcomes.find((o) => o.plan.name === "bfloat16 only")!;
    expect(bare.findingCounts.fails).toBeGreaterThan(f32.findingCounts.fails);
    expect(names.indexOf("binary32")).toBeLessThan(names.indexOf("bfloat16 only"));
    // the cheapest of the failing plans does not come first for being cheap
    expect(names[0]).not.toBe("bfloat16 only");
    // binary32 failing: no format helps, the network is the problem
    expect(comparison.explanation[1]).toMatch(/^Even binary32, .* no choice of format is expected to help: the network/);
  });

  it("says nothing of the network when a plan is expected to train", async () => {
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/wide-classifier.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    expect(comparePlans(loaded.spec).explanation.join(" ")).not.toMatch(/no choice of format/);
  });
});

describe("a plan's verdict in compare is the one check gives", () => {
  it("bfloat16 only on deep-sigmoid: fails in compare as in check, whose formats fit but whose updates are lost", async () => {
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/deep-sigmoid.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    const json = JSON.parse(renderCompareJson(comparePlans(loaded.spec))) as { outcomes: Record<string, unknown>[] };
    for (const outcome of json.outcomes) {
      const plan = outcome.plan as (typeof STANDARD_PLANS)[number];
      const checked = check({ ...loaded.spec, precision: plan });
      // one verdict per plan, check's; no second verdict-like field that can disagree with it, and no boolean that
      // reads as a guarantee (predictions are estimates)
      expect(outcome.verdict, plan.name).toBe(checked.verdict);
      expect(outcome.formats, plan.name).toEqual(checked.formats.map((f) => ({ format: f.format, verdict: f.verdict })));
      for (const key of Object.keys(outcome)) expect(key).not.toMatch(/safe|^checkVerdict$/i);
    }
    const bare = json.outcomes.find((o) => (o.plan as { name: string }).name === "bfloat16 only")!;
    // its formats fit, its updates are lost (bfloat16 keeps 8 significant bits, Kalamkar et al. 2019)
    expect(bare.verdict).toBe("fails");
    expect((bare.formats as { verdict: string }[]).every((f) => f.verdict === "fits")).toBe(true);
  });
});

describe("plan costs", () => {
  it("counts bytes per parameter from the formats (IEEE 754-2019 widths; Adam keeps two states, common practice)", async () => {
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/wide-classifier.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    const only = (name: string) => STANDARD_PLANS.filter((p) => p.name === name);
    const f32 = comparePlans(loaded.spec, { plans: only("binary32") }).outcomes[0]!;
    // weights 4 + gradients 4 + two Adam states 4 + 4, no master copy
    expect(f32.cost.bytesPerParameter).toBe(16);
    expect(f32.cost.bytesPerActivation).toBe(4);
    const mixed = comparePlans(loaded.spec, { plans: only("binary16 with master copy") }).outcomes[0]!;
    // weights 2 + master 4 + gradients 2 + states 4 + 4, and the binary32 sum buffer 4 of the 8 workers' gradients
    expect(loaded.spec.training.workers * loaded.spec.training.accumulationSteps).toBe(8);
    expect(mixed.cost.bytesPerParameter).toBe(20);
    expect(mixed.cost.bytesPerActivation).toBe(2);
    const bare = comparePlans(loaded.spec, { plans: only("bfloat16 only") }).outcomes[0]!;
    // weights 2 + gradients 2 + states 2 + 2, and the sum buffer 4
    expect(bare.cost.bytesPerParameter).toBe(12);
  });

  it("gives the memory saved against all binary32 even when that plan is not among those compared (--only-spec-plans)", async () => {
    process.chdir(ROOT);
    const example = await loadSpec("specs/wide-classifier.yaml");
    if (!example.ok) throw new Error("example does not load");
    // on one worker, so that no gradient is summed and no sum buffer counted
    const loaded = { spec: { ...example.spec, training: { ...example.spec.training, workers: 1 } } };
    const bare = comparePlans(loaded.spec, { plans: STANDARD_PLANS.filter((p) => p.name === "bfloat16 only") }).outcomes[0]!;
    // 8 bytes per parameter against 16, 2 per activation element against 4: saved 1 − (8P + 2A)/(16P + 4A) = 1/2 exactly
    expect(bare.savedShare).toBeCloseTo(0.5, 12);
    // and the same share as when the all-binary32 plan is compared beside it
    const beside = comparePlans(loaded.spec, { plans: STANDARD_PLANS.filter((p) => p.name === "bfloat16 only" || p.name === "binary32") });
    expect(beside.outcomes.find((o) => o.plan.name === "bfloat16 only")!.savedShare).toBe(bare.savedShare);
  });
});

describe("headroom compare (the built binary)", () => {
  it("prints the ranked table and the reasons, exit 0 when a plan trains safely", () => {
    const run = runCli(["compare", "specs/wide-classifier.yaml"]);
    expect(run.stderr).toBe("");
    expect(run.status).toBe(0);
    expect(run.stdout).toContain("headroom compare: wide-classifier");
    expect(run.stdout).toContain("Why this order");
    expect(run.stdout).toMatch(/estimates/);
  });

  it("--json parses and --only-spec-plans keeps the spec's own plans", () => {
    const run = runCli(["compare", "specs/wide-classifier.yaml", "--json", "--only-spec-plans"]);
    expect(run.status).toBe(0);
    const parsed = JSON.parse(run.stdout) as { outcomes: { plan: { name: string }; fromSpec: boolean }[] };
    expect(parsed.outcomes.every((o) => o.fromSpec)).toBe(true);
    expect(parsed.outcomes.map((o) => o.plan.name).sort()).toEqual(["mixed-bfloat16", "mixed-binary16"]);
  });

  it("input errors: a missing file and a broken spec exit 2 without a stack trace", () => {
    const missing = runCli(["compare", "specs/no-such.yaml"]);
    expect(missing.status).toBe(2);
    expect(missing.stderr).not.toMatch(/\n\s+at /);
    const broken = runCli(["compare", "-"], { input: "" });
    expect(broken.status).toBe(2);
  });

  it("renders text without colour when asked for plain output", async () => {
    process.chdir(ROOT);
    const loaded = await loadSpec("specs/wide-classifier.yaml");
    if (!loaded.ok) throw new Error("example does not load");
    const text = renderCompareText(comparePlans(loaded.spec, { plans: STANDARD_PLANS.slice(0, 2) }));
    expect(text).not.toMatch(/\x1b\[/);
    expect(text.split("\n")[0]).toBe("headroom compare: wide-classifier (specs/wide-classifier.yaml)");
  });
});
