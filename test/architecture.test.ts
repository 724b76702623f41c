import { readFileSync, readdirSync, statSync } from "node:fs";
import { join, relative, resolve, dirname } from "node:path";
import { describe, expect, it } from "vitest";
import { ROOT } from "./helpers/run.js";

/**
 * Who may import whom (DEVELOPERS.md, "Architecture"). Dependencies point down the list; anything not listed is
 * not allowed, which also rules out cycles. `report` may import anything as types only (it renders results), and
 * one value module of risk, the order of verdicts (src/risk/verdict-order.ts), which imports nothing but types;
 * type-only imports are otherwise held to the same table.
 */
const ALLOWED: Record<string, readonly string[]> = {
  formats: [],
  numeric: ["spec"],
  spec: ["formats"],
  graph: ["spec", "formats"],
  ops: ["graph", "spec", "numeric", "formats"],
  magnitude: ["graph", "ops", "spec", "numeric", "formats"],
  risk: ["magnitude", "formats", "numeric", "spec"],
  scale: ["risk", "magnitude", "formats", "numeric", "spec"],
  measure: ["formats", "numeric", "spec", "graph", "magnitude"],
  simulate: ["graph", "ops", "formats", "numeric", "spec", "magnitude"],
  check: ["spec", "graph", "magnitude", "risk", "scale", "formats", "measure"],
  compare: ["check", "spec", "graph", "magnitude", "risk", "scale", "formats", "measure"],
  batch: ["check", "spec", "graph", "magnitude", "risk", "scale", "formats", "report", "measure"],
  report: ["formats", "numeric"],
  cli: ["*"],
  index: ["*-cli"],
};

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const path = join(dir, name);
    return statSync(path).isDirectory() ? sourceFiles(path) : name.endsWith(".ts") ? [path] : [];
  });
}

/** The module of a file under src/: its first folder, or the file's own name for top-level files. */
function moduleOf(file: string): string {
  const parts = relative(join(ROOT, "src"), file).split(/[\\/]/);
  return parts.length === 1 ? parts[0]!.replace(/\.ts$/, "") : parts[0]!;
}

interface Edge {
  from: string;
  to: string;
  file: string;
  /** the imported file, relative to the project */
  target: string;
  typeOnly: boolean;
}

/** The one value module of another layer that report may import: the order of verdicts, shared with check and compare. */
const REPORT_VALUE_IMPORTS: readonly string[] = ["src/risk/verdict-order.ts"];

function edges(): Edge[] {
  const out: Edge[] = [];
  for (const file of sourceFiles(join(ROOT, "src"))) {
    const text = readFileSync(file, "utf8");
    for (const match of text.matchAll(/^(import|export)\s+(type\s+)?[^;]*?from\s+"(\.[^"]+)"/gms)) {
      const target = resolve(dirname(file), match[3]!.replace(/\.js$/, ".ts"));
      const from = moduleOf(file);
      const to = moduleOf(target);
      if (from !== to) out.push({ from, to, file: relative(ROOT, file), target: relative(ROOT, target), typeOnly: Boolean(match[2]) });
    }
  }
  return out;
}

describe("architecture: module dependencies point down (DEVELOPERS.md)", () => {
  const all = edges();

  it("finds the imports it checks", () => {
    expect(all.length).toBeGreaterThan(50);
  });

  it("every import between modules is allowed by the table", () => {
    const bad = all.filter((edge) => {
      const allowed = ALLOWED[edge.from];
      if (allowed === undefined) return true;
      if (allowed.includes("*")) return false;
      if (allowed.includes("*-cli")) return edge.to === "cli";
      if (edge.from === "report" && (edge.typeOnly || REPORT_VALUE_IMPORTS.includes(edge.target))) return false;
      return !allowed.includes(edge.to);
    });
    expect(bad.map((e) => `${e.file}: ${e.from} -> ${e.to}${e.typeOnly ? " (type)" : ""}`)).toEqual([]);
  });

  it("the value modules report may import import nothing but types", () => {
    for (const file of REPORT_VALUE_IMPORTS) {
      const imports = [...readFileSync(join(ROOT, file), "utf8").matchAll(/^(import|export)\s+(type\s+)?[^;]*?from\s+"[^"]+"/gms)];
      expect(imports.filter((m) => m[2] === undefined).map((m) => m[0]), file).toEqual([]);
    }
  });

  it("core modules do no console or process I/O (only cli/ and measure's readers touch files)", () => {
    const offenders = sourceFiles(join(ROOT, "src"))
      .filter((file) => !["cli", "measure", "batch"].includes(moduleOf(file)))
      .filter((file) =>
        readFileSync(file, "utf8")
          .split("\n")
          .filter((line) => !/^\s*(\/\/|\*|\/\*)/.test(line))
          .some((line) => /\bconsole\.|process\.(stdout|stderr|exit)\b/.test(line)),
      )
      .map((file) => relative(ROOT, file));
    expect(offenders).toEqual([]);
  });
});
