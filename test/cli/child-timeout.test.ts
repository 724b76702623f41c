/**
 * The tests' guard against a child that never exits (test/helpers/run.ts finished, spawnFinished): spawnSync kills it
 * at its timeout and the test fails with the command named, instead of holding the suite; spawnFinished runs a child
 * killed so once more (Node 20's rare deadlock at exit does not repeat) and fails only when it hangs again.
 */
import { spawnSync } from "node:child_process";
import { describe, expect, it, vi } from "vitest";
import { finished, spawnFinished } from "../helpers/run.js";

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

  it("is run once more when killed at the timeout, and the second run is the one returned", () => {
    const runs: string[] = [];
    // what the hanging run wrote before it was killed: "done" (4) unless node had not started its script within the
    // 0.3 s (under load it had not, once)
    let written = -1;
    const warnings = vi.spyOn(console, "warn").mockImplementation(() => {});
    try {
      const run = spawnFinished((timeout) => {
        // the first run never ends (as a child caught in the deadlock), the second exits with 3; the second is given a
        // minute, since node's start alone can take more than the 0.3 s under load (it did at load ~7)
        const hangs = runs.length === 0;
        const script = hangs ? "process.stdout.write('done'); setInterval(() => {}, 1000)" : "process.exitCode = 3";
        runs.push(script);
        const child = spawnSync(process.execPath, ["-e", script], { encoding: "utf8", timeout: hangs ? timeout : 60_000, killSignal: "SIGKILL" });
        if (hangs) written = child.stdout.length;
        return child;
      }, ["node -e <hangs once>"], 300);
      expect(runs).toHaveLength(2);
      expect(run.status).toBe(3);
      expect(warnings).toHaveBeenCalledTimes(1);
      expect(String(warnings.mock.calls[0]?.[0])).toContain(`node -e <hangs once>: no exit within 0.3 s (killed after ${written} characters of stdout and 0 of stderr)`);
    } finally {
      warnings.mockRestore();
    }
  });

  it("fails naming the command when it is killed at the timeout twice", () => {
    let runs = 0;
    const warnings = vi.spyOn(console, "warn").mockImplementation(() => {});
    try {
      const hang = (timeout: number) => {
        runs++;
        return spawnSync(process.execPath, ["-e", "setInterval(() => {}, 1000)"], { encoding: "utf8", timeout, killSignal: "SIGKILL" });
      };
      expect(() => spawnFinished(hang, ["node -e <hangs always>"], 300)).toThrow("node -e <hangs always>: no exit within 0.3 s; killed");
      expect(runs).toBe(2);
    } finally {
      warnings.mockRestore();
    }
  });

  it("is run once only when it exits in time", () => {
    let runs = 0;
    const run = spawnFinished((timeout) => {
      runs++;
      return spawnSync(process.execPath, ["-e", "process.exitCode = 5"], { encoding: "utf8", timeout });
    }, ["node -e <exit 5>"]);
    expect(run.status).toBe(5);
    expect(runs).toBe(1);
  });
});
