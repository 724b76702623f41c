import { describe, expect, test } from "vitest";
import { parseSpec } from "../../src/spec/index.js";
import { exampleSpecs, generatedSpec, smallSpec, tinySpec } from "./generate.js";

describe("generated specs (inputs of the batch tests and benchmark)", () => {
  test("each example, renamed and with a new batch size, is a valid spec", () => {
    const examples = exampleSpecs();
    expect(examples.length).toBeGreaterThanOrEqual(5);
    for (let i = 0; i < examples.length * 2; i++) {
      const result = parseSpec(generatedSpec(i, examples), `generated-${i}.yaml`);
      expect(result.ok, `spec ${i}: ${result.ok ? "" : JSON.stringify(result.issues[0])}`).toBe(true);
      if (result.ok) {
        expect(result.spec.name).toBe(`${examples[i % examples.length]!.name}-${String(i).padStart(4, "0")}`);
        expect(result.spec.training.batch).toBe([16, 32, 64, 128, 256][Math.floor(i / examples.length) % 5]);
      }
    }
  });
  test("the tiny spec and every small spec are valid", () => {
    expect(parseSpec(tinySpec("tiny"), "tiny.yaml").ok).toBe(true);
    for (let i = 0; i < 84; i++) {
      const result = parseSpec(smallSpec(i), `small-${i}.yaml`);
      expect(result.ok, `small spec ${i}: ${result.ok ? "" : JSON.stringify(result.issues[0])}`).toBe(true);
    }
  });
});
