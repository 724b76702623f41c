import { describe, expect, test, vi } from "vitest";

// the flags the module sets, recorded instead of set; two cores, so that 64 workers fill them and 1 does not
const { flagsSet } = vi.hoisted(() => ({ flagsSet: [] as string[] }));
vi.mock("node:v8", () => ({ setFlagsFromString: (flags: string) => void flagsSet.push(flags) }));
vi.mock("node:os", () => ({ availableParallelism: () => 2 }));

import { BATCH_V8_FLAGS, BATCH_YOUNG_GENERATION_MB, batchFlagsToSet, batchYoungGenerationMb, tuneTieringForBatch } from "../../src/batch/tiering.js";

const names = (flags: readonly { name: string }[]): string[] => flags.map((flag) => flag.name);
const ALL = names(BATCH_V8_FLAGS);

describe("batchFlagsToSet", () => {
  test("sets every batch flag when the workers fill the cores and the user gave none", () => {
    expect(names(batchFlagsToSet(2, 2, "11.3.244.8-node.38", [], ""))).toEqual(ALL);
    expect(names(batchFlagsToSet(4, 2, "11.3.244.8-node.38", ["--enable-source-maps"], "--max-old-space-size=4096"))).toEqual(ALL);
  });

  test("sets none when a core is left for V8's compiler thread, or on an engine they were not measured on", () => {
    expect(batchFlagsToSet(1, 2, "11.3.244.8-node.38", [])).toEqual([]);
    expect(batchFlagsToSet(3, 4, "11.3.244.8-node.38", [])).toEqual([]);
    expect(batchFlagsToSet(2, 2, "12.4.254.21-node.33", [])).toEqual([]);
  });

  test("leaves a flag the process was started with, in its arguments or NODE_OPTIONS, in either spelling", () => {
    expect(names(batchFlagsToSet(2, 2, "11.3", ["--interrupt-budget=1000"]))).toEqual(["--max-inlined-bytecode-size-cumulative"]);
    expect(names(batchFlagsToSet(2, 2, "11.3", [], "--trace-opt --interrupt_budget=5000"))).toEqual(["--max-inlined-bytecode-size-cumulative"]);
    expect(batchFlagsToSet(2, 2, "11.3", ["--max-inlined-bytecode-size-cumulative=920", "--interrupt-budget=67584"])).toEqual([]);
  });

  test("a flag that only starts like a batch flag is another flag", () => {
    expect(names(batchFlagsToSet(2, 2, "11.3", ["--max-inlined-bytecode-size=100"]))).toEqual(ALL);
  });
});

describe("batchYoungGenerationMb", () => {
  test("sizes the workers' young generation unless the process was started with a young-generation flag", () => {
    expect(batchYoungGenerationMb([], "")).toBe(BATCH_YOUNG_GENERATION_MB);
    expect(batchYoungGenerationMb(["--enable-source-maps"], "--max-old-space-size=4096")).toBe(BATCH_YOUNG_GENERATION_MB);
    expect(batchYoungGenerationMb(["--max-semi-space-size=8"])).toBeUndefined();
    expect(batchYoungGenerationMb([], "--trace-gc --max_semi_space_size=64")).toBeUndefined();
    expect(batchYoungGenerationMb(["--min-semi-space-size=4"])).toBeUndefined();
  });
});

describe("tuneTieringForBatch", () => {
  // version strings of the engines package.json allows: Node 20's V8 11.3 (where the flags were measured) and Node 22's V8 12.4
  const V8_11 = "11.3.244.8-node.38";
  const V8_12 = "12.4.254.21-node.33";
  const batch = BATCH_V8_FLAGS.map((flag) => `${flag.name}=${flag.batch}`);
  const defaults = BATCH_V8_FLAGS.map((flag) => `${flag.name}=${flag.v8Default}`);

  test("on V8 11, sets the flags once for overlapping pools and puts V8's defaults back after the last one ends, once", () => {
    flagsSet.length = 0;
    const first = tuneTieringForBatch(64, V8_11);
    expect(flagsSet).toEqual(batch);
    const second = tuneTieringForBatch(64, V8_11);
    first();
    first();
    expect(flagsSet).toEqual(batch);
    second();
    expect(flagsSet).toEqual([...batch, ...defaults]);
    second();
    tuneTieringForBatch(1, V8_11)();
    expect(flagsSet).toEqual([...batch, ...defaults]);
  });

  test("on V8 12, sets nothing and puts nothing back, and a later pool on V8 11 still sets the flags", () => {
    flagsSet.length = 0;
    const first = tuneTieringForBatch(64, V8_12);
    const second = tuneTieringForBatch(64, V8_12);
    second();
    first();
    expect(flagsSet).toEqual([]);
    tuneTieringForBatch(64, V8_11)();
    expect(flagsSet).toEqual([...batch, ...defaults]);
  });
});
