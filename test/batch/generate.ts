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

/**
 * A small classifier on invented sensor data, number i of a family: 1 to 3 hidden layers of 16 to 128
 * units, one of three activations, one of three storage formats. Cheap to check, for tests that run many.
 */
export function smallSpec(i: number): string {
  const widths = [16, 32, 64, 128];
  const activations = ["relu", "gelu", "tanh"];
  const formats = ["binary16", "bfloat16", "binary32"];
  const hidden = 1 + (i % 3);
  const lines = [
    `name: small-${String(i).padStart(4, "0")}`,
    "description: a small classifier of invented sensor readings",
    `input: { features: ${8 * (1 + (i % 4))} }`,
    "training:",
    `  batch: ${[8, 32, 128][i % 3]}`,
    `  loss: { kind: cross-entropy, classes: ${4 + (i % 7)} }`,
    `precision: { activations: ${formats[i % 3]}, gradients: ${formats[(i + 1) % 3]} }`,
    "layers:",
  ];
  for (let h = 0; h < hidden; h++) {
    lines.push(`  - { type: dense, width: ${widths[(i + h) % 4]} }`, `  - ${activations[(i + h) % 3]}`);
  }
  lines.push(`  - { type: dense, width: ${4 + (i % 7)} }`, "");
  return lines.join("\n");
}

/** Write `count` specs made by `make` into `dir` as spec-0000.yaml…; returns their paths in order. */
export function writeSpecs(dir: string, count: number, make: (i: number) => string): string[] {
  return Array.from({ length: count }, (_, i) => {
    const path = join(dir, `spec-${String(i).padStart(4, "0")}.yaml`);
    writeFileSync(path, make(i));
    return path;
  });
}

/** Write `count` specs varied from the examples into `dir` (see {@link generatedSpec}). */
export function writeGeneratedSpecs(dir: string, count: number): string[] {
  const examples = exampleSpecs();
  const schema = specJsonSchema();
  return writeSpecs(dir, count, (i) => generatedSpec(i, examples, schema));
}
