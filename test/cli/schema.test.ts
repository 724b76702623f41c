import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

describe("headroom schema (the built binary)", () => {
  it("prints the committed JSON Schema and exits 0", () => {
    const run = runCli(["schema"]);
    expect(run.status).toBe(0);
    expect(run.stderr).toBe("");
    const committed = readFileSync(new URL("../../specs/network-spec.schema.json", import.meta.url), "utf8");
    expect(run.stdout).toBe(committed);
    expect(JSON.parse(run.stdout)["$schema"]).toBe("http://json-schema.org/draft-07/schema#");
  });

  it("refuses an unexpected argument with exit code 2", () => {
    const run = runCli(["schema", "extra"]);
    expect(run.status).toBe(2);
    expect(run.stderr).not.toMatch(/\n\s+at /);
  });
});
