/**
 * Only input errors exit with code 2: a RangeError from inside the engine is a failure of headroom (exit code 3,
 * "internal error"), as the exit codes of src/cli/errors.ts say. In process, with the library calls replaced by
 * ones that fail the way UpdateShares.reach once did (Float64Array.prototype.set's RangeError, ECMAScript §23.2.3.26).
 */
import { afterEach, beforeEach, describe, expect, it, vi, type MockInstance } from "vitest";

const BUG = "offset is out of bounds";

vi.mock("../../src/check.js", async (importOriginal) => {
  const actual = await importOriginal<typeof import("../../src/check.js")>();
  return {
    ...actual,
    check: vi.fn(() => {
      throw new RangeError(BUG);
    }),
  };
});
vi.mock("../../src/compare.js", async (importOriginal) => {
  const actual = await importOriginal<typeof import("../../src/compare.js")>();
  return {
    ...actual,
    comparePlans: vi.fn(() => {
      throw new RangeError(BUG);
    }),
  };
});
vi.mock("../../src/simulate/index.js", async (importOriginal) => {
  const actual = await importOriginal<typeof import("../../src/simulate/index.js")>();
  return {
    ...actual,
    simulate: vi.fn(() => {
      throw new RangeError(BUG);
    }),
  };
});

const { main } = await import("../../src/cli/main.js");

describe("a RangeError inside the engine is an internal error", () => {
  let stderr: MockInstance;
  let stdout: MockInstance;
  beforeEach(() => {
    stderr = vi.spyOn(process.stderr, "write").mockImplementation(() => true);
    stdout = vi.spyOn(process.stdout, "write").mockImplementation(() => true);
  });
  afterEach(() => {
    stderr.mockRestore();
    stdout.mockRestore();
  });
  const written = () => stderr.mock.calls.map(([text]) => String(text)).join("");

  it.each([["check"], ["compare"], ["simulate"]])("%s: exit 3, said to be headroom's own", async (command) => {
    expect(await main(["node", "headroom", command, "specs/deep-relu-he.yaml"])).toBe(3);
    expect(written()).toBe(`headroom: internal error: ${BUG}\n`);
  });

  it("check: an unknown --plan is still the user's (exit 2), found before the engine runs", async () => {
    expect(await main(["node", "headroom", "check", "--plan", "nope", "specs/deep-relu-he.yaml"])).toBe(2);
    expect(written()).toBe('headroom: specs/deep-relu-he.yaml: no plan named "nope" in the spec; its plans: mixed-binary16, all-bfloat16\n');
  });
});
