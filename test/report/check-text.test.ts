import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

function example(file: string, edit: (spec: NetworkSpec) => NetworkSpec = (spec) => spec): NetworkSpec {
  const parsed = parseSpec(readFileSync(`specs/${file}`, "utf8"), `specs/${file}`);
  if (!parsed.ok) throw new Error(`specs/${file} does not parse`);
  return edit(parsed.spec);
}

describe("the optimizer section names where updates are added", () => {
  it("says 'the stored <format> weights' when the plan keeps no master copy", () => {
    const spec = example("deep-relu-he.yaml", (s) => ({ ...s, precision: { ...s.precision, masterWeights: "none" } }));
    const text = renderCheckText(check(spec), { width: 200 });
    expect(text).toContain(`updates are added to the stored ${spec.precision.weights} weights`);
  });

  it("says 'a master copy in <format>' when the plan keeps one", () => {
    const spec = example("deep-relu-he.yaml");
    expect(spec.precision.masterWeights).toBe("binary32");
    expect(renderCheckText(check(spec), { width: 200 })).toContain("updates are added to a master copy in binary32");
  });
});

describe("hazard lines name the kind of their site", () => {
  it("labels the epsilon line 'optimizer epsilon' and the second-moment line 'optimizer second moment'", () => {
    const lines = renderCheckText(check(example("deep-relu-he.yaml")), { all: true, width: 400 }).split("\n");
    const epsilon = lines.filter((line) => line.includes("The optimizer epsilon"));
    const moment = lines.filter((line) => line.includes("The second moment (1 − β2)·g²"));
    expect(epsilon.length).toBeGreaterThan(0);
    expect(moment.length).toBeGreaterThan(0);
    for (const line of epsilon) expect(line).toContain("optimizer epsilon,");
    for (const line of moment) expect(line).toContain("optimizer second moment,");
  });
});
