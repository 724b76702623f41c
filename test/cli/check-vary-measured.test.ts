/**
 * `check --vary` and `batch --vary` on specs with a `measured` section (the built binary, as users run it): every
 * variant is checked with the spec's measured data exactly as a plain `check` of that variant's spec would be.
 * Weight files come from the independent writer in test/measure/writers.ts. Unreadable data is an input error: exit
 * code 2 (DEVELOPERS.md, "Exit codes").
 */
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";
import { encode, safetensorsBytes, scratch } from "../measure/writers.js";
import { probeSpec } from "../measure/probe-spec.js";

const files = scratch();
afterAll(() => files.cleanup());

const spec = (measured: string, width = 8) => probeSpec("measured-vary-probe", measured, width);

// fc1 trained to weights of magnitude 3000, far from He's sqrt(2/16) (He et al. 2015, eq. 10)
const fc1 = Array.from({ length: 8 * 16 }, (_, i) => (i % 2 ? -1 : 1) * 3000);
files.write("ckpt.safetensors", safetensorsBytes([{ name: "fc1.weight", dtype: "F32", shape: [8, 16], data: encode("F32", fc1) }]));
writeFileSync(join(files.dir, "stats.csv"), "tensor,role,rms,max\nfc2,pre-activation,0.25,1.5\n");
// 3 bytes cannot hold the 8-byte header length a safetensors file starts with (safetensors format description)
files.write("broken.safetensors", Uint8Array.of(1, 2, 3));

const GOOD = "measured:\n  weights: [ckpt.safetensors]\n  statistics: stats.csv\n";

function writeSpec(name: string, text: string): string {
  const path = join(files.dir, name);
  writeFileSync(path, text);
  return path;
}

/** The 1-based line of the first line of `text` that starts with `start`. */
function lineOf(text: string, start: string): number {
  return text.split("\n").findIndex((line) => line.startsWith(start)) + 1;
}

interface Tensor {
  id: string;
  source: string;
  start: { rms: number };
  end: { rms: number };
}
interface Result {
  verdict: string;
  formats: { format: string; verdict: string }[];
  tensors: Tensor[];
  assumptions: string[];
  lossScaleAnswer: unknown;
}

/** The numbers a check gives: the verdicts, every tensor's source and rms, the loss-scale answer, the notes. */
function numbers(result: Result) {
  return {
    verdict: result.verdict,
    formats: result.formats.map((f) => [f.format, f.verdict]),
    tensors: result.tensors.map((t) => [t.id, t.source, t.start.rms, t.end.rms]),
    lossScaleAnswer: result.lossScaleAnswer,
    assumptions: result.assumptions,
  };
}

describe("check --vary with unreadable measured data", () => {
  const text = spec("measured:\n  weights: [broken.safetensors]\n");
  const path = writeSpec("broken.yaml", text);
  // the position of the section's value in the file as written above (the loader's locate convention)
  const where = `${path}:${lineOf(text, "  weights: [broken")}:3: measured: `;
  const problem = /broken\.safetensors: file has 3 bytes, fewer than the 8-byte header length/;

  it("plain check: exit code 2 and the problem positioned at the spec's measured section", () => {
    const run = runCli(["check", path]);
    expect(run.status).toBe(2);
    const lines = run.stderr.trimEnd().split("\n");
    expect(lines).toHaveLength(1);
    expect(lines[0]!.startsWith(where)).toBe(true);
    expect(lines[0]).toMatch(problem);
  });

  it("check --vary: exit code 2 and the same line as the plain check, once for all variants", () => {
    const plain = runCli(["check", path]);
    const varied = runCli(["check", path, "--vary", "training.batch=8,16,32"]);
    expect(varied.status).toBe(2);
    expect(varied.stderr).toBe(plain.stderr);
    // the variants are still checked, as the plain check is (README: "the check still runs with what could be read")
    // one per value given: 8, 16, 32
    expect(varied.stdout.match(/^variant training\.batch=/gm)).toHaveLength(3);
  });

  it("batch and batch --vary: an input-error row at the spec's measured section, exit code 2", () => {
    for (const args of [[], ["--vary", "training.batch=8,16"]]) {
      const run = runCli(["batch", path, "--jsonl", ...args]);
      expect(run.status).toBe(2);
      const rows = run.stdout.trim().split("\n").map((line) => JSON.parse(line) as { status: string; error: { kind: string; message: string } });
      expect(rows).toHaveLength(args.length === 0 ? 1 : 2);
      for (const row of rows) {
        expect(row.status).toBe("error");
        expect(row.error.kind).toBe("input");
        expect(row.error.message.startsWith(where)).toBe(true);
        expect(row.error.message).toMatch(problem);
      }
    }
  });
});

