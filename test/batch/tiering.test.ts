import { describe, expect, test } from "vitest";
import { BATCH_V8_FLAGS, batchFlagsToSet, tuneTieringForBatch } from "../../src/batch/tiering.js";

describe("batchFlagsToSet", () => {
  test("sets every batch flag when the user gave none", () => {
    expect(batchFlagsToSet([], "")).toEqual([...BATCH_V8_FLAGS]);
    expect(batchFlagsToSet(["--enable-source-maps"], "--max-old-space-size=4096")).toEqual([...BATCH_V8_FLAGS]);
  });

  test("leaves a flag the process was started with, in its arguments or NODE_OPTIONS, in either spelling", () => {
    expect(batchFlagsToSet(["--interrupt-budget=1000"])).toEqual(["--max-inlined-bytecode-size-cumulative=200"]);
    expect(batchFlagsToSet([], "--trace-opt --interrupt_budget=5000")).toEqual(["--max-inlined-bytecode-size-cumulative=200"]);
    expect(batchFlagsToSet(["--max-inlined-bytecode-size-cumulative=920", "--interrupt-budget=67584"])).toEqual([]);
  });

  test("a flag that only starts like a batch flag is another flag", () => {
    expect(batchFlagsToSet(["--max-inlined-bytecode-size=100"])).toEqual([...BATCH_V8_FLAGS]);
  });

  test("tuning twice is harmless", () => {
    expect(() => {
      tuneTieringForBatch();
      tuneTieringForBatch();
    }).not.toThrow();
  });
});
