import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { basename, dirname, join } from "node:path";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { runCli } from "../helpers/run.js";

let dir: string;
beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), "headroom-report-cli-"));
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe("headroom report", () => {
  test("writes one self-contained page, whole, and exits 0", () => {
    const file = join(dir, "cnn.html");
    const run = runCli(["report", "specs/cnn-batchnorm.yaml", "-o", file]);
    expect(run.stderr).toBe("");
    expect(run.stdout).toBe("");
    expect(run.status).toBe(0);
    const html = readFileSync(file, "utf8");
    expect(html.startsWith("<!doctype html>")).toBe(true);
    expect(html).toContain("Content-Security-Policy");
    expect(html).not.toMatch(/<script/i);
    expect(html).toContain('<svg class="chart band-chart"');
    // the temporary file beside the target (.cnn.html.<hex>.tmp, in the target's folder) is gone too
    expect(readdirSync(dir).filter((name) => name.startsWith(".cnn.html.") || name.endsWith(".tmp"))).toEqual([]);
  });

  test("is byte-identical across two runs, to a file and to stdout", () => {
    const a = join(dir, "a.html");
    const b = join(dir, "b.html");
    runCli(["report", "specs/deep-sigmoid.yaml", "-o", a]);
    runCli(["report", "specs/deep-sigmoid.yaml", "-o", b]);
    expect(readFileSync(a)).toEqual(readFileSync(b));
    expect(runCli(["report", "specs/deep-sigmoid.yaml"]).stdout).toBe(readFileSync(a, "utf8"));
  });

  test("a bad spec is an input error and writes nothing", () => {
    const file = join(dir, "none.html");
    const run = runCli(["report", "specs/no-such-spec.yaml", "-o", file]);
    expect(run.status).toBe(2);
    expect(run.stderr).toContain("no-such-spec.yaml");
    expect(run.stderr).not.toMatch(/\n\s+at /);
    expect(existsSync(file)).toBe(false);
  });

  test("an unwritable target is an input error that says why in words", () => {
    const missing = join(dir, "missing-folder");
    const run = runCli(["report", "specs/cnn-batchnorm.yaml", "-o", join(missing, "x.html")]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(`headroom: ${join(missing, "x.html")}: cannot write the report: the folder ${missing} does not exist\n`);
  });

  test("a folder as the target is an input error that asks for a file name", () => {
    const run = runCli(["report", "specs/deep-sigmoid.yaml", "-o", dir]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(`headroom: ${dir}: cannot write the report: it is a folder; give a file name, such as report.html\n`);
    // the temporary file beside the target (in its parent folder) is gone too
    expect(readdirSync(dirname(dir)).filter((name) => name.startsWith(`.${basename(dir)}.`))).toEqual([]);
  });
});

describe("check output is byte-identical across runs", () => {
  test.each([[[]], [["--json"]], [["--md"]]])("check %j", (flags) => {
    const first = runCli(["check", "specs/transformer-encoder.yaml", ...flags]);
    const second = runCli(["check", "specs/transformer-encoder.yaml", ...flags]);
    expect(first.stdout.length).toBeGreaterThan(100);
    expect(second.stdout).toBe(first.stdout);
  });
});

describe("report carries the spec's warnings", () => {
  test("lists each warning in the page's header, escaped, and still prints it on stderr (specs/README: a warm-up longer than the horizon loads with a warning)", () => {
    const dir = mkdtempSync(join(tmpdir(), "headroom-report-warn-"));
    const file = join(dir, "short.yaml");
    writeFileSync(
      file,
      [
        "name: short",
        "input: { features: 10 }",
        "training: { batch: 8, loss: { kind: cross-entropy, classes: 3 }, horizon: { steps: 10 }, optimizer: { kind: adam, warmup-steps: 100 } }",
        "layers: [{ type: dense, width: 3 }]",
      ].join("\n"),
    );
    const run = runCli(["report", file]);
    rmSync(dir, { recursive: true, force: true });
    expect(run.status).toBe(0);
    expect(run.stderr).toContain(`warning: ${file}:3:`);
    expect(run.stdout).toMatch(/<p class="description">Warnings \(judged as written\):<\/p><ul><li>[^<]*short\.yaml:3:\d+: training\.optimizer\.warmup-steps: warm-up \(100 steps\) is longer than the horizon/);
  });
});
