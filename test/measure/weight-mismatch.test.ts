/**
 * A measured weight that a weight of the network finds by name but that holds another number of elements is not
 * used (README, "Measured data in a check": "A tensor must hold as many elements as the weight"). Every command that
 * checks a spec says so at the spec's `measured` section, and the check's notes say which weights were measured, which
 * were not and why. Weight files come from the independent writer in writers.ts; the CLI runs are the built binary.
 */
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { checkFile } from "../../src/check.js";
import { runCli } from "../helpers/run.js";
import { encode, safetensorsBytes, scratch } from "./writers.js";
import { alternating, probeSpec } from "./probe-spec.js";

const files = scratch();
afterAll(() => files.cleanup());

const spec = (weights: string, width = 8) => probeSpec("weight-mismatch-probe", `measured:\n  weights: [${weights}]`, width);

// a checkpoint of the 8-wide network: fc1 is 8×16, fc2 4×8 (a dense layer's weight is outputs × inputs)
files.write(
  "ckpt.safetensors",
  safetensorsBytes([
    { name: "fc1.weight", dtype: "F32", shape: [8, 16], data: encode("F32", alternating(128, 0.5)) },
    { name: "fc2.weight", dtype: "F32", shape: [4, 8], data: encode("F32", alternating(32, 0.25)) },
  ]),
);
// fc2 saved from another network, 3×8: 24 elements where the spec's fc2 needs 32
files.write(
  "partial.safetensors",
  safetensorsBytes([
    { name: "fc1.weight", dtype: "F32", shape: [8, 16], data: encode("F32", alternating(128, 0.5)) },
    { name: "fc2.weight", dtype: "F32", shape: [3, 8], data: encode("F32", alternating(24, 0.25)) },
  ]),
);

function writeSpec(name: string, text: string): string {
  const path = join(files.dir, name);
  writeFileSync(path, text);
  return path;
}

/** Where the loader positions the `measured` section of these specs: the first key of its value. */
function measuredAt(path: string, text: string): string {
  const line = text.split("\n").findIndex((l) => l.startsWith("  weights: [")) + 1;
  return `${path}:${line}:3: measured: `;
}

const FC1_MISMATCH = /ckpt\.safetensors: tensor "fc1\.weight" has 128 elements \[8, 16\] but fc1\/weight needs 64 \[4, 16\]; not used, so fc1\/weight keeps the spec's initialisation$/;
const FC2_MISMATCH = /ckpt\.safetensors: tensor "fc2\.weight" has 32 elements \[4, 8\] but fc2\/weight needs 16 \[4, 4\]; not used, so fc2\/weight keeps the spec's initialisation$/;

