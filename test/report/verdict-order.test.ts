import { readFileSync, readdirSync, statSync } from "node:fs";
import { join, relative } from "node:path";
import { describe, expect, it } from "vitest";
import { VERDICT_RANK, worseVerdict, type Verdict } from "../../src/risk/index.js";
import { ROOT } from "../helpers/run.js";

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const path = join(dir, name);
    return statSync(path).isDirectory() ? sourceFiles(path) : name.endsWith(".ts") ? [path] : [];
  });
}

// README, "Verdicts": a format fits, is at risk past an "at risk" threshold, fails past a "fails" threshold, and the
// overall verdict is the worst of them
const README_ORDER: readonly Verdict[] = ["fits", "at-risk", "fails"];

describe("the order of verdicts, written once (src/risk/verdict-order.ts)", () => {
  it("ranks fits < at risk < fails, as the README's Verdicts section orders them", () => {
    expect([...README_ORDER].sort((a, b) => VERDICT_RANK[a] - VERDICT_RANK[b])).toEqual(README_ORDER);
    for (const a of README_ORDER) {
      for (const b of README_ORDER) {
        expect(worseVerdict(a, b), `${a}, ${b}`).toBe(README_ORDER[Math.max(README_ORDER.indexOf(a), README_ORDER.indexOf(b))]);
      }
    }
  });

  it("no other source file writes its own table of the verdicts' or severities' ranks", () => {
    // a record literal that gives all three verdicts a number, in any order and spacing
    const table = /\{[^{}]*\bfits\s*:\s*\d[^{}]*"at-risk"\s*:\s*\d[^{}]*\bfails\s*:\s*\d[^{}]*\}/;
    // findings' severities ranked apart (fails before at risk) are the same order again
    const severities = /\{[^{}]*(\bfails\s*:\s*\d[^{}]*"at-risk"\s*:\s*\d|"at-risk"\s*:\s*\d[^{}]*\bfails\s*:\s*\d)[^{}]*\}/;
    const copies = sourceFiles(join(ROOT, "src"))
      .filter((file) => !file.endsWith(join("risk", "verdict-order.ts")))
      .filter((file) => table.test(readFileSync(file, "utf8")) || severities.test(readFileSync(file, "utf8")))
      .map((file) => relative(ROOT, file));
    expect(copies).toEqual([]);
  });
});
