import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { parse as parseYaml } from "yaml";
import { runCli, type CliRun } from "../helpers/run.js";
import { parseRfc4180 } from "../report/rfc4180.js";
import { smallSpec, tinySpec, writeSpecs } from "../batch/generate.js";

// The built binary on 200 generated specs (small classifiers, cheap to check), 5 of them broken on purpose
// (run npm run build first).
let dir: string;
let order: string[];
const BROKEN = new Map<number, { text: string; line: number; column: number }>([
  // a negative batch: the value on line 4, column 10
  [17, { text: tinySpec("broken-batch", -8), line: 4, column: 10 }],
  // a misspelt key: its key on line 4, column 3
  [60, { text: tinySpec("broken-key").replace("  batch: 8", "  bacth: 8"), line: 4, column: 3 }],
  // a YAML error: a key given twice, the second on line 5, column 3 (YAML 1.2.2 §3.2.1.1: keys are unique)
  [101, { text: tinySpec("broken-yaml").replace("  batch: 8", "  batch: 8\n  batch: 9"), line: 5, column: 3 }],
  // a width that is not a number: the value on line 9, column 27
  [150, { text: tinySpec("broken-width").replace("width: 4 }", "width: four }"), line: 9, column: 27 }],
  // an empty file
  [199, { text: "", line: 1, column: 1 }],
]);

/** A fixed shuffle (a linear congruential generator; Knuth, TAOCP vol. 2 §3.2.1 constants), so input order differs from name order. */
function shuffled<T>(items: readonly T[], seed: number): T[] {
  const out = [...items];
  let state = seed >>> 0;
  for (let i = out.length - 1; i > 0; i--) {
    state = (Math.imul(state, 1664525) + 1013904223) >>> 0;
    const j = state % (i + 1);
    [out[i], out[j]] = [out[j]!, out[i]!];
  }
  return out;
}

