// Each invalid fixture ends with the exact issues it must produce, one per line, as `# expect: <issue>`,
// written out by hand as the wanted behaviour: position (line:column), key path and message.
import { readdirSync, readFileSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { describe, expect, it } from "vitest";
import { formatSpecIssue, loadSpec, parseSpec } from "../../src/spec/index.js";

const folder = fileURLToPath(new URL("../fixtures/specs/invalid/", import.meta.url));
const fixtures = readdirSync(folder).filter((name) => /\.(ya?ml|json)$/.test(name)).sort();

function expectations(text: string): string[] {
  return text
    .split("\n")
    .filter((line) => line.startsWith("# expect: "))
    .map((line) => line.slice("# expect: ".length));
}

describe("invalid specs (test/fixtures/specs/invalid)", () => {
  it("has at least 25 fixtures, each stating what it expects", () => {
    expect(fixtures.length).toBeGreaterThanOrEqual(25);
    for (const name of fixtures) expect(expectations(readFileSync(`${folder}${name}`, "utf8")), name).not.toEqual([]);
  });

  it.each(fixtures)("%s gives exactly the expected issues", (name) => {
    const text = readFileSync(`${folder}${name}`, "utf8");
    const result = parseSpec(text, name);
    expect(result.ok).toBe(false);
    const issues = result.ok ? [] : result.issues.map(formatSpecIssue);
    expect(issues).toEqual(expectations(text));
  });

  it.each(fixtures)("%s: messages are not sentences (lowercase start, no final period)", (name) => {
    const result = parseSpec(readFileSync(`${folder}${name}`, "utf8"), name);
    for (const issue of result.ok ? [] : result.issues) {
      expect(issue.message).toMatch(/^[a-z"(]/);
      expect(issue.message).not.toMatch(/\.$/);
      expect(issue.message).not.toContain("\n");
    }
  });

  it("loadSpec reports the same issues, named by the path it was given", async () => {
    const result = await loadSpec(`${folder}zero-width.yaml`);
    expect(result.ok).toBe(false);
    if (!result.ok) {
      expect(result.issues).toEqual([
        { file: `${folder}zero-width.yaml`, line: 6, column: 27, path: "layers[0].width", message: "must be at least 1, got 0" },
      ]);
    }
  });
});
