import { describe, expect, it } from "vitest";
import { check } from "../../src/check.js";
import { renderCheckText } from "../../src/report/check-text.js";
import { parseSpec } from "../../src/spec/index.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// The words a user reads about initialisations, pools and formats holding no stored tensor.

function spec(yaml: string, name: string): NetworkSpec {
  const parsed = parseSpec(yaml, name);
  if (!parsed.ok) throw new Error(`${name} does not load: ${parsed.issues.map((i) => i.message).join("; ")}`);
  return parsed.spec;
}

// An invented scenario: a beehive-sound classifier with an average-pooled conv stem and a LeCun-initialised head,
// bfloat16 storage, binary32 optimizer states and binary16 accumulation.
const HIVE = spec(
  `name: hive-sounds
input: { channels: 1, height: 16, width: 16 }
training:
  batch: 8
  loss: { kind: cross-entropy, classes: 5 }
  optimizer: { kind: adam, learning-rate: 1.0e-3 }
precision: { activations: bfloat16, weights: bfloat16, gradients: bfloat16, optimizer-states: binary32, master-weights: binary32, accumulate: binary16 }
layers:
  - { type: conv2d, channels: 4, kernel: 3, init: he-normal }
  - relu
  - { type: average-pool, size: 2 }
  - flatten
  - { type: dense, width: 5, init: lecun-normal }
`,
  "hive-sounds.yaml",
);

describe("ledger words", () => {
  const result = check(HIVE, { ledger: true });
  const first = (id: string) => result.tensors.find((t) => t.id === id)!.ledger![0]!;

  it("cites the paper of each initialisation's variance rule", () => {
    // var = 1/fan-in: LeCun, Bottou, Orr & Müller 1998, Efficient BackProp §4.6 (from memory)
    expect(first("dense-4/weight").source).toContain("LeCun et al. 1998");
    // var = 2/fan-in: He, Zhang, Ren & Sun 2015, Delving Deep into Rectifiers, eq. 10 (from memory)
    expect(first("conv2d-0/weight").source).toContain("He et al. 2015");
    for (const id of ["dense-4/weight", "conv2d-0/weight"]) {
      expect(first(id).source).not.toContain("InitSpec");
      expect(first(id).source).not.toContain("Glorot");
    }
  });

  it("says an average pool of non-overlapping windows passes each input 1/k of one output gradient", () => {
    const rules = result.tensors.flatMap((t) => t.ledger ?? []).filter((e) => e.layer === "average-pool-2" && e.rule.includes("each input gets")).map((e) => e.rule);
    expect(rules.length).toBeGreaterThan(0);
    for (const rule of rules) {
      expect(rule).toContain("each input gets 1/4 of the one output gradient whose window covers it");
      expect(rule).not.toMatch(/of 1 gradients/);
    }
  });
});

describe("a format holding no stored tensor", () => {
  it("says what is judged in it, not 0 tensors", () => {
    const result = check(HIVE);
    const states = result.formats.find((f) => f.format === "binary32")!;
    expect(states.tensorsJudged).toBe(0);
    const operations = result.hazards.filter((h) => h.evaluations.some((e) => e.format === "binary32")).length;
    expect(operations).toBeGreaterThan(0);
    const line = renderCheckText(result, { width: 1000 }).split("\n").find((l) => l.startsWith("  binary32"))!;
    expect(line).not.toContain("0 tensors");
    expect(line).toContain(`no stored tensor; ${operations} operation${operations === 1 ? "" : "s"} judged in it`);
  });
});
