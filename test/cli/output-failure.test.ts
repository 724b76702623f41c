/**
 * Standard output that refuses what headroom writes. Linux's /dev/full answers every write with ENOSPC (full(4)), as a
 * full disk would: each command must say so on stderr and exit nonzero (2, as README's exit codes document), not end
 * with 0 as if its output were written, nor call it an internal error (3). A reader that closes the pipe early stays
 * quiet: test/cli/broken-pipe.test.ts.
 */
import { spawnSync } from "node:child_process";
import { closeSync, openSync } from "node:fs";
import { join } from "node:path";
import { afterAll, describe, expect, it } from "vitest";
import { BIN, ROOT, spawnFinished } from "../helpers/run.js";
import { encode, npyBytes, scratch } from "../measure/writers.js";

const files = scratch();
afterAll(() => files.cleanup());
const gains = files.write("gains.npy", npyBytes(1, "<f4", [4], encode("F32", [1, 1, 1, 1])));

function runIntoFullDevice(args: readonly string[]): { status: number | null; stderr: string } {
  const full = openSync("/dev/full", "w");
  try {
    const run = spawnFinished(
      (timeout) =>
        spawnSync(process.execPath, [BIN, ...args], {
          cwd: ROOT,
          stdio: ["ignore", full, "pipe"],
          encoding: "utf8",
          env: { ...process.env, FORCE_COLOR: "0", NO_COLOR: "1" },
          timeout,
          killSignal: "SIGKILL",
        }),
      ["headroom", ...args, "> /dev/full"],
    );
    return { status: run.status, stderr: run.stderr };
  } finally {
    closeSync(full);
  }
}

const REFUSED = "headroom: cannot write standard output: no space left on the device\n";

describe("standard output on a full device", () => {
  const commands: string[][] = [
    // plain writes at the end of a command
    ["check", "specs/deep-relu-he.yaml", "--json"],
    ["check", "specs/deep-relu-he.yaml"],
    ["compare", "specs/wide-classifier.yaml", "--json"],
    ["formats", "--json"],
    ["formats"],
    ["schema"],
    ["scan", gains, "--json", "--all"],
    ["--help"],
    // written and awaited (batch's rows, report's page), or streamed (round)
    ["batch", "specs/wide-classifier.yaml", "--jsonl"],
    ["batch", "specs/wide-classifier.yaml", "--csv"],
    ["report", "specs/wide-classifier.yaml"],
    ["round", "1", "0.1", "--to", "binary16"],
  ];
  it.each(commands.map((args) => [args.join(" ").replace(gains, "gains.npy"), args] as const))("headroom %s: one line naming the reason, exit code 2", (_, args) => {
    const run = runIntoFullDevice(args);
    expect(run.stderr).toBe(REFUSED);
    expect(run.status).toBe(2);
  });

  it("a verdict's exit code 1 gives way to the stricter 2; a command that writes nothing there is not failed by it", () => {
    const fails = runIntoFullDevice(["check", "specs/deep-sigmoid.yaml"]);
    expect(fails.stderr).toBe(REFUSED);
    expect(fails.status).toBe(2);
    const page = join(files.dir, "page.html");
    const written = runIntoFullDevice(["report", "specs/wide-classifier.yaml", "-o", page]);
    expect(written.stderr).toBe("");
    expect(written.status).toBe(0);
  });
});
