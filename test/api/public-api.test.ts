import { readFileSync } from "node:fs";
import { describe, expect, expectTypeOf, test } from "vitest";
import * as api from "../../src/index.js";
import type { BatchRow, CheckAnswer, NetworkSpec, SpecResult } from "../../src/index.js";

// The package's public surface, as `import { ... } from "headroom"` sees it. The list is made by
// test/api/generate-public-api.mjs from the build; a change to it is a change to the API.
const EXPECTED: string[] = JSON.parse(readFileSync(new URL("./public-api.json", import.meta.url), "utf8"));

describe("the public API (src/index.ts)", () => {
  test("exports exactly the recorded names (regenerate with node test/api/generate-public-api.mjs after a deliberate change)", () => {
    expect(Object.keys(api).sort()).toEqual(EXPECTED);
  });
  test("has the entry points the README documents", () => {
    for (const name of ["check", "checkFile", "loadSpec", "parseSpec", "batchCheck", "runBatch", "expandInputs", "renderHtmlReport", "reportModel", "renderCheckMarkdown", "renderBatchCsv", "renderBatchJsonl", "summarizeCheck", "batchExitCode"]) {
      expect(typeof (api as Record<string, unknown>)[name], name).toBe("function");
    }
  });
  test("exports every name the README's examples import from headroom, and the names its library section lists", () => {
    const readme = readFileSync(new URL("../../README.md", import.meta.url), "utf8");
    const imported = [...readme.matchAll(/import \{([^}]*)\} from "headroom"/g)].flatMap((m) => m[1]!.split(",").map((name) => name.trim()).filter((name) => /^\w+$/.test(name)));
    expect(imported).toEqual(expect.arrayContaining(["check", "loadSpecMeasurements", "measuredNetwork", "simulate", "roundTo"]));
    const library = readme.slice(readme.indexOf("## Library API"));
    const listed = [...library.matchAll(/`([a-z][A-Za-z]+)\(/g)].map((m) => m[1]!);
    expect(listed).toEqual(expect.arrayContaining(["batchCheck", "checkFile", "loadSpecMeasurements", "measuredNetwork"]));
    for (const name of [...imported, ...listed]) expect(typeof (api as Record<string, unknown>)[name], name).not.toBe("undefined");
  });
  test("check takes the network measuredNetwork makes as its third argument (README, Library API)", () => {
    expectTypeOf(api.check).parameter(2).extract<ReturnType<typeof api.measuredNetwork>>().toEqualTypeOf<ReturnType<typeof api.measuredNetwork>>();
  });
  test("results are typed", () => {
    expectTypeOf(api.check).parameter(0).toEqualTypeOf<NetworkSpec>();
    expectTypeOf(api.check).returns.toEqualTypeOf<CheckAnswer>();
    expectTypeOf(api.parseSpec).returns.toEqualTypeOf<SpecResult>();
    expectTypeOf<CheckAnswer["verdict"]>().toEqualTypeOf<"fits" | "at-risk" | "fails">();
    expectTypeOf(api.batchCheck).returns.toEqualTypeOf<Promise<BatchRow[]>>();
    expectTypeOf<Extract<BatchRow, { status: "ok" }>["summary"]["verdict"]>().toEqualTypeOf<"fits" | "at-risk" | "fails">();
  });
});
