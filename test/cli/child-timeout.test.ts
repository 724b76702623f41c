/**
 * The tests' guard against a child that never exits (test/helpers/run.ts finished): spawnSync kills it at its timeout
 * and the test fails with the command named, instead of holding the suite.
 */
import { spawnSync } from "node:child_process";
import { describe, expect, it } from "vitest";
import { finished } from "../helpers/run.js";

describe("a spawned child that does not exit", () => {
  it("is killed at the timeout and reported by its command", () => {
    const command = [process.execPath, "-e", "setInterval(() => {}, 1000)"];
    const run = spawnSync(command[0] as string, command.slice(1), { encoding: "utf8", timeout: 300, killSignal: "SIGKILL" });
    expect(() => finished(run, ["node -e <a loop that never ends>"], 300)).toThrow("node -e <a loop that never ends>: no exit within 0.3 s; killed");
  });

  it("is returned as it is when it exits in time", () => {
    const run = spawnSync(process.execPath, ["-e", "process.exitCode = 3"], { encoding: "utf8", timeout: 60_000 });
    expect(finished(run, ["node -e <exit 3>"]).status).toBe(3);
  });
});
