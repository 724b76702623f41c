import { readdirSync, readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { renderCheckJson } from "../../src/report/check-json.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { parseSpec } from "../../src/spec/index.js";

// Golden files are written by scripts/golden-check.mjs (`npm run golden`), never by hand.
const SPECS = readdirSync("specs").filter((name) => /\.ya?ml$/.test(name)).sort();

describe("every example spec checks without error and matches its golden result", () => {
  it("has example specs and a golden pair for each", () => {
    expect(SPECS.length).toBeGreaterThan(0);
    const golden = new Set(readdirSync("test/golden/check"));
    for (const file of SPECS) {
      const name = file.replace(/\.ya?ml$/, "");
      expect(golden.has(`${name}.json`), `${name}.json (run npm run golden)`).toBe(true);
      expect(golden.has(`${name}.txt`), `${name}.txt (run npm run golden)`).toBe(true);
    }
  });

  for (const file of SPECS) {
    it(file, () => {
      const path = `specs/${file}`;
      const parsed = parseSpec(readFileSync(path, "utf8"), path);
      expect(parsed.ok).toBe(true);
      if (!parsed.ok) return;
      const result = check(parsed.spec);
      const name = file.replace(/\.ya?ml$/, "");
      expect(renderCheckJson(result)).toBe(readFileSync(`test/golden/check/${name}.json`, "utf8"));
      expect(renderCheckText(result, { width: 100 })).toBe(readFileSync(`test/golden/check/${name}.txt`, "utf8"));
    });
  }
});

describe("README.md", () => {
  it("shows the real output of the bundled example (kept in step by scripts/golden-check.mjs)", () => {
    const readme = readFileSync("README.md", "utf8");
    const block = /<!-- check-example:start -->\n```text\n\$ headroom check specs\/([\w-]+)\.yaml\n([\s\S]*?)```\n<!-- check-example:end -->/.exec(readme);
    expect(block).not.toBeNull();
    expect(block?.[2]).toBe(readFileSync(`test/golden/check/${block?.[1]}.txt`, "utf8"));
  });

  it("starts a newcomer with npm ci and a check of a bundled example", () => {
    const readme = readFileSync("README.md", "utf8");
    const command = /npm ci && npx headroom check (specs\/[\w-]+\.yaml)/.exec(readme);
    expect(command).not.toBeNull();
    expect(SPECS).toContain(command?.[1]?.replace("specs/", ""));
  });
});
