import { readFileSync } from "node:fs";
import { bench, describe } from "vitest";
import { LineCounter, parseDocument } from "yaml";
import { built } from "./built.js";

// the built library, loaded as a user's program loads it (bench/built.ts)
const { parseSpec } = await built<typeof import("../src/spec/index.js")>("spec/index.js");

// Loading a spec: the baseline is the yaml library alone (parse with positions, convert to plain data);
// parseSpec adds validation, the cross-key checks and normalization. Read the ratio of the means.
const text = readFileSync("specs/transformer-encoder.yaml", "utf8");
const broken = text.replace("heads: 8", "heads: -8").replace("hidden: 1376", "hiden: 1376");

describe("load the transformer example", () => {
  bench("baseline: yaml parseDocument + toJS", () => {
    const doc = parseDocument(text, { lineCounter: new LineCounter(), merge: true });
    if (doc.toJS() === null) throw new Error("empty");
  }, { time: 2000, warmupIterations: 20 });

  bench("parseSpec (valid)", () => {
    if (!parseSpec(text, "transformer-encoder.yaml").ok) throw new Error("should load");
  }, { time: 2000, warmupIterations: 20 });

  bench("parseSpec (two errors, positioned)", () => {
    if (parseSpec(broken, "transformer-encoder.yaml").ok) throw new Error("should not load");
  }, { time: 2000, warmupIterations: 20 });
});
