import { describe, expect, it } from "vitest";
import { renderCheckJson } from "../../src/report/check-json.js";
import type { CheckResult } from "../../src/risk/index.js";

describe("renderCheckJson", () => {
  it("writes non-finite numbers as null, at every depth, and ends with a newline", () => {
    // ECMA-262, SerializeJSONProperty: a Number that is not finite is serialized as "null"; the expected text is written
    // out by hand, not by JSON.stringify
    const result = { level: Number.POSITIVE_INFINITY, nested: { low: Number.NEGATIVE_INFINITY, list: [1.5, Number.NaN] } } as unknown as CheckResult;
    expect(renderCheckJson(result)).toBe('{\n  "level": null,\n  "nested": {\n    "low": null,\n    "list": [\n      1.5,\n      null\n    ]\n  }\n}\n');
  });
});
