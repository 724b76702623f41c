/**
 * Generated batches of specs for tests and benchmarks: the example specs (specs/*.yaml, invented
 * scenarios) varied in name and batch size with --vary's own text edits, plus a tiny classifier.
 */
import { readdirSync, readFileSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import { fileURLToPath } from "node:url";
import { parseVaryOption, variantsOf, varyText } from "../../src/batch/vary.js";
import { specJsonSchema } from "../../src/spec/index.js";

const SPECS = fileURLToPath(new URL("../../specs/", import.meta.url));

/** The example specs' texts, in file-name order. */
export function exampleSpecs(): { name: string; text: string }[] {
  return readdirSync(SPECS)
    .filter((name) => name.endsWith(".yaml"))
    .sort()
    .map((name) => ({ name: name.replace(/\.yaml$/, ""), text: readFileSync(join(SPECS, name), "utf8") }));
}

/** A tiny classifier on invented sensor data; everything in binary32 unless a plan is given. */
export function tinySpec(name: string, batch: number | string = 8): string {
  return [
    `name: ${name}`,
    "input: { features: 16 }",
    "training:",
    `  batch: ${batch}`,
    "  loss: { kind: cross-entropy, classes: 4 }",
    "layers:",
    "  - { type: dense, width: 32 }",
    "  - relu",
    "  - { type: dense, width: 4 }",
    "",
  ].join("\n");
}

const BATCHES = [16, 32, 64, 128, 256];

/** The text of generated spec number i: example i mod 7, renamed, with one of five batch sizes. */
export function generatedSpec(i: number, examples = exampleSpecs(), schema = specJsonSchema()): string {
  const example = examples[i % examples.length]!;
  const [variant] = variantsOf([
    parseVaryOption(`name=${example.name}-${String(i).padStart(4, "0")}`),
    parseVaryOption(`training.batch=${BATCHES[Math.floor(i / examples.length) % BATCHES.length]}`),
  ]);
  return varyText(example.text, variant!, schema).text;
}

/** Write `count` generated specs into `dir` as spec-0000.yaml…; returns their paths in order. */
export function writeGeneratedSpecs(dir: string, count: number): string[] {
  const examples = exampleSpecs();
  const schema = specJsonSchema();
  return Array.from({ length: count }, (_, i) => {
    const path = join(dir, `spec-${String(i).padStart(4, "0")}.yaml`);
    writeFileSync(path, generatedSpec(i, examples, schema));
    return path;
  });
}
