import { readFileSync } from "node:fs";
import { describe, expect, test } from "vitest";
import { parseVaryOption, schemaHasPath, variantsOf, varyText } from "../../src/batch/vary.js";
import { parseSpec, specJsonSchema } from "../../src/spec/index.js";

// --vary against the real spec schema and loader, on an example spec.
const FILE = "specs/deep-relu-he.yaml";
const TEXT = readFileSync(new URL(`../../${FILE}`, import.meta.url), "utf8");
const SCHEMA = specJsonSchema();

function load(...options: string[]) {
  return variantsOf(options.map(parseVaryOption)).map((variant) => {
    const varied = varyText(TEXT, variant, SCHEMA);
    return { varied, result: parseSpec(varied.text, FILE) };
  });
}

describe("--vary on an example spec", () => {
  test("the spec schema knows the documented keys", () => {
    expect(schemaHasPath(SCHEMA, ["training", "batch"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["training", "workers"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["precision", "activations"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["layers", 1, "width"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["layers", 0, "times"])).toBe(true);
    expect(schemaHasPath(SCHEMA, ["training", "bacth"])).toBe(false);
    expect(schemaHasPath(SCHEMA, ["precision", "activation"])).toBe(false);
  });
  test("batch, width, repeat count and a format of the plan, as a cross product", () => {
    const results = load("training.batch=64,512", "layers[0].times=9", "layers[1].width=20", "precision.activations=bfloat16");
    expect(results).toHaveLength(2);
    for (const [i, { result }] of results.entries()) {
      expect(result.ok).toBe(true);
      if (!result.ok) continue;
      expect(result.spec.training.batch).toBe([64, 512][i]);
      expect(result.spec.precision.activations).toBe("bfloat16");
      const repeat = result.spec.layers[0]!;
      expect(repeat.family === "repeat" && repeat.times).toBe(9);
      const classifier = result.spec.layers[1]!;
      expect(classifier.family === "dense" && classifier.width).toBe(20);
    }
  });
  test("a varied value the spec refuses is reported at its line in the file", () => {
    const [{ varied, result }] = load("training.batch=-3") as [{ varied: ReturnType<typeof varyText>; result: ReturnType<typeof parseSpec> }];
    expect(result.ok).toBe(false);
    if (result.ok) return;
    const issue = result.issues[0]!;
    const batchLine = TEXT.split("\n").findIndex((line) => line.startsWith("  batch:")) + 1;
    expect(varied.originalLine(issue.line)).toBe(batchLine);
    expect(issue.path).toBe("training.batch");
  });
});
