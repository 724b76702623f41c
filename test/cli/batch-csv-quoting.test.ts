// `headroom batch --csv` read back by csv-parse (npm), a CSV parser independent of this project, held to RFC 4180 §2:
// records end with CRLF (rule 1; LF alone ends none here), every record has the header's field count (rule 4), and a
// field holding a comma, a double quote or a line break is quoted with inner quotes doubled (rules 6 and 7). The
// fields must read back exactly as JSON Lines gives them for the same specs.
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { parse } from "csv-parse/sync";
import { afterAll, describe, expect, test } from "vitest";
import { runCli } from "../helpers/run.js";
import { BATCH_CSV_HEADER } from "../../src/report/batch.js";

const spec = (name: string, width: number | string = 4) =>
  `name: ${JSON.stringify(name)}\ninput: { features: 8 }\ntraining:\n  batch: 4\n  loss: { kind: cross-entropy, classes: 4 }\nlayers:\n  - { type: dense, width: ${width} }\n`;

const dir = mkdtempSync(join(tmpdir(), "headroom-csv-"));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
// file names and spec names with commas, quotes, line breaks and edge spaces (invented tide-gauge networks)
const files = [
  ["a tide, north.yaml", spec('gauge "north", harbour')],
  ['b "quoted" gauge.yaml', spec("line one\nline two")],
  ["c crlf.yaml", spec("carriage\r\nreturn, and \"more\"")],
  ["d spaces.yaml", spec("  padded  ")],
  ["e broken, \"width\".yaml", spec("broken", '"four"')],
].map(([file, text]) => {
  const path = join(dir, file!);
  writeFileSync(path, text!);
  return path;
});

describe("headroom batch --csv read by an independent RFC 4180 parser (csv-parse)", () => {
  const csv = runCli(["batch", ...files, "--csv"]);
  const jsonl = runCli(["batch", ...files, "--jsonl"]);

  test("one record per spec with the header's fields, each field as JSON Lines gives it", () => {
    // the broken spec is an input error: exit code 2 (DEVELOPERS.md, "Exit codes")
    expect(csv.status).toBe(2);
    expect(csv.stdout.endsWith("\r\n")).toBe(true);
    const records: string[][] = parse(csv.stdout, { record_delimiter: "\r\n", relax_quotes: false, relax_column_count: false, skip_empty_lines: false });
    expect(records[0]).toEqual([...BATCH_CSV_HEADER]);
    const rows = jsonl.stdout.trimEnd().split("\n").map((line) => JSON.parse(line));
    expect(records).toHaveLength(1 + rows.length);
    const at = (name: string) => BATCH_CSV_HEADER.indexOf(name as (typeof BATCH_CSV_HEADER)[number]);
    rows.forEach((row, i) => {
      const record = records[i + 1]!;
      expect(record).toHaveLength(BATCH_CSV_HEADER.length);
      expect(record[at("file")]).toBe(row.file);
      expect(record[at("name")]).toBe(row.status === "ok" ? row.name : "");
      expect(record[at("error")]).toBe(row.status === "error" ? row.error.message : "");
    });
    expect(rows.map((row) => row.name)).toEqual(['gauge "north", harbour', "line one\nline two", 'carriage\r\nreturn, and "more"', "  padded  ", undefined]);
    // line 7, column 27: the width's value in the text spec() writes (counted by hand)
    expect(rows[4].error.message).toContain('e broken, "width".yaml:7:27: layers[0].width: expected a number, got the string "four"');
  });

  test("the same bytes on a second run", () => {
    expect(runCli(["batch", ...files, "--csv"]).stdout).toBe(csv.stdout);
  });
});
