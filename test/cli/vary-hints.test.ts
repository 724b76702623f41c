/**
 * A misspelt --vary key gets a did-you-mean, in `batch` and in `check --vary` alike (the built binary on an example
 * spec). The hints come from the keys at that level of the spec and of its schema (src/spec/issues.ts closestWord);
 * each misspelling is one edit from the key (Damerau 1964 edit distance). A bad key is an input error: exit code 2
 * (DEVELOPERS.md, "Exit codes").
 */
import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

const SPEC = "specs/deep-relu-he.yaml";

describe("--vary with a misspelt key", () => {
  it("batch: the row's error names the key the spec has", () => {
    const run = runCli(["batch", SPEC, "--jsonl", "--vary", "training.batchsize=8"]);
    expect(run.status).toBe(2);
    const row = JSON.parse(run.stdout.trim()) as { status: string; error: { kind: string; message: string } };
    expect(row.status).toBe("error");
    expect(row.error.kind).toBe("input");
    expect(row.error.message).toBe(`${SPEC}: --vary training.batchsize: the spec has no key training.batchsize (did you mean "training.batch"?)`);
  });

  it("check --vary: the same line, named by its variant", () => {
    const run = runCli(["check", SPEC, "--vary", "training.batchsize=8"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(`${SPEC}: --vary training.batchsize: the spec has no key training.batchsize (did you mean "training.batch"?) [training.batchsize=8]\n`);
  });

  it("a key of a layer, and a key the file leaves to its default", () => {
    const layer = runCli(["check", SPEC, "--vary", "layers[0].widht=64"]);
    expect(layer.stderr).toContain('the spec has no key layers[0].widht (did you mean "layers[0].width"?)');
    // deep-relu-he.yaml gives no loss-scale; the schema has it, so varying it is allowed and it is the hint
    const omitted = runCli(["check", SPEC, "--vary", "precision.los-scale=1024"]);
    expect(omitted.stderr).toContain('the spec has no key precision.los-scale (did you mean "precision.loss-scale"?)');
    const allowed = runCli(["check", SPEC, "--vary", "precision.loss-scale=1024"]);
    expect(allowed.stderr).toBe("");
  });
});

describe("--vary with a value the spec loads with a warning", () => {
  // an untrained classifier's cross-entropy is about ln(10) = 2.30 (uniform predictions, common practice): a final loss of
  // 5 is not below it. 24:17 is where deep-relu-he.yaml writes final-loss's value (read off the file)
  const warning = `${SPEC}:24:17: training.horizon.final-loss: the final loss 5 is not below the starting loss ln(10) ≈ 2.30: gradients are taken not to shrink`;

  it("check --vary prints the variant's warning on stderr, named by the variant, as a plain check prints a spec's", () => {
    const run = runCli(["check", SPEC, "--json", "--vary", "training.horizon.final-loss=0.15,5"]);
    expect(run.stderr).toBe(`warning: ${warning} [training.horizon.final-loss=5]\n`);
  });

  it("batch keeps it on the variant's row (JSON Lines) and lists it under the table", () => {
    const rows = runCli(["batch", SPEC, "--jsonl", "--vary", "training.horizon.final-loss=0.15,5"]).stdout.trim().split("\n").map((line) => JSON.parse(line) as { warnings?: string[] });
    expect(rows.map((row) => row.warnings)).toEqual([undefined, [warning]]);
    const text = runCli(["batch", SPEC, "--vary", "training.horizon.final-loss=0.15,5"]).stdout;
    expect(text).toContain(`warnings (judged as written)\n  ${warning} [training.horizon.final-loss=5]\n`);
  });
});
