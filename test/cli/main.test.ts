import { spawnSync } from "node:child_process";
import { describe, expect, it } from "vitest";
import { runCli, spawnFinished } from "../helpers/run.js";

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

  it("runs when dist/cli/main.js is the script itself, once", () => {
    const run = spawnFinished((timeout) => spawnSync(process.execPath, ["dist/cli/main.js", "--version"], { encoding: "utf8", timeout, killSignal: "SIGKILL" }), ["node dist/cli/main.js --version"]);
    const viaBin = runCli(["--version"]);
    expect(run.status).toBe(0);
    expect(run.stdout).toBe(viaBin.stdout);
    expect(run.stdout.trim()).toMatch(/^\d+\.\d+\.\d+/);
    expect(run.stderr).toBe("");
  });
});
