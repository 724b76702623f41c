import { readdirSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { describe, expect, it } from "vitest";
import { formatSpecIssue, loadSpec } from "../../src/spec/index.js";

const folder = fileURLToPath(new URL("../../specs/", import.meta.url));
const examples = readdirSync(folder).filter((name) => name.endsWith(".yaml"));

describe("the example specs in specs/", () => {
  it("exist", () => {
    expect(examples.length).toBeGreaterThan(0);
  });

  it.each(examples)("%s loads without errors or warnings", async (name) => {
    const result = await loadSpec(`${folder}${name}`);
    const problems = result.ok ? result.warnings.map(formatSpecIssue) : result.issues.map(formatSpecIssue);
    expect(problems).toEqual([]);
    expect(result.ok).toBe(true);
  });

  it.each(examples)("%s starts with the schema comment editors read", async (name) => {
    const { readFileSync } = await import("node:fs");
    const first = readFileSync(`${folder}${name}`, "utf8").split("\n")[0];
    expect(first).toBe("# yaml-language-server: $schema=network-spec.schema.json");
  });
});