let jsonl: CliRun;
let csv: CliRun;

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), "headroom-batch-"));
  const files = writeSpecs(dir, 200, smallSpec);
  for (const [i, broken] of BROKEN) writeFileSync(files[i]!, broken.text);
  order = shuffled(files, 20261202);
  jsonl = runCli(["batch", "-", "--jsonl"], { input: order.join("\n") + "\n" });
  csv = runCli(["batch", "-", "--csv"], { input: order.join("\n") + "\n" });
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe("headroom batch on 200 specs with 5 broken ones", () => {
  test("195 results and 5 input errors with positions, in input order; exit code 2", () => {
    expect(jsonl.stderr).toBe("");
    expect(jsonl.status).toBe(2);
    const lines = jsonl.stdout.split("\n");
    expect(lines.pop()).toBe("");
    expect(lines).toHaveLength(200);
    const rows = lines.map((line) => JSON.parse(line));
    expect(rows.map((row) => row.index)).toEqual([...Array(200).keys()]);
    expect(rows.map((row) => row.file)).toEqual(order);
    const ok = rows.filter((row) => row.status === "ok");
    const errors = rows.filter((row) => row.status === "error");
    expect(ok).toHaveLength(195);
    expect(errors).toHaveLength(5);
    for (const row of ok) expect(["fits", "at-risk", "fails"]).toContain(row.verdict);
    for (const row of errors) {
      const broken = BROKEN.get(Number(/spec-(\d+)\.yaml$/.exec(row.file)![1]))!;
      expect(row.error.kind).toBe("input");
      expect(row.error.position.file).toBe(row.file);
      expect(row.error.position.line).toBe(broken.line);
      expect(row.error.position.column).toBe(broken.column);
      expect(row.error.message.startsWith(`${row.file}:${broken.line}:`)).toBe(true);
    }
  });

  test("--csv parses with a strict RFC 4180 reader, one record per spec in input order", () => {
    expect(csv.status).toBe(2);
    const records = parseRfc4180(csv.stdout);
    expect(records).toHaveLength(201);
    const header = records[0]!;
    const file = header.indexOf("file");
    const verdict = header.indexOf("verdict");
    expect(records.slice(1).map((r) => r[file])).toEqual(order);
    expect(records.slice(1).filter((r) => r[verdict] === "error")).toHaveLength(5);
  });

  test("the table lists every spec, then the errors with their positions", () => {
    const run = runCli(["batch", dir]);
    expect(run.status).toBe(2);
    const lines = run.stdout.split("\n");
    expect(lines[0]).toMatch(/^\s*#\s+spec\s+verdict\s/);
    expect(run.stdout).toContain("could not be evaluated\n");
    expect(run.stdout).toMatch(/200 specs: \d+ fit, \d+ at risk, \d+ fail, 5 could not be evaluated\. Predictions are estimates/);
    for (const [i, broken] of BROKEN) {
      const file = join(dir, `spec-${String(i).padStart(4, "0")}.yaml`);
      expect(run.stdout).toContain(`\n  ${file}:${broken.line}:${broken.column}: `);
    }
  });

  test("the output is byte-identical across two runs of the same input", () => {
    const again = runCli(["batch", "-", "--jsonl"], { input: order.join("\n") + "\n" });
    expect(again.stdout).toBe(jsonl.stdout);
  });
});

describe("headroom batch exit codes and options", () => {
  let small: string;
  beforeAll(() => {
    small = mkdtempSync(join(tmpdir(), "headroom-batch-small-"));
    writeFileSync(join(small, "a.yaml"), tinySpec("tiny-a"));
    writeFileSync(join(small, "b.yml"), tinySpec("tiny-b", 16));
  });
  afterAll(() => rmSync(small, { recursive: true, force: true }));

  test("0 when every spec fits (an all-binary32 tiny classifier)", () => {
    const run = runCli(["batch", join(small, "*.y*ml"), "--jsonl"]);
    expect(run.stderr).toBe("");
    const rows = run.stdout.trim().split("\n").map((line) => JSON.parse(line));
    expect(rows.map((r) => r.verdict)).toEqual(["fits", "fits"]);
    expect(run.status).toBe(0);
  });

  test("--vary makes one row per variant, named by its values; an unknown key is an input error naming it", () => {
    const run = runCli(["batch", join(small, "a.yaml"), "--vary", "training.batch=4,64", "--vary", "precision.activations=binary16,bfloat16", "--jsonl"]);
    const rows = run.stdout.trim().split("\n").map((line) => JSON.parse(line));
    expect(rows.map((r) => r.variant)).toEqual([
      "training.batch=4,precision.activations=binary16",
      "training.batch=4,precision.activations=bfloat16",
      "training.batch=64,precision.activations=binary16",
      "training.batch=64,precision.activations=bfloat16",
    ]);
    expect(rows.every((r) => r.status === "ok")).toBe(true);
    const bad = runCli(["batch", join(small, "a.yaml"), "--vary", "training.bacth=4"]);
    expect(bad.status).toBe(2);
    expect(bad.stdout).toContain("--vary training.bacth: the spec has no key training.bacth");
    const malformed = runCli(["batch", join(small, "a.yaml"), "--vary", "training.batch"]);
    expect(malformed.status).toBe(2);
    expect(malformed.stderr).toMatch(/^headroom: --vary training\.batch: expected KEY=VALUE1,VALUE2/);
  });

  test("check --vary checks each variant, named by its values; --md makes Markdown; a bad variant is reported at its line", () => {
    const run = runCli(["check", join(small, "a.yaml"), "--md", "--vary", "training.batch=8,-3", "--vary", "precision.activations=binary16"]);
    expect(run.stdout).toMatch(/^### headroom check: tiny-a \(training\.batch=8,precision\.activations=binary16\): /);
    expect(run.stdout).toContain("| format | holds | verdict | why |");
    expect(run.stdout).not.toContain("training.batch=-3,");
    expect(run.stderr).toBe(`${join(small, "a.yaml")}:4:10: training.batch: must be at least 1, got -3 [training.batch=-3,precision.activations=binary16]\n`);
    expect(run.status).toBe(2);
    const json = runCli(["check", join(small, "a.yaml"), "--json", "--vary", "training.batch=4,64"]);
    const parsed = JSON.parse(json.stdout) as { variant: string; result: { spec: { name: string } } }[];
    expect(parsed.map((entry) => entry.variant)).toEqual(["training.batch=4", "training.batch=64"]);
    expect(parsed[0]!.result.spec.name).toBe("tiny-a");
  });

  test("--md prints a Markdown table", () => {
    const run = runCli(["batch", small, "--md"]);
    expect(run.stdout).toMatch(/^\*\*headroom batch\*\*: 2 specs: 2 fit/);
    expect(run.stdout).toContain("| spec | verdict |");
  });

  test("a missing path is a row, not a stop; no progress bar on a non-terminal stderr", () => {
    const run = runCli(["batch", join(small, "a.yaml"), join(small, "missing.yaml"), "--jsonl"]);
    const rows = run.stdout.trim().split("\n").map((line) => JSON.parse(line));
    expect(rows.map((r) => r.status)).toEqual(["ok", "error"]);
    expect(rows[1].error.message).toBe(`${join(small, "missing.yaml")}: no such file or folder`);
    expect(rows[1].error.issues).toEqual([{ message: rows[1].error.message, position: { file: join(small, "missing.yaml") } }]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe("");
  });

  test("--plan naming a plan a spec lacks is an input error on its row (exit 2), in batch and in check --vary", () => {
    const run = runCli(["batch", join(small, "a.yaml"), "--plan", "mixed-bfloat16", "--jsonl"]);
    const rows = run.stdout.trim().split("\n").map((line) => JSON.parse(line));
    const message = `${join(small, "a.yaml")}: no plan named "mixed-bfloat16" in the spec; its plans: planned`;
    expect(rows).toMatchObject([{ status: "error", error: { kind: "input", message } }]);
    expect(run.status).toBe(2);
    const text = runCli(["batch", join(small, "a.yaml"), "--plan", "mixed-bfloat16"]);
    expect(text.stdout).toContain(`  ${message}\n`);
    expect(text.stdout).not.toContain("internal error");
    expect(text.status).toBe(2);
    const varied = runCli(["check", join(small, "a.yaml"), "--plan", "mixed-bfloat16", "--vary", "training.batch=4,64"]);
    expect(varied.stderr).toBe(`${message} [training.batch=4]\n${message} [training.batch=64]\n`);
    expect(varied.status).toBe(2);
  });

  test("a folder holding only a .json spec is checked, as check reads one; a JSON Schema beside it is left out", () => {
    const folder = mkdtempSync(join(tmpdir(), "headroom-batch-json-"));
    try {
      // the tiny spec as JSON (JSON is YAML 1.2's subset, YAML 1.2.2 §1.3), and the JSON Schema `headroom schema` writes
      writeFileSync(join(folder, "tiny.json"), JSON.stringify(parseYaml(tinySpec("tiny-json"))));
      writeFileSync(join(folder, "network-spec.schema.json"), runCli(["schema"]).stdout);
      const run = runCli(["batch", folder, "--jsonl"]);
      const rows = run.stdout.trim().split("\n").map((line) => JSON.parse(line));
      expect(rows).toMatchObject([{ file: join(folder, "tiny.json"), status: "ok", name: "tiny-json", verdict: "fits" }]);
      expect(run.status).toBe(0);
    } finally {
      rmSync(folder, { recursive: true, force: true });
    }
  });

  test("--jsonl, --csv and --md exclude each other; --workers must be a whole number", () => {
    expect(runCli(["batch", small, "--jsonl", "--csv"]).status).toBe(2);
    expect(runCli(["batch", small, "--workers", "0"]).stderr).toContain("--workers: expected a whole number");
  });
});
