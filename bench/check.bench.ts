import { readdirSync, readFileSync } from "node:fs";
import { bench, describe } from "vitest";
import { check } from "../src/check.js";
import { parseSpec } from "../src/spec/index.js";
import type { NetworkSpec } from "../src/spec/types.js";

// The core check call (graph, prediction, risk, hazards, verdicts) on every example spec; parsing is done
// outside the timed region. Milliseconds per spec: read the "mean" column.
const specs: [string, NetworkSpec][] = readdirSync("specs")
  .filter((name) => /\.ya?ml$/.test(name))
  .sort()
  .map((name) => {
    const parsed = parseSpec(readFileSync(`specs/${name}`, "utf8"), `specs/${name}`);
    if (!parsed.ok) throw new Error(`specs/${name} does not load`);
    return [name, parsed.spec];
  });

describe("check on each example spec", () => {
  for (const [name, spec] of specs) {
    bench(name, () => {
      const result = check(spec);
      // use the result so the work cannot be skipped
      if (result.tensors.length === 0) throw new Error(`${name}: no tensors`);
    });
  }
});
