import { spawnSync, type SpawnSyncReturns } from "node:child_process";
import { fileURLToPath } from "node:url";

/** The project's root folder. */
export const ROOT = fileURLToPath(new URL("../../", import.meta.url));

/** The built executable (tests run after `npm run build`). */
export const BIN = fileURLToPath(new URL("../../bin/headroom.js", import.meta.url));

/**
 * How long a spawned child may run before it is killed. spawnSync blocks the test's thread, so vitest's own timeout
 * cannot fire while it waits: without this, a child that never exits (Node 20's rare deadlock at exit under load,
 * DEVELOPERS.md) holds the whole suite until CI gives up. Far above any run the tests make (seconds).
 */
export const CHILD_TIMEOUT_MS = 300_000;

/** The run, or an error naming the command when the child was killed at its timeout (`timeoutMs`, as spawned). */
export function finished<T extends string | Buffer>(run: SpawnSyncReturns<T>, command: readonly string[], timeoutMs = CHILD_TIMEOUT_MS): SpawnSyncReturns<T> {
  if ((run.error as NodeJS.ErrnoException | undefined)?.code === "ETIMEDOUT") {
    throw new Error(`${command.join(" ")}: no exit within ${timeoutMs / 1000} s; killed`);
  }
  return run;
}

export interface CliRun {
  status: number | null;
  stdout: string;
  stderr: string;
}

/** Spawn the built binary with arguments and optional stdin; colour off, as in CI. */
export function runCli(args: readonly string[], options: { input?: string; cwd?: string } = {}): CliRun {
  const result = finished(
    spawnSync(process.execPath, [BIN, ...args], {
      cwd: options.cwd ?? ROOT,
      input: options.input ?? "",
      encoding: "utf8",
      env: { ...process.env, FORCE_COLOR: "0", NO_COLOR: "1" },
      maxBuffer: 256 * 1024 * 1024,
      timeout: CHILD_TIMEOUT_MS,
      killSignal: "SIGKILL",
    }),
    ["headroom", ...args],
  );
  return { status: result.status, stdout: result.stdout, stderr: result.stderr };
}
