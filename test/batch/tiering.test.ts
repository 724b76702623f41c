import { describe, expect, test } from "vitest";
import { BATCH_V8_FLAGS, batchFlagsToSet, tuneTieringForBatch } from "../../src/batch/tiering.js";

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

describe("tuneTieringForBatch", () => {
  test("overlapping pools and repeated ends are harmless", () => {
    expect(() => {
      const first = tuneTieringForBatch(64);
      const second = tuneTieringForBatch(64);
      first();
      first();
      second();
      tuneTieringForBatch(1)();
    }).not.toThrow();
  });
});