describe("check --vary with valid measured data", () => {
  const path = writeSpec("measured.yaml", spec(GOOD));
  const bare = writeSpec("bare.yaml", spec(""));

  it("the variant equal to the spec gives the plain check's numbers, which differ from the uncalibrated spec's", () => {
    const plain = runCli(["check", "--json", path]);
    expect(plain.stderr).toBe("");
    const varied = runCli(["check", "--json", path, "--vary", "training.batch=8,16"]);
    expect(varied.stderr).toBe("");
    const entries = JSON.parse(varied.stdout) as { variant: string; result: Result }[];
    expect(entries.map((e) => e.variant)).toEqual(["training.batch=8", "training.batch=16"]);
    // the spec's own batch is 8: that variant is the spec itself (README, "--vary sets a value in the spec")
    const same = numbers(entries[0]!.result);
    expect(same).toEqual(numbers(JSON.parse(plain.stdout) as Result));
    // and the measured data is what moved them: without it fc1's weights are He's, 3000/sqrt(2/16) times smaller
    const uncalibrated = numbers(JSON.parse(runCli(["check", "--json", bare]).stdout) as Result);
    const rms = (n: ReturnType<typeof numbers>, id: string) => n.tensors.find((t) => t[0] === id)?.[2] as number;
    // 3000: the magnitude written into ckpt.safetensors above (invented for the demo)
    expect(rms(same, "fc1/weight")).toBeCloseTo(3000, 6);
    expect(rms(same, "fc1/weight") / rms(uncalibrated, "fc1/weight")).toBeGreaterThan(1000);
    expect(same.tensors).not.toEqual(uncalibrated.tensors);
    // 0.25: fc2's row in stats.csv above
    expect(rms(same, "fc2/pre-activation")).toBeCloseTo(0.25, 9);
    // the other variant is calibrated too
    const other = entries[1]!.result.tensors.find((t) => t.id === "fc1/weight")!;
    expect([other.source, other.start.rms]).toEqual(["measured", rms(same, "fc1/weight")]);
  });

  it("a variant whose width no longer fits the weight file gets what a plain check of that spec gets", () => {
    // fc1 four wide needs 4·16 weights; the file's fc1.weight holds 8·16, so it is not used (README, "measured")
    const narrow = writeSpec("narrow.yaml", spec(GOOD, 4));
    const plain = runCli(["check", "--json", narrow]);
    const varied = runCli(["check", "--json", path, "--vary", "layers[0].width=4"]);
    expect(varied.status).toBe(plain.status);
    // the same lines (the unusable fc1.weight, at the measured section), named by the variant and the file it varies
    expect(plain.stderr).toMatch(/tensor "fc1\.weight" has 128 elements \[8, 16\] but fc1\/weight needs 64 \[4, 16\]/);
    expect(varied.stderr).toBe(plain.stderr.replaceAll(narrow, path).replaceAll("\n", " [layers[0].width=4]\n"));
    const entry = (JSON.parse(varied.stdout) as { result: Result }[])[0]!;
    expect(numbers(entry.result)).toEqual(numbers(JSON.parse(plain.stdout) as Result));
    expect(entry.result.tensors.find((t) => t.id === "fc1/weight")?.source).toBe("predicted");
    expect(entry.result.tensors.find((t) => t.id === "fc2/pre-activation")?.source).toBe("measured");
  });

  it("batch --vary: the variant equal to the spec summarises as the plain batch row", () => {
    const plain = JSON.parse(runCli(["batch", path, "--jsonl"]).stdout.trim()) as Record<string, unknown>;
    const varied = JSON.parse(runCli(["batch", path, "--jsonl", "--vary", "training.batch=8"]).stdout.trim()) as Record<string, unknown>;
    const bareRow = JSON.parse(runCli(["batch", bare, "--jsonl"]).stdout.trim()) as Record<string, unknown>;
    const { file: _a, variant: _b, ...plainRest } = plain;
    const { file: _c, variant: _d, ...variedRest } = varied;
    const { file: _e, variant: _f, ...bareRest } = bareRow;
    expect(variedRest).toEqual(plainRest);
    expect({ ...bareRest, name: plainRest["name"] }).not.toEqual(plainRest);
  });
});
