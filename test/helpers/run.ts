import { spawnSync, type SpawnSyncReturns } from "node:child_process";
import { fileURLToPath } from "node:url";

/** The project's root folder. */
export const ROOT = fileURLToPath(new URL("../../", import.meta.url));

/** The built executable (tests run after `npm run build`). */
export const BIN = fileURLToPath(new URL("../../bin/headroom.js", import.meta.url));

/**
 * How long a spawned child may run before it is killed. spawnSync blocks the test's thread, so vitest's own timeout
 * cannot fire while it waits: without this, a child that never exits holds the whole suite until CI gives up. Far above
 * any run the tests make (the longest take seconds).
 */
export const CHILD_TIMEOUT_MS = 120_000;

/** The run, or an error naming the command when the child was killed at its timeout (`timeoutMs`, as spawned). */
export function finished<T extends string | Buffer>(run: SpawnSyncReturns<T>, command: readonly string[], timeoutMs = CHILD_TIMEOUT_MS): SpawnSyncReturns<T> {
  if (timedOut(run)) throw new Error(`${command.join(" ")}: no exit within ${timeoutMs / 1000} s; killed`);
  return run;
}

/**
 * `spawn(timeoutMs)` (a spawnSync with that timeout and SIGKILL), run once more where the child was killed at the
 * timeout: Node 20 itself deadlocks at exit now and then (DEVELOPERS.md, "a test that spawns the command line"), after
 * the command has done its work, and one such child failed a whole clean run of the suite. The second run is the one
 * the test reads; a second hang fails as {@link finished} does. The first is reported on stderr with the output it had
 * given, so a hang of our own (which repeats) is told apart from the engine's (which does not).
 */
export function spawnFinished<T extends string | Buffer>(
  spawn: (timeoutMs: number) => SpawnSyncReturns<T>,
  command: readonly string[],
  timeoutMs = CHILD_TIMEOUT_MS,
): SpawnSyncReturns<T> {
  const first = spawn(timeoutMs);
  if (!timedOut(first)) return first;
  console.warn(
    `${command.join(" ")}: no exit within ${timeoutMs / 1000} s (killed after ${first.stdout?.length ?? 0} characters of stdout and ` +
      `${first.stderr?.length ?? 0} of stderr); run once more`,
  );
  return finished(spawn(timeoutMs), command, timeoutMs);
}

function timedOut(run: SpawnSyncReturns<string | Buffer>): boolean {
  return (run.error as NodeJS.ErrnoException | undefined)?.code === "ETIMEDOUT";
}

export interface CliRun {
  status: number | null;
  stdout: string;
  stderr: string;
}

/** Spawn the built binary with arguments and optional stdin; colour off, as in CI. */
export function runCli(args: readonly string[], options: { input?: string; cwd?: string } = {}): CliRun {
  const result = spawnFinished(
    (timeout) =>
      spawnSync(process.execPath, [BIN, ...args], {
        cwd: options.cwd ?? ROOT,
        input: options.input ?? "",
        encoding: "utf8",
        env: { ...process.env, FORCE_COLOR: "0", NO_COLOR: "1" },
        maxBuffer: 256 * 1024 * 1024,
        timeout,
        killSignal: "SIGKILL",
      }),
    ["headroom", ...args],
  );
  return { status: result.status, stdout: result.stdout, stderr: result.stderr };
}