describe("a measured weight with another element count", () => {
  const narrowText = spec("ckpt.safetensors", 4);
  const narrow = writeSpec("narrow.yaml", narrowText);
  const partialText = spec("partial.safetensors");
  const partial = writeSpec("partial.yaml", partialText);
  const fullText = spec("ckpt.safetensors");
  const full = writeSpec("full.yaml", fullText);

  it("checkFile: one warning per weight at the spec's measured section", async () => {
    const checked = await checkFile(narrow);
    if (!checked.ok) throw new Error("the spec does not load");
    const measured = checked.warnings.filter((w) => w.path === "measured");
    expect(measured.map((w) => w.message)).toEqual([expect.stringMatching(FC1_MISMATCH), expect.stringMatching(FC2_MISMATCH)]);
    const located = `${measuredAt(narrow, narrowText)}`.split(":");
    for (const w of measured) expect([w.file, String(w.line), String(w.column)]).toEqual(located.slice(0, 3));
    // a checkpoint that fits the network gives none
    const fits = await checkFile(full);
    expect(fits.ok && fits.warnings).toEqual([]);
  });

  it("the notes say how many weights were measured, and which were not and why", async () => {
    const none = await checkFile(narrow);
    if (!none.ok) throw new Error("the spec does not load");
    const notes = none.result.assumptions.join("\n");
    expect(notes).toMatch(/0 of 2 weights/);
    expect(notes).toMatch(/fc1\/weight \(fc1\.weight has 128 elements \[8, 16\], it needs 64 \[4, 16\]\)/);
    expect(notes).toMatch(/fc2\/weight \(fc2\.weight has 32 elements \[4, 8\], it needs 16 \[4, 4\]\)/);
    expect(notes).not.toMatch(/no tensor matched/);
    // the tensors already explained are not listed again as merely unused
    expect(notes).not.toMatch(/of the weight files (is|are) not used/);

    const some = await checkFile(partial);
    if (!some.ok) throw new Error("the spec does not load");
    const someNotes = some.result.assumptions.join("\n");
    expect(someNotes).toMatch(/Weights measured from .*partial\.safetensors \(1 of 2 weights\): fc1\/weight ← fc1\.weight\./);
    expect(someNotes).toMatch(/1 weight keeps the spec's initialisation because the tensor it matched cannot be used: fc2\/weight \(fc2\.weight has 24 elements \[3, 8\], it needs 32 \[4, 8\]\)\./);
    expect(some.result.tensors.find((t) => t.id === "fc2/weight")?.source).toBe("predicted");
    expect(some.result.tensors.find((t) => t.id === "fc1/weight")?.source).toBe("measured");
  });

  it("plain check: the lines at the measured section and exit code 2; the check still runs", () => {
    const run = runCli(["check", "--json", narrow]);
    expect(run.status).toBe(2);
    const lines = run.stderr.trimEnd().split("\n");
    expect(lines).toHaveLength(2);
    for (const line of lines) expect(line.startsWith(measuredAt(narrow, narrowText))).toBe(true);
    expect(lines[0]).toMatch(FC1_MISMATCH);
    expect(lines[1]).toMatch(FC2_MISMATCH);
    expect((JSON.parse(run.stdout) as { verdict: string }).verdict).toMatch(/^(fits|at-risk|fails)$/);
    const clean = runCli(["check", full]);
    expect(clean.stderr).toBe("");
  });

  it("check --vary: the lines for the variant that no longer fits the checkpoint, named by its variant", () => {
    const run = runCli(["check", full, "--vary", "layers[0].width=4,8"]);
    expect(run.status).toBe(2);
    const lines = run.stderr.trimEnd().split("\n");
    expect(lines).toHaveLength(2);
    const at = measuredAt(full, fullText);
    for (const line of lines) {
      expect(line.startsWith(at)).toBe(true);
      expect(line.endsWith(" [layers[0].width=4]")).toBe(true);
    }
    expect(lines[0]!.slice(0, -" [layers[0].width=4]".length)).toMatch(FC1_MISMATCH);
    expect(lines[1]!.slice(0, -" [layers[0].width=4]".length)).toMatch(FC2_MISMATCH);
    // both variants are still checked
    expect(run.stdout.match(/^variant layers\[0\]\.width=/gm)).toHaveLength(2);
  });

  it("batch rows: an input error at the measured section for the variant that no longer fits, a verdict for the other", () => {
    const run = runCli(["batch", full, "--jsonl", "--vary", "layers[0].width=4,8"]);
    expect(run.status).toBe(2);
    const rows = run.stdout
      .trim()
      .split("\n")
      .map((line) => JSON.parse(line) as { variant: string; status: string; error?: { kind: string; message: string } });
    expect(rows.map((r) => [r.variant, r.status])).toEqual([
      ["layers[0].width=4", "error"],
      ["layers[0].width=8", "ok"],
    ]);
    expect(rows[0]!.error!.kind).toBe("input");
    expect(rows[0]!.error!.message.startsWith(measuredAt(full, fullText))).toBe(true);
    expect(rows[0]!.error!.message).toMatch(/tensor "fc1\.weight" has 128 elements \[8, 16\] but fc1\/weight needs 64 \[4, 16\]/);
    expect(rows[0]!.error!.message).toMatch(/\(and 1 more problem\)$/);
    const plainRow = JSON.parse(runCli(["batch", narrow, "--jsonl"]).stdout.trim()) as { status: string };
    expect(plainRow.status).toBe("error");
  });

  it("a tensor two weights name in measured.names (tied weights) serves both; the notes say so, and it is no error", () => {
    // fc1 8×8 and fc2 8×8: both hold 64 elements, so the one tensor fits either
    files.write("tied.safetensors", safetensorsBytes([{ name: "shared", dtype: "F32", shape: [8, 8], data: encode("F32", alternating(64, 0.5)) }]));
    const text = spec("tied.safetensors")
      .replace("features: 16", "features: 8")
      .replace("width: 4", "width: 8")
      .replace("  weights: [tied.safetensors]\n", "  weights: [tied.safetensors]\n  names: { fc1: shared, fc2: shared }\n");
    const path = writeSpec("tied.yaml", text);
    const run = runCli(["check", "--json", path]);
    expect(run.stderr).toBe("");
    expect(run.status).not.toBe(2);
    const notes = (JSON.parse(run.stdout) as { assumptions: string[] }).assumptions.join("\n");
    expect(notes).toMatch(/\(2 of 2 weights\): fc1\/weight ← shared \(names\)/);
    expect(notes).toMatch(/fc2\/weight ← shared \(names; shared with fc1\/weight \(named in measured.names\)\)/);
    const tensors = (JSON.parse(run.stdout) as { tensors: { id: string; source: string }[] }).tensors;
    expect(tensors.find((t) => t.id === "fc2/weight")?.source).toBe("measured");
  });

  it("compare: the same lines as plain check, exit code 2", () => {
    const plain = runCli(["check", narrow]);
    const run = runCli(["compare", "--json", narrow]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe(plain.stderr);
  });
});

describe("measured.names keyed by <layer>/<weight>", () => {
  // README, "Measured data in a check": `names["<layer>/<weight>"]` names a tensor exactly
  it("loads without a warning when the layer exists, and warns about the layer when it does not", async () => {
    const { parseSpec } = await import("../../src/spec/index.js");
    const text = (key: string) => spec("ckpt.safetensors").replace("  weights: [ckpt.safetensors]\n", `  weights: [ckpt.safetensors]\n  names: { ${key}: fc1.weight }\n`);
    const good = parseSpec(text("fc1/weight"), "good.yaml");
    expect(good.ok && good.warnings).toEqual([]);
    const typo = parseSpec(text("fcl/weight"), "typo.yaml");
    expect(typo.ok && typo.warnings.map((w) => [w.path, w.message])).toEqual([['measured.names["fcl/weight"]', 'no layer is named "fcl" (did you mean "fc1"?)']]);
  });
});
