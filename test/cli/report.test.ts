import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
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
    expect(readdirSync(dir).filter((name) => name.endsWith(".tmp"))).toEqual([]);
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

  test("an unwritable target is an input error", () => {
    const run = runCli(["report", "specs/cnn-batchnorm.yaml", "-o", join(dir, "missing-folder", "x.html")]);
    expect(run.status).toBe(2);
    expect(run.stderr).toMatch(/cannot write the report \(ENOENT\)/);
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
