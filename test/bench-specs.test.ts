import { spawnSync } from "node:child_process";
import { describe, expect, it } from "vitest";
import { mlpSpec, mlpYaml } from "../bench/generated-specs.js";
import { parseSpec } from "../src/spec/index.js";

describe("the benchmarks' generated 1,000-layer spec", () => {
  it("reads back from its YAML file as the spec the benches and the build comparisons check", () => {
    // cold-check.bench.ts times the file, check.bench.ts and bench/compare/ the object: they must be one network
    for (const scale of [1, 1 + 2 ** -20]) {
      const parsed = parseSpec(mlpYaml(scale), "mlp-1000.yaml");
      expect(parsed.ok).toBe(true);
      if (!parsed.ok) return;
      expect({ ...parsed.spec, source: "" }).toEqual({ ...mlpSpec(scale), source: "" });
    }
  });
});

describe("the build-comparison scripts", () => {
  for (const script of ["check-time.mjs", "check-interleaved.mjs", "check-memory.mjs", "examples-time.mjs", "outputs.mjs"]) {
    it(`${script} loads and, given no builds, prints its usage and exits 2`, () => {
      const run = spawnSync(process.execPath, [`bench/compare/${script}`], { encoding: "utf8" });
      expect(run.status).toBe(2);
      expect(run.stderr).toContain(`usage: node bench/compare/${script} BASE_DIST NEW_DIST`);
    });
  }
});
