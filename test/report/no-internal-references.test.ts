import { readdirSync, readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { parseSpec } from "../../src/spec/index.js";

// What a user reads (sources, assumptions, notes, sentences, the ledger's rules) must not send them to files they do
// not have: the npm package holds dist/, bin/ and specs/ (package.json "files"), not the sources or the team's notes.
const INTERNAL = /SCIENCE\.md|\bsrc\/[a-z]/;

describe("check's words cite papers and practice, not files a user does not have", () => {
  for (const name of readdirSync("specs").filter((n) => /\.ya?ml$/.test(n)).sort()) {
    it(name, () => {
      const parsed = parseSpec(readFileSync(`specs/${name}`, "utf8"), `specs/${name}`);
      if (!parsed.ok) throw new Error(`specs/${name} does not load`);
      const text = JSON.stringify(check(parsed.spec, { ledger: true, everyFormat: true }));
      expect(text.match(INTERNAL)?.[0] ?? null).toBeNull();
      // the ledger was there to be read: the check is not vacuous
      expect(text).toContain('"source"');
    });
  }
});
