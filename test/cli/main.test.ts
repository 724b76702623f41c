import { describe, expect, it } from "vitest";
import { runCli } from "../helpers/run.js";

describe("headroom (the built binary)", () => {
  it("prints usage for --help and exits 0", () => {
    const run = runCli(["--help"]);
    expect(run.status).toBe(0);
    expect(run.stdout).toContain("Usage: headroom");
    expect(run.stderr).toBe("");
  });

  it("rejects an unknown command with exit code 2 and no stack trace", () => {
    const run = runCli(["no-such-command"]);
    expect(run.status).toBe(2);
    expect(run.stderr).toBe('headroom: unknown command "no-such-command"; see headroom --help\n');
    expect(run.stdout).toBe("");
    expect(run.stderr).not.toMatch(/\n\s+at /);
  });
});
