import { spawn } from "node:child_process";
import { describe, expect, it } from "vitest";
import { BIN, ROOT } from "../helpers/run.js";

// A reader that stops early (`headroom check … | head -1`): the output pipe closes while headroom still writes. The
// command must end without a stack trace (a broken pipe is the reader's choice, not an error of ours; common practice
// for command-line tools).
function runIntoClosedPipe(args: readonly string[]): Promise<{ stderr: string; code: number | null }> {
  return new Promise((resolve) => {
    const child = spawn(process.execPath, [BIN, ...args], { cwd: ROOT, stdio: ["ignore", "pipe", "pipe"] });
    let stderr = "";
    child.stderr.on("data", (chunk: Buffer) => (stderr += chunk.toString()));
    // read the first chunk, then close our end as `head -c` would
    child.stdout.once("data", () => child.stdout.destroy());
    child.on("close", (code) => resolve({ stderr, code }));
  });
}

describe("output into a pipe the reader closes early", () => {
  it.each([
    ["check", "specs/transformer-encoder.yaml", "--all"],
    ["check", "specs/deep-relu-he.yaml", "--json"],
    ["explain", "specs/deep-relu-glorot.yaml", "classifier/activation-gradient"],
  ])("headroom %s %s %s ends without a stack trace", async (...args) => {
    const run = await runIntoClosedPipe(args);
    expect(run.stderr).not.toMatch(/Unhandled 'error' event|\n\s+at /);
    expect(run.stderr).toBe("");
    expect(run.code).not.toBe(3);
  });
});
