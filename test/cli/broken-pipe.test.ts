import { spawn } from "node:child_process";
import { describe, expect, it } from "vitest";
import { BIN, ROOT, runCli } from "../helpers/run.js";

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
  // outputs far larger than a pipe's buffer (65,536 bytes on Linux, pipe(7)), so the reader is gone while headroom still
  // writes: check --json (4 MB), report (260 KB, written through writeOut), check --all (110 KB); held below, or the
  // test would pass with no broken pipe at all
  it.each(["check specs/residual-mlp-unscaled.yaml --json", "report specs/deep-relu-he.yaml", "check specs/transformer-encoder.yaml --all"])(
    "headroom %s ends without a stack trace, with the exit code it has when its output is read",
    async (command) => {
      const args = command.split(" ");
      const run = await runIntoClosedPipe(args);
      expect(run.stderr).toBe("");
      const read = runCli(args);
      expect(Buffer.byteLength(read.stdout)).toBeGreaterThan(65536);
      expect(run.code).toBe(read.status);
    },
  );
});
